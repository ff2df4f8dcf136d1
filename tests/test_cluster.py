"""The dask engine: the same datasets as one local process; clear refusals when it cannot run."""

import builtins
import socket

import pytest

from sim.cli import main
from sim.experiment import run_experiment
from sim.parallel import ClusterError
from sim.store import ResultsWriter
from tests.runs_support import assert_same_datasets, small_config

distributed = pytest.importorskip("distributed")


def test_local_cluster_gives_the_datasets_of_one_process(tmp_path, monkeypatch):
    config = small_config(replicates=10)
    reference = tmp_path / "one.h5"
    run_experiment(config, reference, workers=1, progress=False)
    out = tmp_path / "dask.h5"

    def saved_by_the_writer(self, results):
        raise AssertionError("a worker that sees the writer's disk saves its own shard")

    # these workers share this machine's disk: they save every batch themselves
    monkeypatch.setattr(ResultsWriter, "write", saved_by_the_writer)
    monkeypatch.setattr(ResultsWriter, "write_rows", saved_by_the_writer)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        run_experiment(config, out, cluster=cluster.scheduler_address, batch_size=3, progress=False)
    assert_same_datasets(reference, out)


def test_workers_that_cannot_see_the_disk_send_shard_files_the_writer_writes(tmp_path, monkeypatch):
    # a dask worker on another machine: no probe file in sight, so it sends its rows and the
    # shard file built from them; the writer writes the bytes and merges the same datasets
    from sim.store import ShardTarget

    config = small_config(replicates=10)
    reference = tmp_path / "one.h5"
    run_experiment(config, reference, workers=1, progress=False)
    images = []
    original = ResultsWriter.write_rows

    def counted(self, rows, image=None):
        images.append(image)
        original(self, rows, image)

    monkeypatch.setattr(ShardTarget, "reachable", lambda self: False)
    monkeypatch.setattr(ResultsWriter, "write_rows", counted)
    out = tmp_path / "dask.h5"
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        run_experiment(config, out, cluster=cluster.scheduler_address, batch_size=3, progress=False)
    assert images and all(isinstance(image, bytes) for image in images)
    assert_same_datasets(reference, out)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_unreachable_scheduler_is_a_clear_error_and_touches_nothing(tmp_path, capsys):
    config = tmp_path / "c.toml"
    from tests.runs_support import small_text

    config.write_text(small_text())
    out = tmp_path / "out.h5"
    address = f"tcp://127.0.0.1:{_free_port()}"
    assert main(["run", str(config), "-o", str(out), "--cluster", address]) == 2
    err = capsys.readouterr().err
    assert f"cannot reach the dask scheduler at '{address}'" in err and "Traceback" not in err
    assert not out.exists()
    assert main(["run", str(config), "-o", str(out), "--cluster", "tcp://no such host:x"]) == 2
    assert "is not a dask scheduler address" in capsys.readouterr().err
    assert main(["run", str(config), "-o", str(out), "--cluster", address, "--workers", "2"]) == 2
    assert "--workers applies to local runs" in capsys.readouterr().err


def test_without_dask_the_option_says_how_to_install_it(tmp_path, monkeypatch):
    real_import = builtins.__import__

    def no_dask(name, *args, **kwargs):
        if name == "distributed" or name.startswith(("distributed.", "dask")):
            raise ImportError(f"No module named {name!r}")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(ClusterError, match=r"pip install 'broodline\[cluster\]'"):
        run_experiment(small_config(), tmp_path / "x.h5", cluster="tcp://127.0.0.1:8786")
    assert not (tmp_path / "x.h5").exists()


def test_a_lost_worker_batch_is_rerun_without_duplicate_rows(tmp_path):
    # worker processes: one is killed while the experiment runs; the scheduler re-runs its
    # batch elsewhere and the result still arrives once
    import os
    import signal
    import threading

    from sim.store import parts_dir, read_replicates

    config = small_config(replicates=60)
    reference = tmp_path / "one.h5"
    run_experiment(config, reference, workers=1, progress=False)
    out = tmp_path / "dask.h5"
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        pids = list(client.run(os.getpid).values())
        killed = []

        def kill_one_worker():
            while not parts_dir(out).exists() or len(list(parts_dir(out).glob("p*.h5"))) < 3:
                if killed == ["stop"]:
                    return
                threading.Event().wait(0.02)
            os.kill(pids[0], signal.SIGKILL)
            killed.append(pids[0])

        killer = threading.Thread(target=kill_one_worker, daemon=True)
        killer.start()
        try:
            run_experiment(config, out, cluster=cluster.scheduler_address, batch_size=2, progress=False)
        finally:
            killed.append("stop")
            killer.join(5)
    assert killed and killed[0] == pids[0], "the worker was not killed during the run"
    reps = read_replicates(out)
    assert not reps.duplicated(["point", "replicate"]).any()
    assert_same_datasets(reference, out)


def test_scheduler_file_gives_the_address(tmp_path):
    import json

    from sim.parallel.cluster import _scheduler_address

    f = tmp_path / "scheduler.json"
    f.write_text(json.dumps({"type": "Scheduler", "address": "tcp://10.0.0.7:8786"}))
    assert _scheduler_address(str(f)) == "tcp://10.0.0.7:8786"
    assert _scheduler_address("tcp://h:1") == "tcp://h:1"
    f.write_text("{}")
    with pytest.raises(ClusterError, match="cannot read a scheduler address from"):
        _scheduler_address(str(f))
    with pytest.raises(ClusterError, match="scheduler file '.*missing.json' not found"):
        _scheduler_address(str(tmp_path / "missing.json"))


def test_all_workers_gone_is_said_and_the_run_goes_on_when_they_return(tmp_path, monkeypatch, caplog):
    # Issue 11: with every worker gone the run used to wait without a word. It now says so
    # after NO_WORKERS_WARNING_AFTER seconds (shortened here), how to stop and resume, and
    # finishes with the same datasets once a worker joins again.
    import logging
    import threading

    import sim.parallel.cluster as cluster_module
    from sim.store import parts_dir

    monkeypatch.setattr(cluster_module, "NO_WORKERS_WARNING_AFTER", 0.5)
    monkeypatch.setattr(cluster_module, "NO_WORKERS_CHECK_EVERY", 0.1)
    config = small_config(replicates=40)
    reference = tmp_path / "one.h5"
    run_experiment(config, reference, workers=1, progress=False)
    out = tmp_path / "dask.h5"
    caplog.set_level(logging.WARNING, logger="sim.parallel.cluster")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        done = threading.Event()

        def drop_then_return_the_workers():
            while not done.is_set() and (not parts_dir(out).exists()
                                         or len(list(parts_dir(out).glob("p*.h5"))) < 2):
                done.wait(0.01)
            cluster.scale(0)
            while not done.is_set() and "no dask worker" not in caplog.text:
                done.wait(0.05)
            cluster.scale(1)

        helper = threading.Thread(target=drop_then_return_the_workers, daemon=True)
        helper.start()
        try:
            run_experiment(config, out, cluster=cluster.scheduler_address, batch_size=2, progress=False)
        finally:
            done.set()
            helper.join(10)
    text = caplog.text
    assert f"no dask worker has been connected to {cluster.scheduler_address}" in text
    assert "--resume" in text and "workers are back" in text
    assert_same_datasets(reference, out)


def test_scheduler_killed_mid_run_ends_in_one_line_and_resumes(tmp_path):
    # Issue 11: a scheduler killed mid-run printed two of distributed's tracebacks before our
    # last line. In separate processes (scheduler, one worker, `broodline run`): kill -9 the
    # scheduler once shards exist; the run ends with exit status 2 and our line only, and
    # `--resume` on a new scheduler gives the datasets of an uninterrupted run.
    import signal
    import subprocess
    import sys

    from sim.store import parts_dir
    from tests.runs_support import ROOT, env, wait_for, write_config

    config = write_config(tmp_path, replicates=150)
    reference = tmp_path / "one.h5"
    run_experiment(small_config(replicates=150), reference, workers=1, progress=False)
    out = tmp_path / "dask.h5"

    def start_cluster():
        port = _free_port()
        address = f"tcp://127.0.0.1:{port}"
        scheduler = subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
             "--port", str(port), "--dashboard-address", ":0"], cwd=ROOT, env=env(),
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        worker = subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nthreads", "1",
             "--nworkers", "1", "--no-nanny", "--dashboard-address", ":0"], cwd=ROOT, env=env(),
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        return address, scheduler, worker

    address, scheduler, worker = start_cluster()
    try:
        wait_for(lambda: _accepts(address), timeout=60, what="scheduler")
        run = subprocess.Popen([sys.executable, "-m", "sim", "run", str(config), "-o", str(out),
                                "--cluster", address, "--batch-size", "2", "--quiet"],
                               cwd=ROOT, env=env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True)
        wait_for(lambda: parts_dir(out).exists() and len(list(parts_dir(out).glob("p*.h5"))) >= 3
                 or run.poll() is not None, timeout=120, what="shards")
        assert run.poll() is None, "the run ended before the scheduler was killed"
        scheduler.send_signal(signal.SIGKILL)
        _, err = run.communicate(timeout=120)
    finally:
        for proc in (scheduler, worker):
            proc.kill()
            proc.wait(timeout=30)
    assert run.returncode == 2, err
    assert "Traceback" not in err, err
    last = err.strip().splitlines()[-1]
    assert "lost the dask scheduler" in last or "cancelled" in last, err
    assert "--resume" in err or "resume" in last, err

    address, scheduler, worker = start_cluster()
    try:
        wait_for(lambda: _accepts(address), timeout=60, what="new scheduler")
        again = subprocess.run([sys.executable, "-m", "sim", "run", str(config), "-o", str(out),
                                "--cluster", address, "--resume", "--quiet"], cwd=ROOT, env=env(),
                               capture_output=True, text=True, timeout=300)
    finally:
        for proc in (scheduler, worker):
            proc.kill()
            proc.wait(timeout=30)
    assert again.returncode == 0, again.stderr
    assert_same_datasets(reference, out)


def _accepts(address: str) -> bool:
    host, port = address.removeprefix("tcp://").rsplit(":", 1)
    try:
        socket.create_connection((host, int(port)), timeout=1).close()
        return True
    except OSError:
        return False
