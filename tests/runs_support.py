"""Shared helpers for the tests of long experiments (sweeps, workers, resume, cluster, status)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np

from sim.config import parse_config

ROOT = Path(__file__).resolve().parent.parent

# A small invasion sweep: 2 x 2 points, a few dozen individuals, fast to run.
SMALL = """
[experiment]
name = "small-sweep"
seed = 4242
replicates = {replicates}
max_steps = 300
record_every = {record_every}
trajectory = "{trajectory}"

[density]
form = "beverton-holt"
acts_on = "recruitment"
capacity = 25

[[allele]]
name = "perennial"
breeding = "iteroparous"
fecundity = 2.0
adult_survival = 0.5
juvenile_survival = 0.5

[[allele]]
name = "one-shot"
breeding = "semelparous"
fecundity = 5.0
juvenile_survival = 0.5

[invasion]
resident = "perennial"
mutant = "one-shot"

[sweep]
"density.capacity" = [15, 25]

[[sweep.linked]]
"allele.one-shot.fecundity" = [4.5, 6.0]
"allele.one-shot.juvenile_survival" = [0.5, 0.45]
"""


def small_text(replicates: int = 12, record_every: int = 2, trajectory: str = "by-age") -> str:
    return SMALL.format(replicates=replicates, record_every=record_every, trajectory=trajectory)


def small_config(**kw):
    import tomllib

    return parse_config(tomllib.loads(small_text(**kw)))


def write_config(folder: Path, name: str = "small.toml", **kw) -> Path:
    path = Path(folder) / name
    path.write_text(small_text(**kw))
    return path


def datasets(path) -> dict:
    """Every dataset of an HDF5 file by name, as numpy arrays."""
    out = {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: out.__setitem__(name, obj[()])
                     if isinstance(obj, h5py.Dataset) else None)
    return out


def assert_same_datasets(a, b) -> None:
    """Two results files hold the same datasets: names, dtypes, shapes and values."""
    da, db = datasets(a), datasets(b)
    assert sorted(da) == sorted(db)
    for name in da:
        assert da[name].dtype == db[name].dtype, name
        assert da[name].shape == db[name].shape, name
        assert np.array_equal(da[name], db[name]), name


def env() -> dict:
    e = dict(os.environ)
    e["PYTHONPATH"] = str(ROOT) + os.pathsep + e.get("PYTHONPATH", "")
    return e


def cli(*args, timeout: float = 120) -> subprocess.CompletedProcess:
    """``python -m sim ARGS`` in a fresh process, from the worktree root."""
    return subprocess.run([sys.executable, "-m", "sim", *map(str, args)], capture_output=True,
                          text=True, cwd=ROOT, env=env(), timeout=timeout, check=False)


def wait_for(condition, *, timeout: float = 60.0, what: str = "condition") -> None:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if condition():
            return
        time.sleep(0.02)
    raise AssertionError(f"timed out waiting for {what}")


REPLICATES, BATCH = 12, 3  # the stopped runs: 4 points x 4 batches = 16 shards

# Runs `broodline run` in a real process, with one step of the writer made to stop (sleep) at a
# chosen moment, announced by a marker file; the test then kills the process with SIGKILL.
DRIVER = r'''
import os, sys, time
from pathlib import Path
import sim.store as store
import sim.store.durable as durable

# the stop applies in the writer and in its spawned workers (which save their own shards): they
# import this file as __mp_main__ and read it from the environment they inherit
if __name__ == "__main__":
    os.environ["BROODLINE_TEST_STOP"] = "\n".join(sys.argv[1:4])
spec = os.environ.get("BROODLINE_TEST_STOP", "").split("\n")
where, n, marker = (spec[0], int(spec[1]), Path(spec[2])) if len(spec) == 3 else ("", 0, None)
calls = {"n": 0}

def stop_here():
    marker.write_text(str(os.getpid()))
    time.sleep(600)

def nth():
    calls["n"] += 1
    return calls["n"] == n

W = store.ResultsWriter
if where == "before-any-shard":
    import sim.store.shards as shards
    def patched(target, rows, image=None):
        stop_here()
    shards.save_shard = patched
elif where == "mid-shard-write":  # the .tmp shard half written to disk
    original = durable._write_file
    def patched(path, data):
        if nth():
            with open(path, "wb") as f:
                f.write(data[: len(data) // 2])
            stop_here()
        original(path, data)
    durable._write_file = patched
elif where == "shard-not-renamed":  # the .tmp shard complete and fsynced, not yet renamed
    original = durable._commit
    def patched(tmp, path):
        if path.parent.name.endswith(".parts") and nth():
            stop_here()
        original(tmp, path)
    durable._commit = patched
elif where == "between-shards":
    original = durable._commit
    def patched(tmp, path):
        original(tmp, path)
        if path.parent.name.endswith(".parts") and nth():
            stop_here()
    durable._commit = patched
elif where == "mid-merge":  # every row in the merged .tmp file, not yet marked complete nor renamed
    import sim.store.writer as writer
    def patched(self):
        self._write()
        stop_here()
    writer._MergedFile.commit = patched
elif where == "merging-during-run":  # the merged .tmp file holds the first shards, the run goes on
    import sim.store.writer as writer
    original = writer._MergedFile._add
    def patched(self, rows):
        original(self, rows)
        if nth():
            self._write()
            stop_here()
    writer._MergedFile._add = patched
elif where == "slow-commits":  # every shard takes a while: time to press Ctrl-C mid-run
    original = durable._commit
    def patched(tmp, path):
        time.sleep(0.15)
        original(tmp, path)
    durable._commit = patched
elif where == "merged-before-cleanup":  # the merged file in place, the shards not yet removed
    original = W._remove_parts
    def patched(self):
        stop_here()
    W._remove_parts = patched

if __name__ == "__main__":  # spawned worker processes import this file too
    from sim.cli import main
    sys.exit(main(sys.argv[4:]))
'''


def _one_core() -> None:
    os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})


def start_stopped_run(tmp_path, where, n=1, workers=1, options=()):
    """Start a run that stops at ``where``; return (process, config path, output path) once it has stopped there.

    ``options``: more command-line options of ``run`` (e.g. ``["--resume"]``). With one
    worker the run is held to one core, so that its batches run in the writing process (as
    ``sim.parallel.start.separate_workers`` says) and ``n`` counts that process's calls.
    """
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tmp_path / "run.h5"
    marker = tmp_path / "stopped"
    marker.unlink(missing_ok=True)
    driver = tmp_path / "driver.py"
    driver.write_text(DRIVER)
    proc = subprocess.Popen(
        [sys.executable, str(driver), where, str(n), str(marker), "run", str(config), "-o", str(out),
         "--workers", str(workers), "--batch-size", str(BATCH), "--quiet", *options],
        cwd=ROOT, env=env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        preexec_fn=_one_core if workers == 1 and hasattr(os, "sched_setaffinity") else None)
    try:
        wait_for(lambda: marker.exists() or proc.poll() is not None, what=f"the run to reach {where}")
    except AssertionError:
        proc.kill()
        raise
    assert proc.poll() is None, proc.communicate()[1].decode()[-2000:]
    return proc, config, out


def kill9(proc):
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    proc.stdout.close()
    proc.stderr.close()


