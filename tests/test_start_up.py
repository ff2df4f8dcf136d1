"""What each process imports before it works: the command line, the writer, the workers.

A run's fixed cost is mostly imports (numpy, pydantic, h5py, numba, pandas,
scipy), so each process loads only what it uses: the command line's parser
nothing heavy; the writer no numba (its workers run the batches), no scipy and no pandas;
worker processes start from a fork server that loaded the engines once
(``sim.parallel.start``), and neither it nor they load the config schema
(pydantic): a batch comes with its point's ``PointRun``, plain data. These are
checks of the import graph at run time, not timings (speed goes in
``broodline bench --scaling``)."""

import json
import subprocess
import sys
import time
from pathlib import Path

import pytest

from sim.parallel import ProcessPool
from sim.parallel.start import separate_workers, worker_context

ROOT = Path(__file__).resolve().parent.parent
HEAVY = ("pandas", "scipy", "numba", "h5py", "pydantic", "matplotlib", "mesa", "dask")


def _loaded_after(code: str) -> set[str]:
    probe = f"import sys, json\n{code}\nprint(json.dumps(sorted(m for m in {HEAVY!r} if m in sys.modules)))"
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                          check=True, timeout=120)
    return set(json.loads(done.stdout.strip().splitlines()[-1]))


def test_the_command_line_parser_imports_nothing_heavy():
    assert _loaded_after("from sim.cli import build_parser\nbuild_parser()") == set()


def test_python_dash_m_sim_help_imports_nothing_heavy():
    # the module a spawned worker imports as __mp_main__ when the writer is `python -m sim`
    assert _loaded_after("import runpy, sim.__main__") == set()


@pytest.mark.parametrize("workers", ["1", "2"])
def test_the_writer_imports_neither_numba_nor_scipy(tmp_path, workers):
    if not separate_workers(int(workers)):
        pytest.skip("one core: --workers 1 runs the batches in the writer")
    config = tmp_path / "c.toml"
    config.write_text(
        '[experiment]\nname = "w"\nseed = 1\nreplicates = 4\nmax_steps = 50\n'
        '[density]\nform = "beverton-holt"\nacts_on = "recruitment"\ncapacity = 30\n'
        '[[allele]]\nname = "a"\nbreeding = "iteroparous"\nfecundity = 2.0\n'
        'adult_survival = 0.5\njuvenile_survival = 0.5\n'
        '[[allele]]\nname = "b"\nbreeding = "semelparous"\nfecundity = 4.0\njuvenile_survival = 0.5\n'
        '[invasion]\nresident = "a"\nmutant = "b"\nmutant_count = 1\nresident_count = "equilibrium"\n')
    out = tmp_path / "r.h5"
    loaded = _loaded_after(
        "from sim.cli import main\n"
        f"assert main(['run', {str(config)!r}, '-o', {str(out)!r}, '--workers', {workers!r}, '--quiet']) == 0")
    # nor pandas: its import (0.3 s of CPU) would take a core from the workers; the summary
    # table is counted as batches come (sim.outcomes.summary_of)
    assert not {"numba", "scipy", "pandas"} & loaded
    assert {"h5py", "pydantic"} <= loaded  # the file, the config


def _modules_in_worker() -> list[str]:
    return sorted(m for m in (*HEAVY, "scipy.linalg") if m in sys.modules)


def _blas_importable() -> bool:
    import scipy.linalg.cython_blas  # noqa: F401

    return True


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
def test_workers_start_with_the_engines_loaded_by_the_fork_server():
    pool = ProcessPool(2)
    try:
        loaded = set(pool._executor.submit(_modules_in_worker).result(timeout=120))
        blas = pool._executor.submit(_blas_importable).result(timeout=120)
    finally:
        pool.shutdown()
    assert {"numba", "h5py"} <= loaded  # loaded once, in the server, before forking
    assert not {"pydantic", "pandas", "matplotlib"} & loaded
    # numba's check for a BLAS was answered without importing scipy.linalg (sim.parallel.warm),
    # and scipy.linalg imports as usual afterwards
    assert "scipy.linalg" not in loaded and blas


def _run_job_then_modules(job) -> tuple[int, list[str]]:
    from sim.parallel import run_job

    output = run_job(job)
    return len(output.results), _modules_in_worker()


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
@pytest.mark.parametrize("engine", ["individual", "counts"])
def test_a_worker_runs_a_batch_without_loading_the_config_schema(engine):
    # the job carries a PointRun (the life cycle, starting census and stop rule as plain data),
    # so unpickling it and running the batch imports no pydantic in the worker
    from sim.config import parse_config, sweep_points
    from sim.parallel import Batch, Job
    from sim.point_run import PointRun

    config = parse_config({
        "experiment": {"name": "w", "seed": 3, "replicates": 8, "max_steps": 200, "engine": engine},
        "density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 40.0},
        "allele": [{"name": "a", "breeding": "iteroparous", "fecundity": 2.0, "adult_survival": 0.5,
                    "juvenile_survival": 0.5},
                   {"name": "b", "breeding": "semelparous", "fecundity": 4.0, "juvenile_survival": 0.5}],
        "invasion": {"resident": "a", "mutant": "b", "mutant_count": 1, "resident_count": "equilibrium"},
    })
    job = Job(Batch(0, 0, 7), PointRun.of(sweep_points(config)[0]), config.experiment.seed)
    pool = ProcessPool(1)
    try:
        n, loaded = pool._executor.submit(_run_job_then_modules, job).result(timeout=120)
    finally:
        pool.shutdown()
    assert n == 8 and "pydantic" not in loaded


def _collector_and_blas() -> tuple[bool, int, str | None]:
    import gc
    import os

    return gc.isenabled(), gc.get_freeze_count(), os.environ.get("OPENBLAS_NUM_THREADS")


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
def test_workers_inherit_frozen_objects_a_running_collector_and_one_blas_thread():
    import os

    pool = ProcessPool(1)
    try:
        enabled, frozen, blas = pool._executor.submit(_collector_and_blas).result(timeout=120)
    finally:
        pool.shutdown()
    # the fork server froze what it loaded (the gc module's documentation: freeze before
    # forking) and left the collector running, so a worker collects its own garbage
    assert enabled and frozen > 10_000
    # one BLAS thread unless the caller's environment chose a number
    assert blas == os.environ.get("OPENBLAS_NUM_THREADS", "1")


def _pids() -> tuple[int, int]:
    import os

    return os.getpid(), os.getppid()


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
def test_workers_and_their_fork_server_leave_sigterm_to_the_writer_and_cancel_still_stops_them():
    # A batch scheduler's SIGTERM (and a terminal's Ctrl-C) may reach every process of the job:
    # the writer alone handles it (stops, keeps finished work, prints the resume command), so a
    # worker or the fork server must not die of it; cancelling the pool still stops the workers
    import os
    import signal

    pool = ProcessPool(1)
    try:
        worker, server = pool._executor.submit(_pids).result(timeout=120)
        for pid in (worker, server):
            os.kill(pid, signal.SIGTERM)
            os.kill(pid, signal.SIGINT)
        time.sleep(0.5)
        assert pool._executor.submit(_pids).result(timeout=60) == (worker, server)  # alive, same worker
    finally:
        pool.shutdown(cancel=True)
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            os.kill(worker, 0)
        except ProcessLookupError:
            break
        time.sleep(0.05)
    else:
        pytest.fail("a cancelled pool left its worker running")


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
def test_start_soon_starts_the_fork_server_before_it_returns_and_does_not_wait_for_its_load():
    # the server process exists when start_soon returns (not later, from a thread waiting for
    # the interpreter), while its load (sim.parallel.warm: numba, h5py) goes on in that process
    probe = ("import sys, threading\nfrom multiprocessing import forkserver\n"
             "from sim.parallel.start import start_soon\nstart_soon()\n"
             "pid = forkserver._forkserver._forkserver_pid\n"
             "print(pid is not None, threading.active_count(), 'numba' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                          check=True, timeout=120)
    assert done.stdout.split() == ["True", "1", "False"], done.stderr[-2000:]


def test_a_failed_load_leaves_the_collector_running():
    # the fork server swallows a preload's ImportError and goes on: the collector it paused
    # for the load must run again
    probe = ("import gc, sys\nsys.modules['sim.store.shards'] = None\n"
             "try:\n    import sim.parallel.warm\nexcept ImportError:\n    print(gc.isenabled())")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                          check=True, timeout=120)
    assert done.stdout.split() == ["True"], done.stderr[-2000:]


@pytest.mark.parametrize("given, expected", [(None, "1"), ("3", "3")])
def test_the_command_line_asks_for_one_blas_thread_unless_told(given, expected):
    import os

    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    if given is not None:
        env["OPENBLAS_NUM_THREADS"] = given
    probe = ("import os, sys\nfrom sim.cli import main\ntry:\n    main(['--version'])\n"
             "except SystemExit:\n    pass\nprint(os.environ['OPENBLAS_NUM_THREADS'], 'numpy' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                          env=env, check=True, timeout=120)
    # set before numpy was imported, which is when OpenBLAS reads it
    assert done.stdout.split() == [expected, "False"]


# A pool cancelled while its background thread is still starting a worker (a run whose config
# or results file is refused just after the pool was made). The second worker's start is
# slowed until the first worker sits idle in the task queue's read; the cancel must stop that
# worker too, else it waits forever for the lock its stopped sibling held, and so does the
# interpreter's exit. Run in a subprocess, so that a hang fails the test instead of the session.
_CANCEL_WHILE_STARTING = """
import threading, time
from multiprocessing import popen_forkserver
from sim.parallel.local import ProcessPool

if __name__ == "__main__":
    slow = threading.Event()
    launch = popen_forkserver.Popen._launch
    def slow_launch(self, process_obj):
        launch(self, process_obj)
        if slow.is_set():
            time.sleep(1.0)  # the worker runs; the pool has not listed it yet
    popen_forkserver.Popen._launch = slow_launch
    release = threading.Event()
    start_workers = ProcessPool._start_workers
    def late_start(self, workers):
        release.wait()
        start_workers(self, workers)
    ProcessPool._start_workers = late_start
    pool = ProcessPool(2)
    pool._executor.submit(time.sleep, 0).result()  # the first worker, now idle
    slow.set()
    release.set()  # the background thread starts the second worker, slowly
    time.sleep(0.3)
    pool.shutdown(cancel=True)
    print("cancelled")
"""


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
def test_a_pool_cancelled_while_a_worker_starts_leaves_no_worker_behind():
    import os
    import signal

    proc = subprocess.Popen([sys.executable, "-c", _CANCEL_WHILE_STARTING], cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    try:
        out, err = proc.communicate(timeout=60)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)  # the process and any worker left
        proc.communicate()
        pytest.fail("the process did not exit after cancelling its pool: a worker was left waiting")
    assert proc.returncode == 0 and "cancelled" in out, err[-2000:]


def test_the_command_ends_with_every_object_frozen_and_mains_exit_status(tmp_path):
    # `broodline` and `python -m sim` run entry_point: main's exit status, then gc.freeze(), so
    # that the interpreter's exit skips the collector's walk over every loaded module
    import tomllib

    scripts = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["scripts"]
    assert scripts == {"broodline": "sim.cli:entry_point"}
    probe = ("import gc, sys\nfrom sim.cli import entry_point\n"
             "sys.argv = ['broodline', 'check', sys.argv[1]]\n"
             "before = gc.get_freeze_count()\ncode = entry_point()\n"
             "print(code, before == 0, gc.get_freeze_count() > 10_000)")
    done = subprocess.run([sys.executable, "-c", probe, str(ROOT / "configs" / "demo.toml")],
                          capture_output=True, text=True, cwd=tmp_path, timeout=120)
    assert done.stdout.split()[-3:] == ["0", "True", "True"], done.stderr[-2000:]
