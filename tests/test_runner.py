"""Running experiments: the datasets do not depend on workers or batching; trajectories as asked."""

import numpy as np
import pandas as pd
import pytest

from sim.config import sweep_points
from sim.experiment import run_experiment
from sim.parallel import Batch, plan_batches, run_batch
from sim.replicates import run_replicate
from sim.store import read_attrs, read_replicates, read_trajectories
from tests.runs_support import assert_same_datasets, datasets, small_config


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The experiment run in this process, one batch size."""
    out = tmp_path_factory.mktemp("ref") / "ref.h5"
    run_experiment(small_config(replicates=14), out, workers=1, batch_size=14, progress=False)
    return out


def test_one_and_two_workers_give_identical_datasets(reference, tmp_path):
    out = tmp_path / "two.h5"
    summary = run_experiment(small_config(replicates=14), out, workers=2, batch_size=3, progress=False)
    assert_same_datasets(reference, out)
    assert summary["replicates"].tolist() == [14, 14, 14, 14]
    tapered = tmp_path / "tapered.h5"  # the default batches, which taper on 2 workers
    run_experiment(small_config(replicates=14), tapered, workers=2, progress=False)
    assert_same_datasets(reference, tapered)


def test_one_worker_process_gives_the_datasets_of_this_process(reference, tmp_path):
    # `broodline run --workers 1` on a machine with a second core: the batches run in a worker
    # process (sim.parallel.start.separate_workers), its shards merged by this one
    out = tmp_path / "one.h5"
    run_experiment(small_config(replicates=14), out, workers=1, in_process=False, batch_size=3,
                   progress=False)
    assert_same_datasets(reference, out)


@pytest.mark.parametrize("batch_size", [1, 5])
def test_batch_size_does_not_change_datasets(reference, tmp_path, batch_size):
    out = tmp_path / "b.h5"
    run_experiment(small_config(replicates=14), out, workers=1, batch_size=batch_size, progress=False)
    assert_same_datasets(reference, out)


def test_file_is_canonical_and_complete(reference):
    reps = read_replicates(reference)
    assert read_attrs(reference)["complete"]
    assert list(zip(reps["point"], reps["replicate"])) == [(p, r) for p in range(4) for r in range(14)]
    assert reps["spawn_key"].tolist() == list(zip(reps["point"], reps["replicate"]))
    # trajectories are stored back to back in the same order
    ends = (reps["trajectory_start"] + reps["trajectory_length"]).to_numpy()
    assert reps["trajectory_start"].iloc[0] == 0 and (ends[:-1] == reps["trajectory_start"].to_numpy()[1:]).all()


def test_a_replicate_rerun_alone_matches_the_file(reference):
    # each replicate's stream is SeedSequence(seed, spawn_key=(point, replicate)) (numpy docs),
    # so replicate 9 of point 3 re-run on its own gives the stored row and trajectory
    point = sweep_points(small_config(replicates=14))[3]
    alone = run_replicate(point, 9, point.config.experiment.seed)
    row = read_replicates(reference).query("point == 3 and replicate == 9").iloc[0]
    assert (row.outcome, row.steps, row.final_census) == (alone.outcome, alone.steps, alone.final_census)
    traj = read_trajectories(reference, points=[3], replicates=[9])
    assert traj["step"].unique().tolist() == alone.record_steps.tolist()
    counts = traj["count"].to_numpy().reshape(alone.trajectory.shape)
    assert np.array_equal(counts, alone.trajectory)


def test_plan_batches_cuts_runs_of_missing_replicates():
    missing = {0: [range(0, 5)], 2: [range(3, 4), range(7, 12)]}
    assert plan_batches(missing, 2) == [Batch(0, 0, 1), Batch(0, 2, 3), Batch(0, 4, 4), Batch(2, 3, 3),
                                        Batch(2, 7, 8), Batch(2, 9, 10), Batch(2, 11, 11)]
    with pytest.raises(ValueError, match="batch_size must be >= 1; got 0"):
        plan_batches(missing, 0)


def test_tapered_batches_cover_every_missing_replicate_once_and_shrink_at_the_end():
    from sim.parallel import iter_batches
    from sim.parallel.work import TAPER_FLOOR

    missing = {0: [range(0, 10_000)], 3: [range(5, 900), range(1000, 30_000)]}
    batches = list(iter_batches(missing, 1024, taper=4))
    covered = [(b.point, r) for b in batches for r in b.replicates]
    assert covered == [(p, r) for p in sorted(missing) for run in missing[p] for r in run]
    sizes = [len(b) for b in batches]
    assert max(sizes) == 1024
    # guided self-scheduling: no batch holds more than 1/(2 * workers) of what is left
    left = sum(sizes)
    for size in sizes:
        assert size <= max(left / 8, 1024 // TAPER_FLOOR) + 1
        left -= size
    assert sizes[-1] <= 1024 // TAPER_FLOOR  # the end is cut finer than the full batches
    assert list(iter_batches(missing, 1024)) == plan_batches(missing, 1024)  # taper=0: unchanged


def test_by_allele_is_the_sum_over_ages_and_none_keeps_no_trajectory(reference, tmp_path):
    by_allele = tmp_path / "by-allele.h5"
    none = tmp_path / "none.h5"
    run_experiment(small_config(replicates=14, trajectory="by-allele"), by_allele, progress=False)
    run_experiment(small_config(replicates=14, trajectory="none"), none, progress=False)
    full = read_trajectories(reference, by_age=False)
    pd.testing.assert_frame_equal(read_trajectories(by_allele, by_age=False), full)
    with pytest.raises(ValueError, match="by_age=False"):
        read_trajectories(by_allele)
    assert read_trajectories(none).empty
    assert datasets(none)["trajectories/counts"].shape[0] == 0
    # outcomes do not depend on what is kept of the trajectories
    cols = ["point", "replicate", "outcome", "steps", "fixation_step", "final_census"]
    for other in (by_allele, none):
        pd.testing.assert_frame_equal(read_replicates(other)[cols], read_replicates(reference)[cols])


def test_record_every_thins_the_trajectory(tmp_path):
    out = tmp_path / "thin.h5"
    run_experiment(small_config(replicates=3, record_every=7), out, progress=False)
    for (_, _), steps in read_trajectories(out, by_age=False).groupby(["point", "replicate"])["step"]:
        s = np.unique(steps.to_numpy())
        assert s[0] == 0 and all(x % 7 == 0 for x in s[:-1])  # the last season is always kept


def test_run_batch_reduces_trajectories_in_the_worker():
    point = sweep_points(small_config(replicates=4, trajectory="by-allele"))[0]
    results = run_batch(point, 1, 3, point.config.experiment.seed)
    assert [r.replicate for r in results] == [1, 2, 3]
    assert all(r.trajectory.ndim == 2 and r.trajectory.dtype == np.uint32 for r in results)


def test_default_batch_size_scales_with_what_a_replicate_holds():
    from sim.parallel import default_batch_size

    # About 5e5 entries a batch, at most 1024 replicates, about four batches per slot.
    assert default_batch_size(100_000, 1, held=2000) == 250
    assert default_batch_size(100_000, 1, held=200) == 1024
    assert default_batch_size(100_000, 1, held=10**6) == 1
    assert default_batch_size(400, 2, held=200) == 50
    # without trajectories (results of a few numbers each), four times the entries and at most
    # 16,384 replicates
    assert default_batch_size(100_000, 1, held=200, records=False) == 10_000
    assert default_batch_size(100_000, 1, held=500, records=False) == 4000
    assert default_batch_size(300_000, 2, held=4, records=False) == 16_384
    assert default_batch_size(100_000, 1, held=2000, records=False) == 1000
    assert default_batch_size(400, 2, held=200, records=False) == 50


@pytest.mark.parametrize("engine", ["individual", "counts"])
def test_what_a_replicate_holds_follows_the_engine(engine):
    """A batched engine in COUNTING_ENGINES holds the same arrays at any census size; the
    others hold arrays that grow with it (which PointRun.held tells the batch size)."""
    from sim.config import parse_config
    from sim.engines import ENGINES
    from sim.lifecycle import LifeCycle
    from sim.point_run import PointRun
    from sim.vocabulary import COUNTING_ENGINES

    def held_bytes(n):
        raw = {"experiment": {"engine": engine},
               "allele": [{"name": "p", "breeding": "iteroparous", "fecundity": 1.0,
                           "adult_survival": 0.5, "juvenile_survival": 0.5, "initial_count": n}]}
        config = parse_config(raw)
        life = LifeCycle.from_config(config)
        rngs = [np.random.default_rng(r) for r in range(4)]
        batch = ENGINES[engine].populations(life, np.full((4, 1, 1), n), rngs)
        arrays = [v for v in vars(batch).values() if isinstance(v, np.ndarray)]
        return sum(a.nbytes for a in arrays), PointRun.of(sweep_points(config)[0]).held

    (small, held_small), (large, held_large) = held_bytes(10), held_bytes(10_000)
    if engine in COUNTING_ENGINES:
        assert 0 < large == small and held_small == held_large == 1  # one class
    else:
        assert large > 100 * small and (held_small, held_large) == (10, 10_000)


def test_summary_counts_fixed_without_invasion(tmp_path):
    # without [invasion] the outcome that counts is "fixed" (one allele left), as `status` says
    import tomllib

    from sim.config import parse_config
    from sim.status import experiment_status
    from tests.runs_support import small_text

    text = small_text(replicates=10).replace('juvenile_survival = 0.5\n\n[invasion]',
                                             'juvenile_survival = 0.5\ninitial_count = 3\n\n[x]')
    raw = tomllib.loads(text)
    del raw["x"]
    raw["allele"][0]["initial_count"] = 6
    out = tmp_path / "noinv.h5"
    summary = run_experiment(parse_config(raw), out, workers=1, progress=False)
    status = experiment_status(out)
    assert summary["fixed"].sum() > 0
    assert np.allclose(summary["fixed_fraction"], summary["fixed"] / summary["resolved"])
    assert np.allclose(summary["fixed_fraction"], status.table["fixed_fraction"])


def test_a_points_log_line_gives_the_summarys_fixed_fraction(tmp_path, caplog):
    # a point's line says the fraction over its resolved replicates, as the summary does
    # (undecided and capped replicates are not losses), and how many were resolved when not all
    from tests.invasion_configs import invasion_config

    config = invasion_config(mutant_fecundity=6.0, capacity=30.0, replicates=60, max_steps=12,
                             sweep={"allele.one-shot.fecundity": [6.0, 8.0]})
    with caplog.at_level("INFO", logger="sim.experiment"):
        summary = run_experiment(config, tmp_path / "r.h5", workers=1, progress=False)
    lines = [r.getMessage() for r in caplog.records if " done: " in r.getMessage()]
    assert len(lines) == 2 and (summary["resolved"] < 60).all() and (summary["mutant-fixed"] > 0).any()
    for line, (_, row) in zip(lines, summary.iterrows()):
        assert line.endswith(f"done: 60 replicates, mutant-fixed {row['mutant-fixed']:.0f} of {row['resolved']:.0f} "
                             f"resolved ({row['fixed_fraction']:.3f})"), line
