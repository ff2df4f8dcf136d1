"""Shards: an unfinished file reads like the finished one; the merge streams in bounded pieces."""

import dataclasses

import h5py
import pandas as pd
import pytest

import sim.store as store
from sim.config import sweep_points
from sim.experiment import run_experiment
from sim.parallel import run_batch
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


def test_merging_rows_held_in_memory_gives_the_file_read_back_from_the_shards(tmp_path, monkeypatch):
    # The writer merges the rows a batch's saver hands it without reading its shard back;
    # with no room to hold rows it reads every shard: the two files must be the same.
    config = small_config(replicates=7)
    reads = []
    original = store.shards.read_shard
    monkeypatch.setattr(store.shards, "read_shard", lambda path: reads.append(path) or original(path))
    held = tmp_path / "held.h5"
    run_experiment(config, held, batch_size=2, progress=False, workers=1)
    assert reads == []
    monkeypatch.setattr(store.writer, "HELD_ROWS_BYTES", 0)
    read_back = tmp_path / "read_back.h5"
    run_experiment(config, read_back, batch_size=2, progress=False, workers=1)
    assert len(reads) == 4 * 4  # 4 points, 7 replicates in batches of 2
    assert_same_datasets(held, read_back)


def test_writer_refuses_a_replicate_twice(tmp_path):
    config = small_config(replicates=6)
    points = sweep_points(config)
    writer = ResultsWriter(tmp_path / "x.h5", config, points)
    writer.write(run_batch(points[1], 0, 3, config.experiment.seed))
    with pytest.raises(ResultsError, match="replicates 3-4 of point 1 overlap shard p000001-r000000000"):
        writer.write(run_batch(points[1], 3, 4, config.experiment.seed))
    writer.release()
    assert len(read_replicates(tmp_path / "x.h5")) == 4


def test_the_overlap_check_agrees_with_comparing_every_pair(tmp_path):
    # the writer bisects its index of shards; the reference is the plain definition, two
    # spans [a, b] and [c, d] overlap when a <= d and c <= b (common practice)
    import numpy as np

    from sim.store import Shard

    config = small_config(replicates=200)
    writer = ResultsWriter(tmp_path / "x.h5", config, sweep_points(config))
    rng = np.random.default_rng(3)
    kept: list[Shard] = []
    for _ in range(400):
        first = int(rng.integers(0, 190))
        shard = Shard(int(rng.integers(0, 2)), first, first + int(rng.integers(0, 10)))
        clash = any(s.point == shard.point and s.first <= shard.last and shard.first <= s.last
                    for s in kept)
        if clash:
            with pytest.raises(ResultsError, match="overlap shard"):
                writer._claim(shard)
        else:
            writer._claim(shard)
            writer.shards[(shard.point, shard.first)] = shard
            kept.append(shard)
    assert 20 < len(kept) < 400  # both answers were tried
    writer.release()


def test_a_full_disk_while_the_writer_saves_a_shard_on_a_thread_is_a_clear_error(tmp_path, monkeypatch):
    import errno

    from sim.store.shards import shard_image

    config = small_config(replicates=6)
    points = sweep_points(config)
    writer = ResultsWriter(tmp_path / "x.h5", config, points)
    writer.write(run_batch(points[0], 0, 2, config.experiment.seed))
    rows = store.shard_rows(writer.shard_target(0), run_batch(points[0], 3, 5, config.experiment.seed))

    def full_disk(path, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(store.writer.durable, "write_bytes_atomic", full_disk)
    with pytest.raises(ResultsError, match="No space left on device. The 3 replicates already saved are intact"):
        writer.write_rows(rows, shard_image(writer.shard_target(0), rows))  # (raised here or at
        writer.collect(wait=True)  # the next look at the threads, whichever sees it first)
    monkeypatch.undo()  # the disk has room again: the same batch is saved, once
    writer.write_rows(rows, shard_image(writer.shard_target(0), rows))
    with pytest.raises(ResultsError, match="overlap"):
        writer.write_rows(rows, shard_image(writer.shard_target(0), rows))
    writer.release()
    assert len(read_replicates(tmp_path / "x.h5")) == 6


def test_a_corrupt_shard_is_redone_on_resume(tmp_path):
    proc, config, out = start_stopped_run(tmp_path, "between-shards", n=3)
    kill9(proc)
    shard = sorted(parts_dir(out).glob("p*.h5"))[1]
    shard.write_bytes(shard.read_bytes()[:200])  # e.g. damaged by a failing disk
    reference = tmp_path / "ref.h5"
    run_experiment(small_config(replicates=REPLICATES), reference, progress=False)
    run_experiment(small_config(replicates=REPLICATES), out, resume=True, batch_size=BATCH, progress=False)
    assert_same_datasets(reference, out)


def test_a_worker_saves_its_shard_only_where_it_sees_the_writers_folder(tmp_path):
    # a dask worker on another machine may not see the writer's disk: it finds no probe file
    # there and sends the batch's rows back instead (the writer saves them); one that sees the
    # folder saves the shard itself, as a local worker does
    from sim.parallel import Batch, Job, run_job
    from sim.point_run import PointRun

    config = small_config(replicates=6)
    point = PointRun.of(sweep_points(config)[0])
    writer = ResultsWriter(tmp_path / "probe.h5", config, sweep_points(config))
    target = writer.shard_target(0)
    assert (target.parts / target.probe).is_file()
    seen = run_job(Job(Batch(0, 0, 2), point, config.experiment.seed, target=target))
    assert seen.results is None and (target.parts / seen.shard.name).is_file()
    elsewhere = dataclasses.replace(target, parts=tmp_path / "another-machine")
    (tmp_path / "another-machine").mkdir()
    unseen = run_job(Job(Batch(0, 3, 5), point, config.experiment.seed, target=elsewhere))
    assert unseen.shard is None and unseen.results is None and len(unseen.rows.table) == 3
    assert unseen.image is not None  # the shard's file, built where the batch ran
    assert not list((tmp_path / "another-machine").iterdir())  # nothing written where unseen
    writer.add_shard(seen.shard, seen.rows)
    writer.write_rows(unseen.rows, unseen.image)  # the writer writes the bytes, on a thread
    writer.release()
    assert not list(target.parts.glob("*.probe"))  # the probe goes with the writer
    reference = tmp_path / "one.h5"
    run_experiment(config, reference, workers=1, progress=False)
    both = [read_replicates(f).query("point == 0").reset_index(drop=True)
            for f in (reference, tmp_path / "probe.h5")]
    pd.testing.assert_frame_equal(*both)


def test_the_run_summary_counts_what_the_file_holds(tmp_path):
    # the summary is tallied from the batches as they come (and, on resume, from the shards
    # already saved), not read back from the file: it must be what the file holds
    from sim.outcomes import fixed_outcome, summarize
    from sim.store import count_outcomes

    config = small_config(replicates=7)
    out = tmp_path / "sum.h5"
    points = sweep_points(config)
    writer = ResultsWriter(out, config, points)
    writer.write(run_batch(points[-1], 2, 4, config.experiment.seed))  # saved before a "crash"
    writer.release()
    resumed = run_experiment(config, out, resume=True, batch_size=3, progress=False)
    fresh = run_experiment(config, tmp_path / "fresh.h5", workers=2, progress=False)
    for summary, path in ((resumed, out), (fresh, tmp_path / "fresh.h5")):
        pd.testing.assert_frame_equal(summary, summarize(count_outcomes(path), read_points(path),
                                                         fixed=fixed_outcome(config)))


def test_the_printed_summary_is_the_table_as_text():
    # common practice: the count columns and the fraction over the resolved replicates
    # (capped ones left out) by hand: point 0 fixed 3 of 4 resolved, point 1 none resolved
    import math

    from sim.outcomes import summary_of

    summary = summary_of({(0, "mutant-fixed"): 3, (0, "mutant-lost"): 1, (1, "capped"): 2},
                         {0: {"k": 1.0}, 1: {"k": 2.5}})
    frame = summary.frame()
    assert frame["fixed_fraction"][0] == 0.75 and math.isnan(frame["fixed_fraction"][1])
    lines = summary.text().splitlines()
    assert lines[0].split() == list(frame.columns)
    assert lines[1].split() == ["0", "1", "4", "3", "1", "0", "4", "0.750"]
    assert lines[2].split() == ["1", "2.5", "2", "0", "0", "2", "0", "nan"]
    assert len({len(line) for line in lines}) == 1  # right-aligned columns
