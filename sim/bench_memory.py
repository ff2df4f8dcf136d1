"""Peak memory of experiments of growing size: results stream to disk, so it should stay flat.

Each size runs in a fresh Python process (peak RSS only grows within a
process), the same small invasion experiment with more replicates. The
report gives each run's peak resident set size of the writing process (and
of its largest worker), the size of the results (uncompressed census counts,
what a writer holding the whole experiment would need), and the ratio to the
smallest run; a ratio near 1 across a tenfold growth in replicates, while
the data grow tenfold, is what streaming promises.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

__all__ = ["MemoryReport", "measure_memory", "measure_planning", "BENCH_CONFIG", "PLANNED"]

# A small population of two schedules run for a fixed 100 seasons, its census by allele and age
# (3 age classes) recorded every season: about 2.4 kB of trajectory per replicate.
BENCH_CONFIG = """
[experiment]
name = "bench-memory"
seed = 11
replicates = {replicates}
max_steps = 100
stop = "max-steps"
record_every = 1

[density]
form = "beverton-holt"
acts_on = "recruitment"
capacity = 25

[[allele]]
name = "perennial"
breeding = "iteroparous"
fecundity = 3.0
adult_survival = 0.7
juvenile_survival = 0.5
maturity_age = 3

[[allele]]
name = "one-shot"
breeding = "semelparous"
fecundity = 5.0
juvenile_survival = 0.5

[invasion]
resident = "perennial"
mutant = "one-shot"
"""

_CHILD = """
import json, resource, sys, time
import h5py
from sim.config import load_config
from sim.experiment import run_experiment
from sim.store import read_outcomes
if __name__ == "__main__":
    config, out, workers = sys.argv[1], sys.argv[2], int(sys.argv[3])
    start = time.perf_counter()
    run_experiment(load_config(config), out, workers=workers, progress=False, as_frame=False)
    seconds = time.perf_counter() - start
    print(json.dumps({
        "seconds": seconds,
        "rows": int(len(read_outcomes(out))),
        "records": int(h5py.File(out, "r")["trajectories/counts"].size),
        "writer_kib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
        "worker_kib": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss,
    }))
"""


@dataclass
class MemoryReport:
    """Peak RSS by experiment size; ``table`` has one row per size."""

    table: pd.DataFrame
    workers: int

    def __str__(self) -> str:
        t = self.table
        where = (f"{self.workers} worker processes" if self.workers > 1
                 else "1 process: the replicates run in the writer's process")
        lines = [f"peak memory by experiment size ({where}; one fresh process per size)"]
        with pd.option_context("display.width", 120, "display.float_format", "{:.2f}".format):
            lines.append(t.to_string(index=False))
        lines.append(f"writer peak RSS ratio, largest / smallest run: {t['writer_ratio'].iloc[-1]:.2f} "
                     f"for {t['replicates'].iloc[-1] / t['replicates'].iloc[0]:.0f}x the replicates")
        return "\n".join(lines)


def measure_memory(sizes=(1000, 10000), *, workers: int = 1) -> MemoryReport:
    """Run the bench experiment at each size in a fresh process; report peak RSS and ratios."""
    rows = []
    with tempfile.TemporaryDirectory(prefix="broodline-bench-memory-") as tmp:
        for n in sorted(sizes):
            config = Path(tmp) / f"bench-{n}.toml"
            config.write_text(BENCH_CONFIG.format(replicates=n))
            out = Path(tmp) / f"bench-{n}.h5"
            proc = subprocess.run([sys.executable, "-c", _CHILD, str(config), str(out), str(workers)],
                                  capture_output=True, text=True, check=False, cwd=Path(__file__).parent.parent)
            if proc.returncode != 0:
                raise RuntimeError(f"bench run of {n} replicates failed:\n{proc.stderr[-2000:]}")
            m = json.loads(proc.stdout.strip().splitlines()[-1])
            if m["rows"] != n:
                raise RuntimeError(f"bench run of {n} replicates wrote {m['rows']} rows")
            row = {"replicates": n, "seconds": m["seconds"],
                   "file_mib": out.stat().st_size / 2**20,
                   "data_mib": m["records"] * 4 / 2**20,  # the census counts, uncompressed
                   "writer_peak_mib": m["writer_kib"] / 1024}
            if workers > 1:  # with one worker the replicates run in the writer's own process
                row["worker_peak_mib"] = m["worker_kib"] / 1024
            rows.append(row)
            time.sleep(0.1)
    table = pd.DataFrame(rows)
    table["writer_ratio"] = table["writer_peak_mib"] / table["writer_peak_mib"].iloc[0]
    return MemoryReport(table, workers)


# Requested replicates whose planning is measured: ``check`` and the writer's setup must not
# grow with them (no mask over every replicate, no batch object per batch).
PLANNED = (10**4, 10**6, 10**9)

_PLAN_CHILD = """
import json, resource, sys
from itertools import islice
from sim.config import load_config
from sim.describe import describe_experiment, preflight
from sim.parallel import default_batch_size, iter_batches
from sim.store import ResultsWriter
if __name__ == "__main__":
    config = load_config(sys.argv[1])
    describe_experiment(config, budget=False)
    writer = ResultsWriter(sys.argv[2], config, preflight(config, budget=False))
    size = default_batch_size(writer.expected, 1, 30)
    first = list(islice(iter_batches(writer.missing(), size), 4))
    writer.release()
    print(json.dumps({"batches": len(first),
                      "peak_kib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}))
"""


def measure_planning(sizes=PLANNED) -> pd.DataFrame:
    """Peak RSS of ``check`` and of the writer planning the run, by requested replicates.

    Each size in a fresh process: the config is checked (budget lifted, as
    ``--no-budget`` does), the results file started, the missing replicates
    listed and the first batches planned; nothing runs. Returns one row per
    size with ``peak_mib`` and ``ratio`` to the smallest.
    """
    rows = []
    with tempfile.TemporaryDirectory(prefix="broodline-bench-planning-") as tmp:
        for n in sorted(sizes):
            config = Path(tmp) / f"plan-{n}.toml"
            config.write_text(BENCH_CONFIG.format(replicates=n))
            proc = subprocess.run([sys.executable, "-c", _PLAN_CHILD, str(config),
                                   str(Path(tmp) / f"plan-{n}.h5")], capture_output=True, text=True,
                                  check=False, cwd=Path(__file__).parent.parent)
            if proc.returncode != 0:
                raise RuntimeError(f"planning {n} replicates failed:\n{proc.stderr[-2000:]}")
            m = json.loads(proc.stdout.strip().splitlines()[-1])
            rows.append({"requested_replicates": n, "peak_mib": m["peak_kib"] / 1024})
    table = pd.DataFrame(rows)
    table["ratio"] = table["peak_mib"] / table["peak_mib"].iloc[0]
    return table
