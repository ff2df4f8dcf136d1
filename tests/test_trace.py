"""broodline trace: one replicate season by season, the same stream as in the experiment."""

import numpy as np
import pytest

from sim.cli import main
from sim.config import load_config
from sim.store import read_replicates, read_trajectories
from sim.trace import trace_replicate
from tests.invasion_configs import SMALL_SWEEP, invasion_config, wet_and_dry, write_small_results


def test_trace_reproduces_a_stored_replicate(tmp_path):
    path = write_small_results(tmp_path / "small.h5", replicates=6)
    config = invasion_config(capacity=30.0, replicates=6, seed=3, record_every=2,
                             sweep={"allele.one-shot.fecundity": SMALL_SWEEP})
    reps = read_replicates(path)
    for point, replicate in ((2, 4), (3, 1)):
        t = trace_replicate(config, point=point, replicate=replicate)
        stored = reps[(reps["point"] == point) & (reps["replicate"] == replicate)].iloc[0]
        assert (t.outcome, t.steps) == (stored["outcome"], stored["steps"])
        assert t.census["season"].max() == stored["steps"]
        # every recorded season of the stored trajectory equals the trace's census there
        traj = read_trajectories(path, points=[point], replicates=[replicate])
        for (step, allele), rows in traj.groupby(["step", "allele"]):
            here = t.census[(t.census["season"] == step) & (t.census["allele"] == allele)]
            ages = [c for c in t.census.columns if c.startswith("age ")]
            assert np.array_equal(here[ages].to_numpy()[0][: len(rows)], rows.sort_values("age")["count"].to_numpy())


def test_trace_command(tmp_path, capsys):
    cfg = tmp_path / "c.toml"
    cfg.write_text(open("configs/demo.toml").read())
    assert main(["trace", str(cfg), "--point", "1", "--replicate", "2"]) == 0
    out = capsys.readouterr().out
    assert "spawn_key=(1, 2)" in out and "season" in out and "outcome: " in out
    assert main(["trace", str(cfg), "--replicate", "100000"]) == 2
    assert "--replicate must be in" in capsys.readouterr().err


@pytest.mark.parametrize("point", [-1, 8])
def test_trace_refuses_a_point_that_is_not_there(point):
    from sim.config import ConfigError

    with pytest.raises(ConfigError, match="point must be in"):
        trace_replicate(load_config("configs/demo.toml"), point=point)


@pytest.mark.parametrize("shared", [False, True])
def test_trace_shows_each_seasons_year_as_stored(tmp_path, shared):
    # the trace draws its years from the experiment's year stream (the replicate's own, or the
    # point's shared one), so they are the stored years, season by season
    from sim.experiment import run_experiment
    from sim.store import read_years

    config = wet_and_dry(shared=shared, capacity=30.0, replicates=5, seed=8, record_every=4,
                         sweep={"allele.one-shot.fecundity": [3.0, 6.0]})
    path = tmp_path / "years.h5"
    run_experiment(config, path, workers=1, batch_size=2, progress=False)
    stored = read_years(path)
    for point, replicate in ((0, 3), (1, 1)):
        t = trace_replicate(config, point=point, replicate=replicate)
        mine = stored[(stored["point"] == point) & (stored["replicate"] == replicate)]
        assert list(t.years) == mine["year"].tolist() and len(t.years) == t.steps
        by_season = t.census.drop_duplicates("season").set_index("season")["year"]
        assert by_season.loc[0] == "" and by_season.loc[1:].tolist() == mine["year"].tolist()
        assert set(t.years) <= {"wet", "dry"}


def test_trace_without_environment_has_no_year_column():
    t = trace_replicate(load_config("configs/demo.toml"), point=0, replicate=0)
    assert t.years is None and "year" not in t.census.columns


def test_trace_command_names_the_year_stream(tmp_path, capsys):
    assert main(["trace", "configs/fenmarrow-hopper.toml", "--point", "2", "--replicate", "7"]) == 0
    out = capsys.readouterr().out
    assert "spawn_key=(2, 7, 1)" in out and " year " in out.splitlines()[2]
    assert {"wet", "dry"} & set(out.split())
