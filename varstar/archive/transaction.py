"""All-or-nothing changes to an archive file, serialised by a lock.

Mechanism: a change is written into a copy of the archive beside it
(``.ARCHIVE.h5.<pid>.tmp``); the copy is flushed and fsynced, then renamed over
the original with :func:`os.replace`, which POSIX makes atomic; finally the
directory is fsynced so the rename itself is durable.  A process killed at any
moment leaves either the old file (plus a stray temporary file, removed by the
next writer) or the new one.  Readers that opened the old file keep reading a
consistent snapshot.

Writers are serialised by an exclusive ``fcntl`` lock on ``ARCHIVE.h5.lock``,
which records the holder's process id and host so a waiting writer can name it.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import os
import shutil
import socket
import time
from collections.abc import Iterator
from pathlib import Path

import h5py

from ..errors import ArchiveError


def lock_path(path: Path) -> Path:
    return path.with_name(path.name + ".lock")


def _tmp_path(path: Path) -> Path:
    return path.with_name(f".{path.name}.{os.getpid()}.tmp")


@contextlib.contextmanager
def writer_lock(path: Path, timeout_s: float = 30.0) -> Iterator[None]:
    """Hold the archive's exclusive writer lock for the ``with`` block."""
    lp = lock_path(path)
    try:
        fd = os.open(lp, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError as exc:
        raise ArchiveError(f"{path}: cannot create lock file {lp.name}: {exc.strerror}") from None
    try:
        deadline = time.monotonic() + timeout_s
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except OSError as exc:
                if exc.errno not in (errno.EAGAIN, errno.EACCES):
                    raise
                if time.monotonic() >= deadline:
                    holder = os.pread(fd, 200, 0).decode("utf-8", "replace").strip() or "another process"
                    raise ArchiveError(
                        f"{path}: another varstar process is changing this archive ({holder}); "
                        f"gave up after {timeout_s:g} s. Try again when it has finished."
                    ) from None
                time.sleep(0.05)
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"pid {os.getpid()} on {socket.gethostname()}".encode(), 0)
        try:
            yield
        finally:
            os.ftruncate(fd, 0)
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


def _fsync_path(p: Path, directory: bool = False) -> None:
    fd = os.open(p, os.O_RDONLY | (os.O_DIRECTORY if directory else 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _remove_stale_temporaries(path: Path) -> None:
    for stale in path.parent.glob(f".{path.name}.*.tmp"):
        with contextlib.suppress(OSError):
            stale.unlink()


@contextlib.contextmanager
def transaction(path: Path, *, timeout_s: float = 30.0) -> Iterator[h5py.File]:
    """Open ``path`` for one all-or-nothing change.

    Yields a writable :class:`h5py.File` on a private copy.  If the block ends
    normally the copy replaces the archive atomically; if it raises, the copy is
    deleted and the archive is untouched.
    """
    path = Path(path)
    with writer_lock(path, timeout_s):
        if not path.exists():
            raise ArchiveError(f"{path}: no such archive (create it with 'varstar init')")
        _remove_stale_temporaries(path)
        tmp = _tmp_path(path)
        try:
            shutil.copyfile(path, tmp)
            with h5py.File(tmp, "r+") as f:
                yield f
            _fsync_path(tmp)
            os.replace(tmp, path)
            _fsync_path(path.parent, directory=True)
        except OSError as exc:
            with contextlib.suppress(OSError):
                tmp.unlink()
            if exc.errno == errno.ENOSPC:
                raise ArchiveError(f"{path}: disk full while writing; the archive is unchanged") from None
            raise ArchiveError(f"{path}: could not write the archive ({exc.strerror}); it is unchanged") from None
        except BaseException:
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise


def create_new(path: Path, build) -> None:
    """Create a new archive file atomically; ``build(h5py.File)`` fills it."""
    path = Path(path)
    if path.exists():
        raise ArchiveError(f"{path}: already exists; choose another name or remove it first")
    if not path.parent.exists():
        raise ArchiveError(f"{path}: folder {path.parent} does not exist")
    with writer_lock(path):
        if path.exists():
            raise ArchiveError(f"{path}: already exists; choose another name or remove it first")
        tmp = _tmp_path(path)
        try:
            with h5py.File(tmp, "w") as f:
                build(f)
            _fsync_path(tmp)
            os.link(tmp, path)  # fails if path appeared meanwhile: never overwrite
            tmp.unlink()
            _fsync_path(path.parent, directory=True)
        except FileExistsError:
            tmp.unlink()
            raise ArchiveError(f"{path}: already exists; choose another name or remove it first") from None
        except OSError as exc:
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise ArchiveError(f"{path}: could not create the archive ({exc.strerror})") from None
        except BaseException:
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise
