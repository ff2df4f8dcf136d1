"""Shards: an unfinished file reads like the finished one; the merge streams in bounded pieces."""

import h5py
import pandas as pd
import pytest

import sim.store as store
from sim.config import sweep_points
from sim.parallel import run_batch
from sim.experiment import run_experiment
from sim.store import (
    ResultsError,
    ResultsWriter,
    parts_dir,
    read_attrs,
    read_points,
    read_replicates,
    read_trajectories,
)
from tests.runs_support import BATCH, REPLICATES, assert_same_datasets, kill9, small_config, start_stopped_run


def test_unfinished_file_reads_like_the_finished_one(tmp_path):
    # all batches written, not yet merged: the readers see the shards
    config = small_config(replicates=6)
    points = sweep_points(config)
    out = tmp_path / "shards.h5"
    writer = ResultsWriter(out, config, points)
    for p in reversed(points):  # written out of order: the readers still give canonical order
        writer.write(run_batch(p, 3, 5, config.experiment.seed))
        writer.write(run_batch(p, 0, 2, config.experiment.seed))
    writer.release()
    assert not read_attrs(out)["complete"] and len(list(parts_dir(out).glob("p*.h5"))) == 8
    with h5py.File(out, "r") as f:  # plain h5py sees the header and empty tables until the merge
        assert f["replicates/point"].shape == (0,) and f["points/index"].shape == (4,)
    merged = tmp_path / "merged.h5"
    run_experiment(config, merged, batch_size=4, progress=False)
    pd.testing.assert_frame_equal(read_replicates(out), read_replicates(merged))
    pd.testing.assert_frame_equal(read_trajectories(out), read_trajectories(merged))
    pd.testing.assert_frame_equal(read_trajectories(out, points=[2], replicates=[4], by_age=False),
                                  read_trajectories(merged, points=[2], replicates=[4], by_age=False))
    pd.testing.assert_frame_equal(read_points(out), read_points(merged))
    # finishing the unfinished file gives the datasets of the uninterrupted one
    run_experiment(config, out, resume=True, progress=False)
    assert_same_datasets(out, merged)


def test_merge_in_small_pieces_gives_the_same_file(tmp_path, monkeypatch):
    config = small_config(replicates=7)
    whole = tmp_path / "whole.h5"
    run_experiment(config, whole, batch_size=2, progress=False)
    monkeypatch.setattr(store.writer, "_MERGE_ROWS", 3)
    monkeypatch.setattr(store.writer, "_MERGE_RECORDS", 10)
    pieces = tmp_path / "pieces.h5"
    run_experiment(config, pieces, batch_size=2, progress=False)
    assert_same_datasets(whole, pieces)


def test_writer_refuses_a_replicate_twice(tmp_path):
    config = small_config(replicates=6)
    points = sweep_points(config)
    writer = ResultsWriter(tmp_path / "x.h5", config, points)
    writer.write(run_batch(points[1], 0, 3, config.experiment.seed))
    with pytest.raises(ResultsError, match="replicates 3-4 of point 1 overlap shard p000001-r000000000"):
        writer.write(run_batch(points[1], 3, 4, config.experiment.seed))
    writer.release()
    assert len(read_replicates(tmp_path / "x.h5")) == 4


def test_a_corrupt_shard_is_redone_on_resume(tmp_path):
    proc, config, out = start_stopped_run(tmp_path, "between-shards", n=3)
    kill9(proc)
    shard = sorted(parts_dir(out).glob("p*.h5"))[1]
    shard.write_bytes(shard.read_bytes()[:200])  # e.g. damaged by a failing disk
    reference = tmp_path / "ref.h5"
    run_experiment(small_config(replicates=REPLICATES), reference, progress=False)
    run_experiment(small_config(replicates=REPLICATES), out, resume=True, batch_size=BATCH, progress=False)
    assert_same_datasets(reference, out)
