"""Appending rows to the merged results file with whole chunks compressed on threads.

The results file's datasets are chunked, shuffled and gzip-compressed
(``layout._COMPRESSION``), and compressing is most of what appending costs
the one process that merges. Here whole chunks are shuffled and deflated on
a few threads (numpy's copy and zlib's deflate release the GIL) while that
process goes on, and written as HDF5 stores them (its direct chunk write):
the bytes are those HDF5's own filters write, and h5py reads them back as
any other chunk (``tests/test_chunks.py``). Rows short of a whole chunk wait
for the next append; ``finish`` writes them through HDF5's filters.
"""

from __future__ import annotations

import time
import zlib
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor

import numpy as np

__all__ = ["COMPRESS_THREADS", "ChunkAppender", "encode_chunk"]

# threads that compress; each keeps up with some 3 million replicates a second of the K = 500
# invasion's replicate table (0.3 microseconds a replicate, measured by `broodline bench --scaling`)
COMPRESS_THREADS = 4
# bytes of rows queued to the threads and not yet written, at most: bounds the memory when
# the threads lag (as the merge's buffer, ``writer._MERGE_ROWS``, bounds it before them)
_MAX_PENDING_BYTES = 16 << 20


def encode_chunk(rows: np.ndarray, level: int) -> bytes:
    """One chunk's rows as HDF5 stores them after its shuffle and deflate filters.

    HDF5's shuffle filter puts the first byte of every element first, then
    the second byte of every element, and so on (the element: the dataset's
    type, e.g. 8 bytes for int64, 13 for 13-byte text); deflate is a zlib
    stream at ``level``.
    """
    size = rows.dtype.itemsize
    data = np.ascontiguousarray(rows).view(np.uint8).reshape(-1, size)
    return zlib.compress(np.ascontiguousarray(data.T), level)


def _encode(parts: list[np.ndarray], level: int) -> tuple[bytes, float]:
    cpu = time.thread_time()
    data = encode_chunk(parts[0] if len(parts) == 1 else np.concatenate(parts), level)
    return data, time.thread_time() - cpu


def _gzip_level(ds) -> int:
    """The deflate level of a dataset filtered by shuffle then gzip only (the results file's)."""
    filters = ds.id.get_create_plist().get_nfilters()
    if ds.compression != "gzip" or not ds.shuffle or filters != 2 or ds.chunks is None:
        raise ValueError(f"{ds.name}: only a chunked, shuffled and gzip-compressed dataset is "
                         f"appended chunk by chunk")
    return int(ds.compression_opts)


class ChunkAppender:
    """Appends rows to datasets of one file along their first axis, a whole chunk at a time.

    Each dataset must start empty and be appended to only through one
    appender. ``append`` queues rows (compressing whole chunks on the
    threads) and writes the chunks already compressed; the file must be open
    during each call, and may be closed and reopened between calls. ``finish``
    writes everything; ``close`` drops what is not written. ``cpu_s`` is the
    threads' CPU time so far.
    """

    def __init__(self, threads: int = COMPRESS_THREADS):
        self.threads = threads
        self.pool: ThreadPoolExecutor | None = None
        self.tails: dict[str, list[np.ndarray]] = {}  # rows short of a whole chunk, by dataset
        self.queued: dict[str, int] = {}  # rows given to the threads, by dataset
        self.pending: deque[tuple[str, tuple, Future, int]] = deque()  # (dataset, corner, chunk, bytes)
        self.pending_bytes = 0
        self.cpu_s = 0.0

    def append(self, f, name: str, parts: list[np.ndarray]) -> None:
        """Queue the rows of ``parts`` (arrays, in order; not to be changed afterwards) for
        the dataset ``f[name]``; write the chunks compressed so far.

        The rows are not copied here: each thread gathers its chunk's rows from the parts.
        """
        ds = f[name]
        rest = self.tails.setdefault(name, [])
        rest.extend(part for part in parts if len(part))
        chunk = ds.chunks[0]
        if sum(map(len, rest)) >= chunk:
            level = _gzip_level(ds)
            if self.pool is None:
                self.pool = ThreadPoolExecutor(self.threads, thread_name_prefix="broodline-compress")
            first = self.queued.get(name, 0)
            corner = (0,) * (ds.ndim - 1)
            pieces, need = [], chunk
            for part in rest:
                while len(part) >= need:
                    pieces.append(part[:need])
                    size = sum(piece.nbytes for piece in pieces)
                    self.pending.append((name, (first, *corner), self.pool.submit(_encode, pieces, level), size))
                    self.pending_bytes += size
                    part, first, pieces, need = part[need:], first + chunk, [], chunk
                if len(part):
                    pieces.append(part)
                    need -= len(part)
            self.tails[name] = pieces
            self.queued[name] = first
            ds.resize(first, axis=0)  # its chunks are written as they come
        self._write(f, limit=_MAX_PENDING_BYTES)

    def _write(self, f, *, limit: int | None = None) -> None:
        """Write the compressed chunks, in the order queued: those finished, and, waiting for
        the threads, as many more as leave at most ``limit`` bytes of rows queued (None: all)."""
        datasets = {}
        while self.pending and (self.pending[0][2].done() or limit is None
                                or self.pending_bytes > limit):
            name, offset, future, size = self.pending.popleft()
            data, cpu = future.result()
            self.cpu_s += cpu
            self.pending_bytes -= size
            ds = datasets.get(name)
            if ds is None:
                ds = datasets[name] = f[name].id
            ds.write_direct_chunk(offset, data)

    def finish(self, f) -> None:
        """Write every queued chunk, then the rows short of a whole chunk (through HDF5's
        filters), so that each dataset holds exactly the rows appended."""
        self._write(f)
        for name, rest in self.tails.items():
            if rest:
                ds = f[name]
                start = self.queued.get(name, 0)
                ds.resize(start + sum(map(len, rest)), axis=0)
                ds[start:] = np.concatenate(rest)
        self.tails.clear()
        self.queued.clear()
        self.close()

    def close(self) -> None:
        """Stop the threads; what is not written is dropped."""
        if self.pool is not None:
            self.pool.shutdown(wait=False, cancel_futures=True)
            self.pool = None
        self.pending.clear()
        self.pending_bytes = 0
