"""``broodline bench --scaling``: one experiment on 1 worker and on every core, and where the time goes.

The experiment: an iteroparous resident (m = 2, adult survival 0.5, juvenile
survival 0.5) at its equilibrium under Beverton-Holt density dependence on
recruitment with K = 500, one semelparous mutant (m = 4.5), Poisson
offspring, every replicate run to fixation, no trajectories kept
(``trajectory = "none"``). Each engine (``individual``, ``counts``) runs it
with 1 worker and with every core this process may use
(``os.sched_getaffinity``), each run in a fresh process (the writer) with its
own workers, as ``broodline run`` would; and once more with a single
replicate, whose wall time is the fixed cost of a run. With ``rounds`` above
1 this is done that many times, the worker counts alternating (1 worker
first in odd rounds, last in even ones, so that a machine that slows down or
speeds up over the rounds favours neither), and the fastest run of each is
kept (the others were slowed by something else: the usual reading of
repeated timings, as in the ``timeit`` module's documentation), so that a
slow spell of a shared machine does not decide the speed-up. Each round's
runs are also compared with each other (``round_efficiencies``): a spell
slows neighbouring runs alike, so their median says how far the fastest
runs' efficiency is typical.

From one run's ``RunTimings`` (``sim.experiment``) and the workers'
``BatchClock`` of every batch:

- ``wall_s``: from starting the writer process to the merged file;
  ``speedup`` = wall on 1 worker / wall here, ``efficiency`` = speedup / workers;
- the fixed cost in phases: the writer's start-up (process and imports),
  until the first batch starts in a worker (with workers: until the fork
  server, started first as ``broodline run`` starts it, has loaded the
  engines and forked them), the workers' own start-up, and the tail after
  the last batch (merge);
- CPU time, which other programs' load does not stretch as it stretches wall
  time: every process's CPU seconds (``total_cpu_s``), the batches' own
  (``batch_cpu_s``), and ``cpu_efficiency`` = total CPU on 1 worker / total
  CPU here (the efficiency the overheads alone leave, on an idle machine);
- the writer: the share of the run during which the writing process records
  batches (``writer_busy_fraction``), its cost per replicate, and the worker
  count at which one writer would be busy all the time
  (``writer_saturates_at_workers`` = a worker's CPU time per replicate / the
  writer's per replicate); ``merge_saturates_at_workers`` the same for the
  merge, done while the writer waits for workers, by its thread and the
  threads that compress the file's chunks, whichever saturates first (past
  it the merge lags and finishes after the last batch); ``saver_saturates_at_workers`` is the
  writer's limit were it to write every shard (a dask cluster's workers
  that cannot see its disk send each shard's file, which its threads write);
- ``identical``: the results datasets hash the same as on 1 worker;
- the machine's own efficiency for the same work (``sim.bench_machine``): in
  each round, the experiment's batches simulated by one process alone and by
  as many processes as workers at once, loaded beforehand, with nothing of a
  run's start-up, writer or merge; ``share_of_machine`` is the median over
  rounds of a round's efficiency divided by the machine's in that round, the
  part of a shortfall that is the program's and not the machine's.
"""

from __future__ import annotations

import hashlib
import multiprocessing
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path

__all__ = ["DEFAULT_REPLICATES", "SCALING_ENGINES", "ScalingRecord", "ScalingReport", "SCALING_KEYS",
           "scaling_config", "results_hash", "run_scaling", "format_scaling"]

DEFAULT_REPLICATES = 50_000  # some 20 s of one core per engine on the 2-core development machine
SCALING_ENGINES = ("individual", "counts")
CAPACITY = 500


def scaling_config(engine: str, replicates: int, *, capacity: float = CAPACITY, seed: int = 17) -> dict:
    """The benchmark's experiment as a raw config (a dict, as TOML would give)."""
    return {
        "experiment": {"name": f"scaling-{engine}", "seed": seed, "replicates": replicates,
                       "max_steps": 100_000, "stop": "fixation", "engine": engine,
                       "trajectory": "none"},
        "density": {"form": "beverton-holt", "acts_on": "recruitment", "counted": "census",
                    "capacity": capacity},
        "offspring": {"distribution": "poisson"},
        "allele": [
            {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0, "adult_survival": 0.5,
             "juvenile_survival": 0.5},
            {"name": "one-shot", "breeding": "semelparous", "fecundity": 4.5, "juvenile_survival": 0.5},
        ],
        "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 1,
                     "resident_count": "equilibrium"},
    }


# What `bench --scaling --json` writes: one object per engine and worker count (documented in
# docs/commands.md from this table; tests/test_docs.py checks it against the keys written).
SCALING_KEYS = {
    "kind": '"scaling"',
    "engine": "the engine run",
    "workers": "worker processes (1, then every core this process may use)",
    "replicates": "replicates of the experiment",
    "batch_size": "replicates per batch (the default for this worker count)",
    "batches": "batches run",
    "wall_s": "seconds from starting the writing process to the merged results file",
    "speedup": "wall_s on 1 worker / wall_s here",
    "efficiency": "speedup / workers (1 is perfect)",
    "total_cpu_s": "CPU seconds of every process of the run (writer and workers)",
    "batch_cpu_s": "CPU seconds the batches took in the workers (simulating and saving their shards)",
    "cpu_efficiency": "total_cpu_s on 1 worker / total_cpu_s here: the efficiency the overheads "
                      "leave, which other programs' load does not hide",
    "startup_s": "the writing process's start-up: a fresh interpreter importing what a run needs",
    "startup_cpu_s": "CPU seconds of that start-up",
    "to_first_batch_s": "from the start of run_experiment until a worker starts the first batch",
    "worker_startup_cpu_s": "CPU seconds a worker process takes before its first batch (mean over "
                            "workers; a fork of the fork server, whose imports count in total_cpu_s; "
                            "null on 1 worker: the writer runs the batches)",
    "first_batch_extra_s": "how much longer a worker's first batch takes than its median batch "
                           "(loading compiled code; mean over workers)",
    "tail_s": "from the end of the last batch to the end of the run (the merge and the summary)",
    "merge_s": "seconds the merge of the shards into the results file took",
    "one_replicate_s": "wall_s of the same run with a single replicate: the fixed cost of a run",
    "fixed_cost_s": "wall_s - (batch seconds - the first batches' extra) / workers: the time not "
                    "spent simulating, per worker (on 1 worker, where the writer's first batch "
                    "loads the engines, that loading included)",
    "writer_busy_fraction": "share of wall_s during which the writing process records batches "
                            "or merges shards",
    "writer_per_replicate_s": "CPU seconds the writing process spends recording one replicate's batch",
    "merge_per_replicate_s": "CPU seconds the writing thread spends merging one replicate into the "
                             "results file (while it waits for workers, and at the end, creating "
                             "and committing the file included)",
    "compress_per_replicate_s": "CPU seconds the merge's compressing threads spend on one "
                                "replicate's rows (there are COMPRESS_THREADS of them, in "
                                "sim.store.chunks)",
    "merge_saturates_at_workers": "worker_per_replicate_s / the larger of merge_per_replicate_s and "
                                  "compress_per_replicate_s / COMPRESS_THREADS: past this many "
                                  "workers the merge falls behind and finishes after the last batch",
    "save_per_replicate_s": "CPU seconds a worker spends saving one replicate to its shard (building "
                            "the shard's file and writing it)",
    "write_per_replicate_s": "of which writing the built file: what the writer's threads do for a "
                             "worker that cannot see its disk (SAVE_THREADS of them, in "
                             "sim.store.writer)",
    "worker_per_replicate_s": "a worker's CPU seconds per replicate (its batches' CPU time / replicates)",
    "writer_saturates_at_workers": "worker_per_replicate_s / writer_per_replicate_s: workers at "
                                   "which the one writer would be busy all the time (null: never)",
    "saver_saturates_at_workers": "worker_per_replicate_s / the largest of writer + merge per "
                                  "replicate, write_per_replicate_s / SAVE_THREADS and "
                                  "compress_per_replicate_s / COMPRESS_THREADS: workers at which "
                                  "the writer would be busy all the time if it wrote every shard, "
                                  "as it does for dask workers that cannot see its disk",
    "results_hash": "SHA-256 (first 16 hex digits) of every dataset of the results file",
    "identical": "true when results_hash equals the 1-worker run's",
    "load": "the 1-minute load average when the run started (os.getloadavg)",
    "rounds": "runs of each worker count (alternating); the fastest is reported, for wall_s and "
              "one_replicate_s each",
    "round_efficiencies": "each round's efficiency: that round's 1-worker wall time / (its wall "
                          "time here x workers), one per round, in order (1 on 1 worker)",
    "median_efficiency": "the median of round_efficiencies",
    "machine_round_efficiencies": "each round's efficiency of the machine itself for this work: the "
                                  "batches simulated by one process alone / (by as many processes "
                                  "as workers at once x workers), engines loaded beforehand, no "
                                  "writer (1 on 1 worker)",
    "machine_efficiency": "the median of machine_round_efficiencies: the efficiency this machine "
                          "gives the work, the ceiling for a run's",
    "share_of_machine": "the median over rounds of round efficiency / machine efficiency: the "
                        "share of the machine's efficiency the program keeps (1 on 1 worker)",
}


@dataclass
class ScalingRecord:
    """One engine on one worker count (see ``SCALING_KEYS`` for each field)."""

    kind: str
    engine: str
    workers: int
    replicates: int
    batch_size: int
    batches: int
    wall_s: float
    speedup: float
    efficiency: float
    total_cpu_s: float
    batch_cpu_s: float
    cpu_efficiency: float
    startup_s: float
    startup_cpu_s: float
    to_first_batch_s: float
    worker_startup_cpu_s: float | None
    first_batch_extra_s: float
    tail_s: float
    merge_s: float
    one_replicate_s: float
    fixed_cost_s: float
    writer_busy_fraction: float
    writer_per_replicate_s: float
    merge_per_replicate_s: float
    compress_per_replicate_s: float
    merge_saturates_at_workers: float | None
    save_per_replicate_s: float
    write_per_replicate_s: float
    worker_per_replicate_s: float
    writer_saturates_at_workers: float | None
    saver_saturates_at_workers: float | None
    results_hash: str
    identical: bool
    load: float
    rounds: int = 1
    round_efficiencies: list[float] | None = None
    median_efficiency: float | None = None
    machine_round_efficiencies: list[float] | None = None
    machine_efficiency: float | None = None
    share_of_machine: float | None = None


@dataclass
class ScalingReport:
    """Everything one ``run_scaling`` measured."""

    records: list[ScalingRecord]
    cores: int
    cli_startup_s: float

    def to_records(self) -> list[dict]:
        return [asdict(r) for r in self.records]


def results_hash(path) -> str:
    """SHA-256 of every dataset of an HDF5 file (names, types, shapes and values; not the
    attributes, which hold the creation time): equal for identical results datasets."""
    import h5py
    import numpy as np

    digest = hashlib.sha256()

    def add(name, obj):
        if not isinstance(obj, h5py.Dataset):
            return
        data = obj[()]
        digest.update(f"{name}|{obj.dtype}|{obj.shape}|".encode())
        if data.dtype.kind == "O":
            digest.update(b"\0".join(v if isinstance(v, bytes) else str(v).encode() for v in data.ravel()))
        else:
            digest.update(np.ascontiguousarray(data).tobytes())

    with h5py.File(path, "r") as f:
        f.visititems(add)
    return digest.hexdigest()


def _run_in_child(conn, raw: dict, out: str, workers: int) -> None:
    """The writing process of one measured run (spawned: a fresh interpreter, as ``broodline run``)."""
    entered, entry_cpu = time.perf_counter(), time.process_time()
    from .parallel.start import separate_workers, start_soon

    in_process = not separate_workers(workers)
    if not in_process:  # as `broodline run` does: the workers' fork server loads while we import
        start_soon()
    from .config import parse_config
    from .experiment import RunTimings, run_experiment

    imported, import_cpu = time.perf_counter(), time.process_time()
    timings = RunTimings()
    try:
        # budget=False: to fixation, max_steps is a bound, not the work
        run_experiment(parse_config(raw), out, workers=workers, in_process=in_process,
                       progress=False, timings=timings, budget=False, as_frame=False)
    except Exception as err:
        conn.send({"error": f"{type(err).__name__}: {err}"})
        conn.close()
        return
    from .parallel.start import stop_fork_server

    stop_fork_server()  # its CPU time, and that of the workers it forked, is then in ours
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    conn.send({
        "entered": entered, "imported": imported, "startup_cpu": import_cpu,
        "entry_cpu": entry_cpu, "process_cpu": time.process_time(),
        "workers_cpu": children.ru_utime + children.ru_stime, "timings": timings,
    })
    conn.close()


def _measured_run(raw: dict, out: Path, workers: int) -> dict:
    """Run one experiment in a fresh process; its timings, with when the process was started."""
    context = multiprocessing.get_context("spawn")
    receive, send = context.Pipe(duplex=False)
    started = time.perf_counter()
    process = context.Process(target=_run_in_child, args=(send, raw, str(out), workers))
    process.start()
    send.close()
    try:
        measured = receive.recv()
    except EOFError:
        process.join()
        raise RuntimeError(f"the measured run ({workers} workers) failed with exit status "
                           f"{process.exitcode}") from None
    process.join()
    if "error" in measured:
        raise RuntimeError(f"the measured run ({workers} workers) failed: {measured['error']}")
    measured["spawned"] = started
    return measured


def _cli_startup() -> float:
    """Seconds ``python -m sim run --help`` takes: the command line's own imports."""
    started = time.perf_counter()
    subprocess.run([sys.executable, "-m", "sim", "run", "--help"], capture_output=True, check=True,
                   cwd=Path(__file__).resolve().parent.parent)
    return time.perf_counter() - started


def _record(engine: str, workers: int, replicates: int, run: dict, one: dict, base: dict | None,
            digest: str, load: float, rounds: int = 1,
            round_efficiencies: list[float] | None = None,
            machine_efficiencies: list[float] | None = None) -> ScalingRecord:
    t = run["timings"]
    clocks = t.batches
    wall = t.finished - run["spawned"]
    total_cpu = run["process_cpu"] + run["workers_cpu"]
    batch_cpu = sum(c.cpu for c in clocks)
    batch_wall = sum(c.finished - c.started for c in clocks)
    base_wall = wall if base is None else base["wall_s"]
    base_cpu = total_cpu if base is None else base["total_cpu_s"]
    per_worker: dict[int, list] = {}
    for c in sorted(clocks, key=lambda c: c.started):
        per_worker.setdefault(c.pid, []).append(c.finished - c.started)
    extra = [w[0] - statistics.median(w) for w in per_worker.values() if len(w) > 1]
    # a worker's CPU time when its first batch started (the pool's start-up probes may run
    # on a worker that has already run a batch, so they are not used for this)
    firsts: dict[int, float] = {}
    for c in sorted(clocks, key=lambda c: c.started):
        firsts.setdefault(c.pid, c.process_cpu)
    starts = list(firsts.values()) if t.workers else []
    # costs per replicate in CPU seconds: what saturates is a process's core, and CPU time is
    # not stretched by the writer and the workers sharing the cores of a small machine
    writer = t.writer_cpu_s / max(t.replicates, 1)
    worker = batch_cpu / max(t.replicates, 1)  # a worker's CPU seconds per replicate
    save = sum(c.save_cpu for c in clocks) / max(t.replicates, 1)
    busy = (t.writer_s + t.merge_run_s + t.merge_s) / wall
    merge = (t.merge_run_cpu_s + t.merge_cpu_s) / max(t.replicates, 1)
    from .store.chunks import COMPRESS_THREADS  # (h5py: not when the command line registers)
    from .store.writer import SAVE_THREADS

    compress = t.compress_cpu_s / max(t.replicates, 1)
    merging = max(merge, compress / COMPRESS_THREADS)  # the writing thread's, or its threads'
    write = sum(c.write_cpu for c in clocks) / max(t.replicates, 1)
    saving = max(writer + merge, write / SAVE_THREADS, compress / COMPRESS_THREADS)
    return ScalingRecord(
        kind="scaling", engine=engine, workers=workers, replicates=replicates,
        batch_size=t.batch_size, batches=len(clocks),
        wall_s=wall, speedup=base_wall / wall, efficiency=base_wall / wall / workers,
        total_cpu_s=total_cpu, batch_cpu_s=batch_cpu, cpu_efficiency=base_cpu / total_cpu,
        startup_s=run["imported"] - run["spawned"], startup_cpu_s=run["startup_cpu"],
        to_first_batch_s=min((c.started for c in clocks), default=t.finished) - t.started,
        worker_startup_cpu_s=statistics.fmean(starts) if starts else None,
        first_batch_extra_s=statistics.fmean(extra) if extra else 0.0,
        tail_s=t.finished - t.finished_batches, merge_s=t.merge_s,
        one_replicate_s=one["timings"].finished - one["spawned"],
        fixed_cost_s=wall - (batch_wall - sum(extra)) / workers,
        writer_busy_fraction=busy, writer_per_replicate_s=writer, merge_per_replicate_s=merge,
        compress_per_replicate_s=compress,
        merge_saturates_at_workers=worker / merging if merging > 0 else None, save_per_replicate_s=save,
        write_per_replicate_s=write,
        worker_per_replicate_s=worker,
        writer_saturates_at_workers=worker / writer if writer > 0 else None,
        saver_saturates_at_workers=worker / saving if saving > 0 else None,
        results_hash=digest[:16], identical=base is None or digest[:16] == base["results_hash"],
        load=load, rounds=rounds, round_efficiencies=round_efficiencies,
        median_efficiency=statistics.median(round_efficiencies) if round_efficiencies else None,
        machine_round_efficiencies=machine_efficiencies,
        machine_efficiency=statistics.median(machine_efficiencies) if machine_efficiencies else None,
        share_of_machine=(statistics.median(e / m for e, m in zip(round_efficiencies, machine_efficiencies,
                                                                  strict=True))
                          if round_efficiencies and machine_efficiencies else None),
    )


def run_scaling(*, replicates: int = DEFAULT_REPLICATES, workers: int | None = None,
                engines=SCALING_ENGINES, capacity: float = CAPACITY, rounds: int = 1,
                progress=None) -> ScalingReport:
    """Run the scaling benchmark: each engine on 1 worker and on ``workers`` (default: every
    core this process may use), each run in a fresh process; see the module's docstring.

    Parameters
    ----------
    replicates : int
        Replicates of the experiment (>= 1).
    workers : int, optional
        The larger worker count (default ``sim.parallel.default_workers()``).
    engines : sequence of str
    capacity : float
        K of the experiment.
    rounds : int
        Runs of each worker count, alternating; the fastest is kept, and each round's
        efficiency is reported (>= 1).
    progress : callable, optional
        Called with a line before each run.
    """
    from .bench_machine import machine_round
    from .parallel import default_workers

    if replicates < 1:
        raise ValueError(f"replicates must be >= 1; got {replicates}")
    if rounds < 1:
        raise ValueError(f"rounds must be >= 1; got {rounds}")
    cores = default_workers()
    most = cores if workers is None else workers
    if most < 1:
        raise ValueError(f"workers must be >= 1; got {most}")
    counts = sorted({1, most})
    say = progress or (lambda line: None)
    records = []
    with tempfile.TemporaryDirectory(prefix="broodline-scaling-") as folder:
        for engine in engines:
            raw, one_raw = (scaling_config(engine, n, capacity=capacity) for n in (replicates, 1))
            fastest: dict[int, tuple] = {}  # workers -> (its fastest run, that file's hash, load)
            fastest_one: dict[int, dict] = {}  # workers -> its fastest one-replicate run
            walls: dict[int, list[float]] = {n: [] for n in counts}  # workers -> each round's wall
            machine: list[float] = []  # each round's machine efficiency on `most` processes
            for round_ in range(1, rounds + 1):
                of = f" (round {round_} of {rounds})" if rounds > 1 else ""
                for n in (counts if round_ % 2 else counts[::-1]):
                    say(f"{engine}, {replicates} replicates at K = {capacity:g} on {n} "
                        f"worker{'s' * (n > 1)}{of}")
                    load = os.getloadavg()[0]
                    out, one_out = (Path(folder) / f"{engine}-{n}{end}.h5" for end in ("", "-one"))
                    run = _measured_run(raw, out, n)
                    one = _measured_run(one_raw, one_out, n)
                    walls[n].append(_wall(run))
                    if n not in fastest or _wall(run) < _wall(fastest[n][0]):
                        fastest[n] = (run, results_hash(out), load)
                    if n not in fastest_one or _wall(one) < _wall(fastest_one[n]):
                        fastest_one[n] = one
                    out.unlink()
                    one_out.unlink()
                if most > 1:  # after the runs, in the order opposite to this round's runs
                    say(f"{engine}: the machine's own efficiency, the same batches alone and on "
                        f"{most} processes at once{of}")
                    machine.append(machine_round(raw, most, fastest[most][0]["timings"].batch_size,
                                                 alone_first=round_ % 2 == 0).efficiency)
            base = None
            for n in counts:
                run, digest, load = fastest[n]
                paired = [w1 / (w * n) for w1, w in zip(walls[1], walls[n], strict=True)]
                record = _record(engine, n, replicates, run, fastest_one[n], base, digest, load,
                                 rounds, paired, machine if n > 1 else [1.0] * rounds)
                if base is None:
                    base = asdict(record)
                records.append(record)
    return ScalingReport(records, cores, _cli_startup())


def _wall(run: dict) -> float:
    return run["timings"].finished - run["spawned"]


def format_scaling(report: ScalingReport) -> str:
    """The report as a table, with the verdict on identical results and the writer's limit."""
    from .store.chunks import COMPRESS_THREADS

    rounds = max((r.rounds for r in report.records), default=1)
    fastest = f"; the fastest of {rounds} runs each, alternating" if rounds > 1 else ""
    lines = [f"broodline bench --scaling: K = {CAPACITY} invasion (Beverton-Holt on recruitment, one "
             f"mutant, to fixation, no trajectories); {report.cores} cores available; each run in a "
             f"fresh process{fastest}.", ""]
    head = (f"{'engine':<11}{'workers':>8}{'reps':>11}{'wall s':>9}{'speed-up':>10}{'effic.':>8}"
            f"{'CPU s':>8}{'CPU eff.':>9}{'fixed s':>9}{'1-rep s':>9}{'writer busy':>12}{'load':>6}")
    lines.append(head)
    for r in report.records:
        lines.append(f"{r.engine:<11}{r.workers:>8}{r.replicates:>11,}{r.wall_s:>9.2f}{r.speedup:>10.2f}"
                     f"{r.efficiency:>8.2f}{r.total_cpu_s:>8.1f}{r.cpu_efficiency:>9.2f}"
                     f"{r.fixed_cost_s:>9.2f}{r.one_replicate_s:>9.2f}{r.writer_busy_fraction:>12.3f}"
                     f"{r.load:>6.1f}")
    paired = [r for r in report.records if r.workers > 1 and r.round_efficiencies and rounds > 1]
    if paired:
        lines += ["", "Efficiency round by round (a round's run against that round's 1-worker run):",
                  f"{'engine':<11}{'workers':>8}{'median':>8}{'lowest':>8}{'highest':>8}  each round"]
        for r in paired:
            each = " ".join(f"{e:.2f}" for e in r.round_efficiencies)
            lines.append(f"{r.engine:<11}{r.workers:>8}{r.median_efficiency:>8.2f}"
                         f"{min(r.round_efficiencies):>8.2f}{max(r.round_efficiencies):>8.2f}  {each}")
    measured = [r for r in report.records if r.workers > 1 and r.machine_round_efficiencies]
    if measured:
        lines += ["", "The machine's own efficiency for this work (the same batches alone and on as many "
                  "processes at once, engines loaded first, no writer), and the share of it a run keeps:",
                  f"{'engine':<11}{'workers':>8}{'machine':>8}{'lowest':>8}{'highest':>8}{'share':>7}"
                  "  each round"]
        for r in measured:
            each = " ".join(f"{e:.2f}" for e in r.machine_round_efficiencies)
            lines.append(f"{r.engine:<11}{r.workers:>8}{r.machine_efficiency:>8.2f}"
                         f"{min(r.machine_round_efficiencies):>8.2f}"
                         f"{max(r.machine_round_efficiencies):>8.2f}{r.share_of_machine:>7.2f}  {each}")
    lines += ["", "Fixed cost by phase (seconds; CPU seconds where marked):",
              f"{'engine':<11}{'workers':>8}{'start-up':>9}{'(CPU)':>7}{'to 1st batch':>13}"
              f"{'worker start (CPU)':>19}{'1st batch extra':>16}{'tail':>7}{'merge':>7}"]
    for r in report.records:
        worker_start = "-" if r.worker_startup_cpu_s is None else f"{r.worker_startup_cpu_s:.2f}"
        lines.append(f"{r.engine:<11}{r.workers:>8}{r.startup_s:>9.2f}{r.startup_cpu_s:>7.2f}"
                     f"{r.to_first_batch_s:>13.2f}{worker_start:>19}{r.first_batch_extra_s:>16.3f}"
                     f"{r.tail_s:>7.2f}{r.merge_s:>7.2f}")
    lines += ["", "The writer (CPU microseconds per replicate; saturation in workers):",
              f"{'engine':<11}{'workers':>8}{'worker':>8}{'writer':>8}{'merge':>8}{'compress':>9}{'saving':>8}{'(write)':>8}"
              f"{'writer sat.':>12}{'merge sat.':>11}{'if it saved':>12}"]

    def at(value):
        return "never" if value is None else f"{value:,.0f}"

    for r in report.records:
        lines.append(f"{r.engine:<11}{r.workers:>8}{r.worker_per_replicate_s * 1e6:>8.1f}"
                     f"{r.writer_per_replicate_s * 1e6:>8.1f}{r.merge_per_replicate_s * 1e6:>8.1f}"
                     f"{r.compress_per_replicate_s * 1e6:>9.1f}"
                     f"{r.save_per_replicate_s * 1e6:>8.1f}{r.write_per_replicate_s * 1e6:>8.1f}"
                     f"{at(r.writer_saturates_at_workers):>12}"
                     f"{at(r.merge_saturates_at_workers):>11}{at(r.saver_saturates_at_workers):>12}")
    same = all(r.identical for r in report.records)
    lines += ["", "results datasets identical across worker counts: " + ("yes" if same else
              "NO: " + ", ".join(f"{r.engine} on {r.workers}" for r in report.records if not r.identical)),
              f"command-line start-up (`python -m sim run --help`): {report.cli_startup_s:.2f} s",
              "wall s: writer process start to merged file; effic. = speed-up / workers; CPU eff. = "
              "CPU s on 1 worker / CPU s here (load does not hide it); fixed s = wall - (batch time - "
              "first batches' extra) / "
              "workers; writer sat.: workers at which recording batches would keep the writer busy; merge: "
              f"the writing thread's, compress: its {COMPRESS_THREADS} threads' together; merge "
              "sat.: past it the merge finishes after the last batch; if it saved: the writer's limit "
              "were it also to write every shard, as for dask workers that cannot see its disk (they "
              "build the shard's file; its threads write it)."]
    return "\n".join(lines)
