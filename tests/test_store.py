"""Results files: reproducible, readable with plain h5py and pandas, never overwritten by accident."""

import h5py
import numpy as np
import pytest

from sim.config import sweep_points
from sim.experiment import run_experiment
from sim.replicates import run_replicate
from sim.store import (
    read_attrs,
    read_point_configs,
    read_points,
    read_replicates,
    read_trajectories,
)
from tests.conftest import make_config


@pytest.fixture(scope="module")
def config():
    return make_config(
        experiment={"replicates": 12, "max_steps": 300, "seed": 42, "record_every": 3},
        density={"capacity": 15},
        sweep={"allele.one-shot.fecundity": [3.0, 6.0]},
    )


def _datasets(path):
    out = {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: out.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    return out


def test_same_config_and_seed_give_identical_datasets(config, tmp_path):
    # The reproducibility promise (README): same config, seed and versions, same datasets.
    a, b = tmp_path / "a.h5", tmp_path / "b.h5"
    run_experiment(config, a, progress=False)
    run_experiment(config, b, progress=False, batch_size=5)  # batching must not matter
    da, db = _datasets(a), _datasets(b)
    assert da.keys() == db.keys()
    for name in da:
        np.testing.assert_array_equal(da[name], db[name], err_msg=name)


def test_a_replicate_can_be_rerun_alone(config, tmp_path):
    path = tmp_path / "r.h5"
    run_experiment(config, path, progress=False)
    reps = read_replicates(path)
    row = reps[(reps.point == 1) & (reps.replicate == 7)].iloc[0]
    point = sweep_points(config)[1]
    again = run_replicate(point, 7, config.experiment.seed)
    assert again.outcome == row.outcome and again.steps == row.steps
    traj = read_trajectories(path, points=[1], replicates=[7], by_age=False)
    assert traj["step"].unique().tolist() == again.record_steps.tolist()
    np.testing.assert_array_equal(
        traj.pivot(index="step", columns="allele", values="count")[config.allele_names].to_numpy(),
        again.trajectory.sum(axis=2),
    )


def test_layout_and_readers(config, tmp_path):
    path = tmp_path / "r.h5"
    summary = run_experiment(config, path, progress=False)
    assert summary["replicates"].tolist() == [12, 12]
    with h5py.File(path, "r") as f:  # plain h5py, as a user's script would
        assert f.attrs["format"] == "broodline-results"
        assert f["replicates/outcome"].shape == (24,)
        assert f["trajectories/counts"].shape[1:] == (2, 1)
        assert f["trajectories/counts"].compression == "gzip"
        assert f["replicates/seed"][0] == 42
        # the outcome is fixed-length ASCII text (format 3): numpy bytes, or str through asstr()
        assert f.attrs["format_version"] == 3 and f["replicates/outcome"].dtype == np.dtype("S12")
        plain = list(f["replicates/outcome"].asstr()[:])
        assert [o.decode() for o in f["replicates/outcome"][:]] == plain
    reps = read_replicates(path)
    assert list(reps.outcome) == plain
    assert set(reps.outcome) <= {"mutant-fixed", "mutant-lost", "extinct", "undecided", "capped"}
    assert (reps.spawn_key.map(tuple) == list(zip(reps.point, reps.replicate))).all()
    fixed = reps[reps.outcome == "mutant-fixed"]
    assert (fixed.winner == "one-shot").all() and (fixed.fixation_step <= fixed.steps).all()
    assert read_points(path)["allele.one-shot.fecundity"].tolist() == [3.0, 6.0]
    assert [c.allele[1].fecundity for c in read_point_configs(path)] == [3.0, 6.0]
    assert read_attrs(path)["alleles"] == ["perennial", "one-shot"]
    traj = read_trajectories(path)
    assert set(traj.columns) == {"point", "replicate", "step", "allele", "age", "count"}
    assert (traj.step % 3 == 0).sum() > 0


def test_existing_results_are_not_overwritten(config, tmp_path):
    path = tmp_path / "keep.h5"
    path.write_bytes(b"precious")
    with pytest.raises(FileExistsError, match="pass overwrite=True"):
        run_experiment(config, path, progress=False)
    assert path.read_bytes() == b"precious"
    run_experiment(config, path, progress=False, overwrite=True)
    assert len(read_replicates(path)) == 24


def test_capped_replicates_stop_and_are_marked(tmp_path):
    config = make_config(
        experiment={"replicates": 3, "max_steps": 200, "max_population": 500, "stop": "max-steps"},
        density=None,  # no [density]: no density dependence
        invasion={"resident": "perennial", "mutant": "one-shot", "resident_count": 100},
    )
    path = tmp_path / "cap.h5"
    run_experiment(config, path, progress=False)
    reps = read_replicates(path)
    # lambda = 1.5 without density dependence: every replicate passes 500 and is capped.
    assert (reps.outcome == "capped").all()
    assert (reps.final_census > 500).all() and (reps.steps < 20).all()


def test_outcome_names_of_other_versions_are_read_as_this_versions(config, tmp_path):
    # One name per idea (issue 10): a file that spells an outcome "mutant_fixed" or
    # "unresolved" is read with the names the README lists, by every reader.
    from sim.status import experiment_status
    from sim.store import count_outcomes, read_outcomes

    path = tmp_path / "old.h5"
    run_experiment(config, path, progress=False)
    now = read_replicates(path)["outcome"].to_numpy()
    old = np.array([{"mutant-fixed": "mutant_fixed", "mutant-lost": "mutant_lost"}.get(o, o) for o in now],
                   dtype=object)
    old[0] = "unresolved"
    with h5py.File(path, "r+") as f:  # as format 2 and earlier stored it: variable-length text
        del f["replicates/outcome"]
        f["replicates"].create_dataset("outcome", data=old, dtype=h5py.string_dtype())
    expected = now.copy()
    expected[0] = "undecided"
    assert list(read_replicates(path)["outcome"]) == list(expected)
    assert list(read_outcomes(path)["outcome"]) == list(expected)
    counted = count_outcomes(path).groupby("outcome")["count"].sum()
    assert set(counted.index) <= {"mutant-fixed", "mutant-lost", "undecided", "capped", "extinct"}
    assert counted.sum() == len(now)
    assert experiment_status(path).fixed == int((expected == "mutant-fixed").sum())
