"""A PointRun (what a worker is sent for a batch) gives the replicates its sweep point gives.

Reference: the same replicates run from the ``SweepPoint`` itself (the public
path, whose results the invariance and engine conformance tests check against
published results); a ``PointRun`` is the same model read once into plain data,
so every dataset must be equal, for every engine and with year types.
"""

import pickle
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

from sim.config import parse_config, sweep_points
from sim.point_run import PointRun
from sim.replicates import run_replicates

ROOT = Path(__file__).resolve().parent.parent


def _config(engine: str, name: str = "fenmarrow-hopper.toml"):
    raw = tomllib.loads((ROOT / "configs" / name).read_text())
    raw["experiment"].update(engine=engine, replicates=6, max_steps=60)
    raw.pop("sweep", None)
    return parse_config(raw)


def _same(a, b) -> None:
    assert len(a) == len(b)
    for x, y in zip(a, b, strict=True):
        assert (x.point, x.replicate, x.outcome, x.winner, x.steps, x.fixation_step, x.final_census) == \
               (y.point, y.replicate, y.outcome, y.winner, y.steps, y.fixation_step, y.final_census)
        np.testing.assert_array_equal(x.record_steps, y.record_steps)
        np.testing.assert_array_equal(x.trajectory, y.trajectory)
        if x.years is None:
            assert y.years is None
        else:
            np.testing.assert_array_equal(x.years, y.years)


@pytest.mark.parametrize("engine", ["individual", "counts", "agents"])
def test_a_pickled_point_run_gives_the_replicates_of_its_sweep_point(engine):
    config = _config(engine)  # a config with [environment]: year types travel too
    point = sweep_points(config)[0]
    run = pickle.loads(pickle.dumps(PointRun.of(point)))
    expected = run_replicates(point, range(6), config.experiment.seed)
    _same(run_replicates(run, range(6), config.experiment.seed), expected)
    assert any(r.years is not None and r.years.size for r in expected)


def test_the_config_travels_as_bytes_even_once_opened():
    config = _config("agents")
    run = PointRun.of(sweep_points(config)[0])
    assert run.config == config  # opened (cached on the object)...
    state = pickle.loads(pickle.dumps(run)).__dict__
    assert "config" not in state  # ...but not pickled as an object: unpickling loads no schema


def test_unpickling_a_point_run_imports_no_config_schema(tmp_path):
    path = tmp_path / "run.pickle"
    path.write_bytes(pickle.dumps(PointRun.of(sweep_points(_config("counts"))[0])))
    probe = (f"import pickle, sys\nrun = pickle.loads(open({str(path)!r}, 'rb').read())\n"
             "print(run.engine, run.life.n_alleles, 'pydantic' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                          check=True, timeout=120)
    assert done.stdout.split() == ["counts", "2", "False"]


@pytest.mark.parametrize("engine", ["individual", "counts", "agents"])
def test_without_records_every_replicate_is_the_same_but_its_empty_records(engine):
    # `trajectory = "none"` makes no census records (sim.parallel.run_kept_replicates); the
    # reference is the records kept and then dropped (reduce_trajectory), as before: every
    # outcome, step, census and year type must be equal
    from sim.parallel import reduce_trajectory, run_kept_replicates

    config = _config(engine)
    point = sweep_points(config)[0]
    seed = config.experiment.seed
    kept = run_replicates(point, range(6), seed)
    assert all(r.record_steps.size for r in kept)  # (so that something is left out below)
    expected = [reduce_trajectory(r, "none") for r in kept]
    without = run_replicates(PointRun.of(point), range(6), seed, records=False)
    _same(without, expected)
    _same(run_kept_replicates(point, range(6), seed, "none"), expected)
    for r in without:
        assert r.record_steps.dtype == np.int32 and r.trajectory.dtype == np.uint32
        assert r.trajectory.shape == (0, *kept[0].trajectory.shape[1:])
        assert not r.trajectory.flags.writeable  # shared by the batch's replicates
    assert any(r.years is not None and r.years.size for r in without)
