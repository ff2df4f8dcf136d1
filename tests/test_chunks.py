"""Whole chunks compressed on threads and written directly (sim.store.chunks).

The reference is HDF5 itself, through h5py: a chunk written as bytes must read
back through HDF5's own shuffle and deflate filters as the rows it was made
from, and a merged results file must hold the same datasets as one whose rows
went through h5py's ordinary writes.
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from sim.bench_scaling import results_hash
from sim.experiment import run_experiment
from sim.store import chunks, writer
from sim.store.chunks import ChunkAppender, encode_chunk
from sim.store.layout import _append, _column
from tests.invasion_configs import invasion_config

# dtypes and row shapes of the results file's datasets: 4- and 8-byte integers, 2 per row
# (spawn keys), fixed-length text (outcomes), counts by allele and age, year types
CASES = [(np.int32, ()), (np.int64, (2,)), (np.dtype("S13"), ()), (np.uint32, (2, 3)), (np.uint8, ())]


def _rows(dtype, shape, n, seed=0):
    rng = np.random.default_rng(seed)
    if np.dtype(dtype).kind == "S":
        words = np.array([b"mutant-fixed", b"mutant-lost", b"extinct", b"undecided"], dtype=dtype)
        return words[rng.integers(0, len(words), n)]
    return rng.integers(0, 200, (n, *shape)).astype(dtype)


@pytest.mark.parametrize(("dtype", "shape"), CASES)
def test_a_chunk_encoded_here_reads_back_through_hdf5s_filters(tmp_path, dtype, shape):
    rows = _rows(dtype, shape, 3 * 512)
    with h5py.File(tmp_path / "f.h5", "w") as f:
        ds = _column(f, "x", dtype, shape, 512)  # the results file's filters (shuffle, gzip 1)
        ds.resize(len(rows), axis=0)
        for first in range(0, len(rows), 512):
            ds.id.write_direct_chunk((first, *(0,) * len(shape)), encode_chunk(rows[first:first + 512], 1))
    with h5py.File(tmp_path / "f.h5", "r") as f:
        np.testing.assert_array_equal(f["x"][()], rows)


def test_the_shuffle_is_hdf5s_byte_order():
    # HDF5's shuffle filter (H5Zshuffle.c): byte 0 of every element, then byte 1, ...;
    # here checked on two int32 elements written out by hand
    data = np.array([0x04030201, 0x08070605], dtype="<i4")
    import zlib

    assert zlib.decompress(encode_chunk(data, 1)) == bytes([1, 5, 2, 6, 3, 7, 4, 8])


@pytest.mark.parametrize("pending", [0, 32 << 20])
def test_appends_of_any_size_across_reopenings_hold_exactly_the_rows(tmp_path, monkeypatch, pending):
    # pending = 0: the writer waits for the threads at every chunk (the memory bound's path)
    monkeypatch.setattr(chunks, "_MAX_PENDING_BYTES", pending)
    rng = np.random.default_rng(4)
    sizes = [0, 1, 511, 1, 1024, 300, 2000, 7, 5]
    parts = {name: [_rows(dtype, shape, n, seed=i) for i, n in enumerate(sizes)]
             for name, (dtype, shape) in zip("abcde", CASES, strict=True)}
    path = tmp_path / "f.h5"
    with h5py.File(path, "w") as f:
        for name, (dtype, shape) in zip("abcde", CASES, strict=True):
            _column(f, name, dtype, shape, 512)
    appender = ChunkAppender(threads=2)
    for i in range(0, len(sizes), 3):
        with h5py.File(path, "a") as f:  # closed between appends, as the merge does
            for name in rng.permutation(list(parts)):
                appender.append(f, name, parts[name][i:i + 3])
    with h5py.File(path, "a") as f:
        appender.finish(f)
    assert appender.cpu_s > 0
    with h5py.File(path, "r") as f:
        for name, given in parts.items():
            np.testing.assert_array_equal(f[name][()], np.concatenate(given))


def test_a_dataset_without_the_results_files_filters_is_refused(tmp_path):
    with h5py.File(tmp_path / "f.h5", "w") as f:
        f.create_dataset("x", shape=(0,), maxshape=(None,), dtype=np.int32, chunks=(4,),
                         compression="gzip")  # no shuffle
        with pytest.raises(ValueError, match="/x: only a chunked, shuffled"):
            ChunkAppender().append(f, "x", [np.arange(8, dtype=np.int32)])


class _PlainAppender:
    """Rows through h5py's ordinary writes (HDF5 filters them): the reference."""

    cpu_s = 0.0

    def append(self, f, name, parts):
        _append(f[name], np.concatenate(parts))

    def finish(self, f):
        pass

    def close(self):
        pass


@pytest.mark.parametrize("trajectory", ["none", "by-allele"])
def test_a_merged_file_holds_the_datasets_hdf5s_own_writes_give(tmp_path, monkeypatch, trajectory):
    # rows of many chunks (8,192 replicate rows, 4,096 census records a chunk), merged in
    # pieces smaller than a chunk so that rows wait for the next piece
    monkeypatch.setattr(writer, "_MERGE_ROWS", 5000)
    monkeypatch.setattr(writer, "_MERGE_RECORDS", 3000)
    config = invasion_config(capacity=10.0, replicates=20_000, max_steps=400)
    config = config.model_copy(update={"experiment": config.experiment.model_copy(
        update={"trajectory": trajectory})})
    digests = []
    for name, appender in (("direct", ChunkAppender), ("plain", _PlainAppender)):
        monkeypatch.setattr(writer, "ChunkAppender", appender)
        out = tmp_path / f"{name}.h5"
        run_experiment(config, out, progress=False, batch_size=1500, as_frame=False)
        digests.append(results_hash(out))
    with h5py.File(tmp_path / "direct.h5", "r") as f:
        assert f["replicates/point"].shape == (20_000,)
        assert trajectory == "none" or f["trajectories/step"].shape[0] > 3 * 4096
    assert digests[0] == digests[1]
