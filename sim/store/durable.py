"""Durable writes: a file exists whole or not at all, and survives a crash once renamed.

Each file is written as ``NAME.tmp``, fsynced, renamed into place and its
folder fsynced (DEVELOPERS.md, "Long runs: batches, workers, the results file").
"""

from __future__ import annotations

import errno
import os
import re
from contextlib import contextmanager
from pathlib import Path

import h5py

__all__ = ["write_atomic", "write_bytes_atomic", "file_image", "commit_file", "h5_write_errors"]


def _fsync_path(path: Path, *, directory: bool = False) -> None:
    fd = os.open(path, os.O_RDONLY | (getattr(os, "O_DIRECTORY", 0) if directory else 0))
    try:
        os.fsync(fd)
    except OSError as err:  # some filesystems refuse fsync on a folder
        if not directory or err.errno not in (errno.EINVAL, errno.EBADF):
            raise
    finally:
        os.close(fd)


def write_atomic(path: Path, fill) -> None:
    """Write an HDF5 file as ``path.tmp`` with ``fill(file)``, make it durable, rename it to ``path``.

    After a crash at any moment ``path`` is either absent, or its old
    version, or the complete new one; a leftover ``.tmp`` is never read.
    The file is built in memory and its bytes written in one go (files of a
    batch's or a header's size): a full disk is then a plain OSError, never a
    half-closed HDF5 file.
    """
    write_bytes_atomic(path, file_image(path.name, fill))


def file_image(name: str, fill) -> bytes:
    """The bytes of an HDF5 file built in memory by ``fill(file)`` (``name``: its name there)."""
    with h5py.File(name, "w", driver="core", backing_store=False) as f:
        fill(f)
        f.flush()
        return f.id.get_file_image()


def write_bytes_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` as ``path.tmp``, make it durable, rename it to ``path`` (whole or not
    at all, as ``write_atomic``)."""
    tmp = path.with_name(path.name + ".tmp")
    try:
        _write_file(tmp, data)
        _commit(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def commit_file(tmp: Path, path: Path) -> None:
    """Make a finished, closed ``tmp`` file durable and rename it to ``path`` (a file written
    over a while, not in one ``write_atomic`` call)."""
    _fsync_path(tmp)
    _commit(tmp, path)


def _write_file(path: Path, data: bytes) -> None:
    """Write bytes to a new file and fsync it."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
    finally:
        os.close(fd)


@contextmanager
def h5_write_errors():
    """HDF5 reports a failed write (a full disk) as RuntimeError; raise it as the OSError it is."""
    try:
        yield
    except RuntimeError as err:
        code = re.search(r"errno = (\d+)", str(err))
        if code is None:
            raise
        raise OSError(int(code.group(1)), os.strerror(int(code.group(1)))) from None


def _commit(tmp: Path, path: Path) -> None:
    """Rename a finished ``.tmp`` into place and make the rename durable."""
    os.replace(tmp, path)
    _fsync_path(path.parent, directory=True)
