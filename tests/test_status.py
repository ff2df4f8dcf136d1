"""`broodline status`: progress per sweep point read while a run writes the file."""

import numpy as np

from sim.cli import main
from sim.status import experiment_status
from sim.store import read_replicates
from tests.runs_support import BATCH, REPLICATES, kill9, start_stopped_run


def test_status_while_running_after_a_crash_and_when_complete(tmp_path, capsys):
    proc, config, out = start_stopped_run(tmp_path, "between-shards", n=6)  # 6 batches of 3 saved
    try:
        status = experiment_status(out)
        assert status.state == "running" and f"pid {proc.pid}" in status.writer
        assert (status.done, status.total) == (6 * BATCH, 4 * REPLICATES)
        # batches go point by point: point 0 full (4 batches), point 1 two batches
        assert status.table["done"].tolist() == [REPLICATES, 2 * BATCH, 0, 0]
        assert status.table["of"].tolist() == [REPLICATES] * 4
        reps = read_replicates(out)
        fixed = reps.groupby("point")["outcome"].apply(lambda s: int((s == "mutant-fixed").sum()))
        assert status.table["fixed"].tolist()[:2] == fixed.tolist()
        resolved = reps.groupby("point")["outcome"].apply(
            lambda s: int(s.isin(["mutant-fixed", "mutant-lost", "extinct"]).sum()))
        assert np.allclose(status.table["fixed_fraction"].iloc[:2], fixed / resolved)
        assert np.isnan(status.table["fixed_fraction"].iloc[2])
        assert main(["status", str(out)]) == 0
        text = capsys.readouterr().out
        assert f"running (pid {proc.pid}" in text
        assert f"{6 * BATCH} of {4 * REPLICATES} replicates done (38%), mutant-fixed so far" in text
    finally:
        kill9(proc)
    stopped = experiment_status(out)
    assert stopped.state == "stopped" and stopped.done == 6 * BATCH
    assert "--resume" in str(stopped)
    assert main(["run", str(config), "-o", str(out), "--resume", "--quiet", "--workers", "1"]) == 0
    done = experiment_status(out)
    assert (done.state, done.done) == ("complete", 4 * REPLICATES)
    assert done.table["done"].tolist() == [REPLICATES] * 4


def test_status_of_something_else_is_a_clear_error(tmp_path, capsys):
    (tmp_path / "notes.h5").write_text("not hdf5")
    for name in ("missing.h5", "notes.h5"):
        assert main(["status", str(tmp_path / name)]) == 2
        err = capsys.readouterr().err
        assert ("not found" in err or "is not a broodline results file" in err) and "Traceback" not in err


def test_status_before_the_first_batch_is_saved(tmp_path, capsys):
    # the header is written, no batch yet: the first second of every run, or a run stopped then
    from sim.config import sweep_points
    from sim.store import ResultsWriter
    from tests.runs_support import small_config

    config = small_config(replicates=REPLICATES)
    out = tmp_path / "run.h5"
    writer = ResultsWriter(out, config, sweep_points(config))
    try:
        status = experiment_status(out)
        assert status.state == "running"
        assert (status.done, status.total, status.fixed) == (0, 4 * REPLICATES, 0)
        assert status.table["done"].tolist() == [0] * 4
        assert status.table["of"].tolist() == [REPLICATES] * 4
        assert status.table["fixed"].tolist() == [0] * 4
    finally:
        writer.release()
    assert main(["status", str(out)]) == 0
    text = capsys.readouterr().out
    assert "stopped before the end" in text
    assert f"0 of {4 * REPLICATES} replicates done (0%)" in text
