"""broodline export: the tables of a results file as CSV or Parquet, read back by pandas."""

import pandas as pd
import pytest

from sim.cli import main
from sim.store import read_replicates, read_trajectories
from tests.invasion_configs import write_small_results


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    return write_small_results(tmp_path_factory.mktemp("export") / "small.h5", replicates=10)


def test_replicates_round_trip(results, tmp_path):
    out = tmp_path / "reps.csv"
    assert main(["export", str(results), "--what", "replicates", "-o", str(out)]) == 0
    back = pd.read_csv(out)
    reps = read_replicates(results)
    assert len(back) == len(reps) == 40
    assert list(back["outcome"]) == list(reps["outcome"])
    assert list(back["spawn_point"]) == [k[0] for k in reps["spawn_key"]]
    assert list(back["spawn_replicate"]) == [k[1] for k in reps["spawn_key"]]


def test_trajectories_and_points(results, tmp_path):
    out = tmp_path / "traj.csv"
    assert main(["export", str(results), "--what", "trajectories", "-o", str(out)]) == 0
    back = pd.read_csv(out)
    traj = read_trajectories(results)
    assert len(back) == len(traj) and back["count"].sum() == traj["count"].sum()
    out = tmp_path / "points.csv"
    assert main(["export", str(results), "--what", "points", "-o", str(out)]) == 0
    points = pd.read_csv(out)
    assert len(points) == 4 and {"agreement", "mutant-fixed", "fixed_low"} <= set(points.columns)


def test_parquet(results, tmp_path):
    pytest.importorskip("pyarrow")
    out = tmp_path / "traj.parquet"
    assert main(["export", str(results), "--what", "trajectories", "-o", str(out)]) == 0
    assert len(pd.read_parquet(out)) == len(read_trajectories(results))


def test_refuses_to_overwrite(results, tmp_path, capsys):
    out = tmp_path / "reps.csv"
    out.write_text("keep me")
    assert main(["export", str(results), "--what", "replicates", "-o", str(out)]) == 2
    assert "pass --overwrite" in capsys.readouterr().err
    assert out.read_text() == "keep me"
    assert main(["export", str(results), "--what", "replicates", "-o", str(out), "--overwrite"]) == 0
    assert out.read_text() != "keep me"
    assert main(["export", str(results), "--what", "replicates", "-o", str(tmp_path / "x.txt")]) == 2
    assert ".csv or .parquet" in capsys.readouterr().err


def test_a_file_without_trajectories_says_so_in_export_and_plot(tmp_path, capsys):
    from tests.runs_support import write_config

    config = write_config(tmp_path, replicates=4, trajectory="none")
    results = tmp_path / "none.h5"
    assert main(["run", str(config), "-o", str(results), "--quiet", "--workers", "1"]) == 0
    capsys.readouterr()
    out = tmp_path / "t.csv"
    assert main(["export", str(results), "--what", "trajectories", "-o", str(out)]) == 0
    assert 'keeps no trajectories (trajectory = "none")' in capsys.readouterr().err
    assert len(pd.read_csv(out)) == 0
    from analysis.comparison import experiment_config
    from analysis.plots import trajectory_figure
    from sim.store import read_points

    fig = trajectory_figure(results, read_points(results), experiment_config(results))
    assert 'kept none (trajectory = "none")' in " ".join(t.get_text() for ax in fig.axes for t in ax.texts)


def test_plot_of_a_damaged_file_leaves_no_folder(results, tmp_path, capsys):
    import shutil

    import h5py

    damaged = tmp_path / "damaged.h5"
    shutil.copyfile(results, damaged)
    with h5py.File(damaged, "a") as f:
        del f["replicates"]["outcome"]
    assert main(["plot", str(damaged), "-o", str(tmp_path / "figs")]) == 2
    assert not (tmp_path / "figs").exists()
