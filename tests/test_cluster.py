"""The dask engine: the same datasets as one local process; clear refusals when it cannot run."""

import builtins
import socket

import pytest

from sim.cli import main
from sim.parallel import ClusterError
from sim.experiment import run_experiment
from tests.runs_support import assert_same_datasets, small_config

distributed = pytest.importorskip("distributed")


def test_local_cluster_gives_the_datasets_of_one_process(tmp_path):
    config = small_config(replicates=10)
    reference = tmp_path / "one.h5"
    run_experiment(config, reference, workers=1, progress=False)
    out = tmp_path / "dask.h5"
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        run_experiment(config, out, cluster=cluster.scheduler_address, batch_size=3, progress=False)
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
