"""Crash-safe resume: kill -9 at several points of a real run, Ctrl-C, a changed config refused."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from sim.cli import main
from sim.experiment import run_experiment
from sim.status import experiment_status
from sim.store import ConfigMismatchError, ResultsError, ResultsWriter, parts_dir, read_replicates
from tests.runs_support import (
    BATCH,
    DRIVER,
    REPLICATES,
    ROOT,
    assert_same_datasets,
    cli,
    env,
    kill9,
    small_config,
    start_stopped_run,
    wait_for,
    write_config,
)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The uninterrupted run."""
    folder = tmp_path_factory.mktemp("reference")
    out = folder / "ref.h5"
    run_experiment(small_config(replicates=REPLICATES), out, workers=1, progress=False)
    return out


def rows_so_far(out, reference):
    """Rows readable after the crash: each must equal the uninterrupted run's row."""
    now = read_replicates(out)
    ref = read_replicates(reference).set_index(["point", "replicate"])
    for row in now.drop(columns=["trajectory_start"]).itertuples(index=False):
        expected = ref.loc[(row.point, row.replicate)]
        assert (row.outcome, row.steps, row.final_census) == \
               (expected.outcome, expected.steps, expected.final_census)
    assert not now.duplicated(["point", "replicate"]).any()
    return len(now)


@pytest.mark.parametrize("where, n, saved", [
    ("before-any-shard", 1, 0),
    ("mid-shard-write", 4, 2 * BATCH),  # call 1 writes the header
    ("shard-not-renamed", 5, 4 * BATCH),
    ("between-shards", 9, 9 * BATCH),
    ("merging-during-run", 6, 6 * BATCH),  # shards are merged as they come, in order
    ("mid-merge", 1, 4 * REPLICATES),
    ("merged-before-cleanup", 1, 4 * REPLICATES),
])
def test_kill9_then_resume_gives_the_uninterrupted_datasets(reference, tmp_path, where, n, saved):
    proc, config, out = start_stopped_run(tmp_path, where, n)
    kill9(proc)
    assert rows_so_far(out, reference) == saved  # the file stays readable, with what finished
    resumed = main(["run", str(config), "-o", str(out), "--resume", "--workers", "1", "--quiet"])
    assert resumed == 0
    assert_same_datasets(reference, out)
    assert not parts_dir(out).exists()
    assert not list(tmp_path.glob("*.tmp"))


def test_kill9_with_worker_processes_then_resume_from_the_command_line(reference, tmp_path):
    proc, config, out = start_stopped_run(tmp_path, "between-shards", n=6, workers=2)
    children = _children(proc.pid)
    kill9(proc)
    # the orphaned workers notice the writer is gone and exit
    wait_for(lambda: not any(Path(f"/proc/{c}").exists() for c in children), timeout=20,
             what="orphaned workers to exit")
    done = cli("run", config, "-o", out, "--resume", "--workers", "2")
    assert done.returncode == 0, done.stderr
    assert "resuming" in done.stderr and f"of {4 * REPLICATES} replicates already saved" in done.stderr
    assert_same_datasets(reference, out)


def _children(pid):
    try:
        tasks = Path(f"/proc/{pid}/task").iterdir()
        return [int(c) for t in tasks for c in (t / "children").read_text().split()]
    except OSError:
        return []


@pytest.mark.parametrize("signum, group", [(signal.SIGINT, True), (signal.SIGTERM, False), (signal.SIGTERM, True)],
                         ids=["ctrl-c", "sigterm", "sigterm-to-the-group"])
def test_ctrl_c_saves_finished_work_and_prints_the_resume_command(reference, tmp_path, signum, group):
    # SIGINT is Ctrl-C, which a terminal sends the whole process group; SIGTERM is what batch
    # schedulers send at a job's time limit, to the process or to every process of the job (the
    # workers and the fork server must not die of it: the writer then said "a worker process
    # died ... (out of memory?)" instead of the resume command)
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tmp_path / "run.h5"
    driver = tmp_path / "driver.py"
    driver.write_text(DRIVER)
    proc = subprocess.Popen([sys.executable, str(driver), "slow-commits", "0", str(tmp_path / "x"),
                             "run", str(config), "-o", str(out), "--workers", "2", "--batch-size", "1",
                             "--quiet"],
                            cwd=ROOT, env=env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    wait_for(lambda: len(list(parts_dir(out).glob("p*.h5"))) >= 3 or proc.poll() is not None,
             what="some finished batches")
    if group:
        os.killpg(proc.pid, signum)
    else:
        proc.send_signal(signum)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 130, stderr
    assert "Traceback" not in stderr
    assert f"broodline run {config} -o {out} --resume" in stderr
    assert "replicates are saved in" in stderr
    saved = rows_so_far(out, reference)
    assert 3 <= saved < 4 * REPLICATES
    assert experiment_status(out).state == "stopped"
    assert main(["run", str(config), "-o", str(out), "--resume", "--workers", "1", "--quiet"]) == 0
    assert_same_datasets(reference, out)


def test_resume_refuses_a_changed_config_and_says_what_differs(tmp_path, capsys):
    proc, config, out = start_stopped_run(tmp_path, "between-shards", n=2)
    kill9(proc)
    changed = small_config(replicates=REPLICATES + 1)
    with pytest.raises(ConfigMismatchError) as err:
        run_experiment(changed, out, resume=True, progress=False)
    assert err.value.differences == [f"experiment.replicates: {REPLICATES} -> {REPLICATES + 1}"]
    config.write_text(config.read_text().replace('capacity = 25', 'capacity = 26'))
    assert main(["run", str(config), "-o", str(out), "--resume", "--quiet"]) == 2
    message = capsys.readouterr().err
    assert "it was started with another config" in message
    assert "density.capacity: 25.0 -> 26.0" in message
    assert "Traceback" not in message
    assert len(read_replicates(out)) == 2 * BATCH  # nothing lost


def test_run_refuses_an_unfinished_file_without_resume_and_a_second_writer(tmp_path, capsys):
    proc, config, out = start_stopped_run(tmp_path, "between-shards", n=1)
    try:
        # while the first run is alive (holding the lock), a resume is refused
        with pytest.raises(Exception, match="is being written by another broodline run"):
            ResultsWriter(out, small_config(replicates=REPLICATES), _points(), resume=True)
    finally:
        kill9(proc)
    assert main(["run", str(config), "-o", str(out), "--quiet"]) == 2
    assert "it is unfinished: pass --resume to finish it, or --overwrite" in capsys.readouterr().err
    assert main(["run", str(config), "-o", str(out), "--resume", "--overwrite"]) == 2
    assert len(read_replicates(out)) == BATCH


def test_resume_of_a_complete_file_runs_nothing(reference, tmp_path):
    out = tmp_path / "done.h5"
    out.write_bytes(reference.read_bytes())
    before = out.stat().st_mtime_ns
    time.sleep(0.01)
    run_experiment(small_config(replicates=REPLICATES), out, resume=True, progress=False)
    assert out.stat().st_mtime_ns == before
    assert not parts_dir(out).exists()
    assert main(["run", str(ROOT / "nowhere.toml"), "-o", str(out), "--resume"]) == 2
    assert os.path.getsize(out) == os.path.getsize(reference)


def _points():
    from sim.config import sweep_points

    return sweep_points(small_config(replicates=REPLICATES))


@pytest.mark.parametrize("damage", ["empty", "not-hdf5", "truncated", "another-config"])
def test_a_refused_resume_leaves_nothing_new_behind(reference, tmp_path, capsys, damage):
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tmp_path / "out.h5"
    data = {"empty": b"", "not-hdf5": b"not a results file\n",
            "truncated": reference.read_bytes()[:4000],
            "another-config": reference.read_bytes()}[damage]
    out.write_bytes(data)
    if damage == "another-config":
        config.write_text(config.read_text().replace("capacity = 25", "capacity = 26"))
    before = sorted(p.name for p in tmp_path.iterdir())
    assert main(["run", str(config), "-o", str(out), "--resume", "--quiet", "--workers", "1"]) == 2
    err = capsys.readouterr().err
    assert f"cannot resume {str(out)!r}" in err and err.count("error:") == 1 and "Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no out.h5.parts/lock left
    assert out.read_bytes() == data


def test_resume_by_another_version_warns_that_draws_may_differ(tmp_path, caplog):
    # The promise is per version (README, Reproducibility): a run finished by another version
    # of broodline is still valid, but not what one version alone would have given.
    import h5py

    proc, _, out = start_stopped_run(tmp_path, "between-shards", n=2)
    kill9(proc)
    with h5py.File(out, "r+") as f:
        f.attrs["software_version"] = "0.0.1"
    with caplog.at_level("WARNING", logger="sim.experiment"):
        run_experiment(small_config(replicates=REPLICATES), out, resume=True, progress=False)
    assert "was started by broodline 0.0.1" in caplog.text
    assert len(read_replicates(out)) == 4 * REPLICATES


def test_one_command_line_with_resume_survives_kills_at_any_moment(reference, tmp_path, caplog):
    """A batch scheduler's requeued job: ``run CONFIG -o OUT --resume``, killed and rerun as is."""
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tmp_path / "run.h5"
    argv = ["run", config, "-o", out, "--workers", "1", "--batch-size", BATCH, "--quiet", "--resume"]
    # killed 0.1 s after the start: still starting up, no results file yet
    proc = subprocess.Popen([sys.executable, "-m", "sim", *map(str, argv)], cwd=ROOT, env=env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    time.sleep(0.1)
    kill9(proc)
    assert not out.exists()
    # killed while the header is written (call 1 of the byte writer: a half-written .tmp)
    proc, _, _ = start_stopped_run(tmp_path, "mid-shard-write", 1, options=["--resume"])
    kill9(proc)
    assert not out.exists() and out.with_name(out.name + ".tmp").exists()
    # killed between shards, then during the merge: the same command line each time
    for where, n, saved in (("between-shards", 3, 3 * BATCH), ("mid-merge", 1, 4 * REPLICATES)):
        proc, _, _ = start_stopped_run(tmp_path, where, n, options=["--resume"])
        kill9(proc)
        assert rows_so_far(out, reference) == saved
    assert main([str(a) for a in argv]) == 0
    assert_same_datasets(reference, out)
    assert not parts_dir(out).exists() and not list(tmp_path.glob("*.tmp"))


def test_resume_with_nothing_to_resume_starts_and_says_so(reference, tmp_path, caplog):
    out = tmp_path / "new.h5"
    with caplog.at_level("INFO", logger="sim.experiment"):
        run_experiment(small_config(replicates=REPLICATES), out, resume=True, progress=False)
    assert f"nothing to resume at {out}: starting" in caplog.text
    assert_same_datasets(reference, out)
    # finished batches without their results file cannot be checked against the config: refused
    parts_dir(out).mkdir()
    (parts_dir(out) / "p000000-r000000000-000000002.h5").write_bytes(b"")
    out.unlink()
    with pytest.raises(ResultsError, match="holds finished batches"):
        run_experiment(small_config(replicates=REPLICATES), out, resume=True, progress=False)


def test_two_requeued_copies_at_once_the_lock_refuses_the_second(reference, tmp_path, capsys):
    # the first copy holds the writer's lock (stopped before its first shard); the second,
    # the same command line, is refused without touching the file, and exits with status 2
    proc, config, out = start_stopped_run(tmp_path, "before-any-shard", options=["--resume"])
    try:
        argv = ["run", str(config), "-o", str(out), "--resume", "--quiet", "--workers", "1"]
        assert main(argv) == 2
        assert "is being written by another broodline run" in capsys.readouterr().err
    finally:
        kill9(proc)
    assert main(argv) == 0
    assert_same_datasets(reference, out)
