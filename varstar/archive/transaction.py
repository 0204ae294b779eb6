"""All-or-nothing changes to an archive file, serialised by a lock; consistent reads.

Cost: a change costs what HDF5 changes (pages of metadata, rewritten chunks,
appended data), not the size of the archive.

Writing (:func:`transaction`)
    1. Take the writer lock: an exclusive ``flock`` on ``ARCHIVE.h5.lock``, which
       records the holder's process id and host so a waiting writer can name it.
    2. Finish or discard what a killed writer left (:func:`recover`).
    3. Open the archive through h5py's Python file-object driver on a
       :class:`~.journal.PageOverlay`: HDF5 reads the file on disk and its own
       writes land in memory pages only.  The caller changes the
       :class:`h5py.File`; if the block raises, the pages are dropped and the
       archive was never touched.
    4. After the :class:`h5py.File` is closed: write the bytes beyond the old end
       of the file straight into the archive (HDF5 ignores bytes past the
       end-of-allocation mark in its superblock, so readers still see the old
       state, and a full disk shows up here, before anything has changed) and
       flush them; then write the journal ``ARCHIVE.h5.journal`` (changed pages
       inside the old file, new length, digests) and flush it and the directory.
       **This is the commit point.**  Any failure before it (for example ENOSPC)
       truncates the archive back to its old length: byte for byte as before.
    5. Apply: take an exclusive ``flock`` on the archive file itself (readers
       hold it shared while they read), write the pages in place, set the
       length, flush, delete the journal, flush the directory, release.

Recovery (:func:`recover`): a complete, checksummed journal is applied again
(idempotent: it holds final bytes); an incomplete one is deleted (its writer died
before the commit point, so the archive holds the state before).  Writers
recover under the writer lock before they start; readers too when they find a
committed journal and no live writer.

Reading (:func:`open_read`)
    A reader holds a shared ``flock`` on the archive file for as long as its
    :class:`h5py.File` is open, so it never overlaps step 5.  If it finds a
    committed journal, it waits up to a second for it to be written in (by its
    writer, or by the reader itself under the writer lock when the writer is
    gone); failing that (read-only file system, no permission, long readers
    elsewhere) it reads through a :class:`~.journal.PageOverlay` of the journal,
    which shows the committed state without changing the file.  A committed
    change is never undone, so no reader sees the new state and later the old.

Why not something else: the previous mechanism (copy, change the copy, rename)
cost O(archive size) per change.  HDF5's own SWMR mode gives single-writer
consistency but not all-or-nothing changes, and a file system's copy-on-write
clones are not portable.  A redo journal keeps the archive a single plain HDF5
file that any HDF5 library reads directly.

Limits: the archive must be on a local file system with ``flock`` (as before).
On copy-on-write file systems (btrfs, ZFS) an in-place write may itself hit a
full disk after the commit point; the change then stays committed in the
journal, readers see it through the journal, and the next writer completes it.
Keep ``ARCHIVE.h5.journal`` with the archive: copying or restoring an archive
without the journal of a killed writer loses that writer's committed change.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import io
import os
import socket
import time
from collections.abc import Iterator
from pathlib import Path
from types import MappingProxyType

import h5py

from ..errors import ArchiveError
from . import journal as jr

_POLL_S = 0.02
#: HDF5 file creation options of new archives: HDF5 1.10 file format (readable by
#: HDF5 >= 1.10) with persistent free-space tracking, so the space of a gzip chunk
#: rewritten by an append is reused by later changes instead of leaking.
CREATE_OPTIONS = MappingProxyType({"libver": ("v110", "v110"), "fs_strategy": "fsm", "fs_persist": True, "fs_threshold": 1})
#: How long a reader that found a committed journal waits for it to be written
#: into the archive (by its writer, or by the reader itself when the writer is
#: gone and other readers keep the file busy) before reading through the journal.
_READER_APPLY_WAIT_S = 1.0


def lock_path(path: Path) -> Path:
    return path.with_name(path.name + ".lock")


def _tmp_path(path: Path) -> Path:
    return path.with_name(f".{path.name}.{os.getpid()}.tmp")


def _holder(path: Path) -> str:
    """Who holds the writer lock, as recorded in the lock file."""
    try:
        with open(lock_path(path), "rb") as fh:
            return fh.read(200).decode("utf-8", "replace").strip() or "another process"
    except OSError:
        return "another process"


def _flock_until(fd: int, op: int, deadline: float) -> bool:
    """Take ``flock(fd, op)``, polling until ``deadline`` (monotonic); False on timeout."""
    while True:
        try:
            fcntl.flock(fd, op | fcntl.LOCK_NB)
            return True
        except OSError as exc:
            if exc.errno not in (errno.EAGAIN, errno.EACCES):
                raise
        if time.monotonic() >= deadline:
            return False
        time.sleep(_POLL_S)


def _mark_holder(fd: int) -> None:
    """Record this process in the lock file, for the message of a writer that waits (best effort)."""
    with contextlib.suppress(OSError):
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"pid {os.getpid()} on {socket.gethostname()}".encode(), 0)


def _clear_holder(fd: int) -> None:
    with contextlib.suppress(OSError):
        os.ftruncate(fd, 0)


def _try_writer_lock(path: Path) -> int | None:
    """The writer lock's descriptor if it is free right now, else None (never waits)."""
    try:
        fd = os.open(lock_path(path), os.O_RDWR | os.O_CREAT, 0o644)
    except OSError:
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        return None
    _mark_holder(fd)
    return fd


@contextlib.contextmanager
def writer_lock(path: Path, timeout_s: float = 30.0) -> Iterator[None]:
    """Hold the archive's exclusive writer lock for the ``with`` block."""
    lp = lock_path(path)
    try:
        fd = os.open(lp, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError as exc:
        raise ArchiveError(f"{path}: cannot create lock file {lp.name}: {exc.strerror}") from None
    try:
        if not _flock_until(fd, fcntl.LOCK_EX, time.monotonic() + timeout_s):
            holder = os.pread(fd, 200, 0).decode("utf-8", "replace").strip() or "another process"
            raise ArchiveError(
                f"{path}: another varstar process is changing this archive ({holder}); "
                f"gave up after {timeout_s:g} s. Try again when it has finished."
            )
        _mark_holder(fd)
        try:
            yield
        finally:
            _clear_holder(fd)
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


def _remove_stale_temporaries(path: Path) -> None:
    for stale in path.parent.glob(f".{path.name}.*.tmp"):
        with contextlib.suppress(OSError):
            stale.unlink()


# --------------------------------------------------------------------------- recovery
def recover(path: Path, timeout_s: float = 30.0) -> bool:
    """Finish or discard the journal a killed writer left; the caller holds the writer lock.

    Returns True when the archive holds no pending change afterwards, False if
    other readers kept it busy for ``timeout_s`` (the journal is then left as it
    was, still committed).  Raises :class:`ArchiveError` if the journal does not
    fit the archive or the archive cannot be written.
    """
    jp = jr.journal_path(path)
    if not jp.exists():
        return True
    j = jr.read_journal(jp)
    if j is None:
        # Incomplete: its writer died before the commit point; the archive holds
        # the state before (maybe with unused bytes past HDF5's end, which the next
        # change truncates away).
        with contextlib.suppress(FileNotFoundError):
            jp.unlink()
        jr.sync_dir(path.parent)
        return True
    fd = os.open(path, os.O_RDWR)
    try:
        if not _flock_until(fd, fcntl.LOCK_EX, time.monotonic() + timeout_s):
            return False
        try:
            if not jr.tail_matches(fd, j):
                raise ArchiveError(_mismatch_message(path, jp))
            jr.apply_journal(fd, j)
            jp.unlink()
            jr.sync_dir(path.parent)
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)
    return True


def _mismatch_message(path: Path, jp: Path) -> str:
    return (
        f"{path}: the pending change in {jp.name} does not fit this archive (was the archive replaced or restored "
        f"after a crash?). If the archive is the one you want, move {jp.name} away; otherwise put back the archive "
        f"file that belongs with it."
    )


# --------------------------------------------------------------------------- writing
@contextlib.contextmanager
def transaction(path: Path, *, timeout_s: float = 30.0, older_schema: bool = False) -> Iterator[h5py.File]:
    """Open ``path`` for one all-or-nothing change.

    Yields a writable :class:`h5py.File` whose writes stay in memory.  If the
    block ends normally the change is committed through the journal and written
    into the archive in place; if it raises, nothing on disk has changed.
    Waits up to ``timeout_s`` for another writer (and for readers to finish
    when the change is written in).  The file must be a varstar archive of the
    current schema (:func:`varstar.archive.store.check_root` with ``writing``);
    only the upgrade itself passes ``older_schema=True``.
    """
    path = Path(path)
    with writer_lock(path, timeout_s):
        if not path.exists():
            raise ArchiveError(f"{path}: no such archive (create it with 'varstar init')")
        _remove_stale_temporaries(path)
        try:
            done = recover(path, timeout_s)
        except OSError as exc:
            raise ArchiveError(
                f"{path}: an earlier change, committed in {jr.journal_path(path).name} by a process that was "
                f"killed, could not be written into the archive ({exc.strerror or exc}); nothing new was written. "
                f"Fix the problem (disk space? permissions?) and try again."
            ) from None
        if not done:
            raise ArchiveError(
                f"{path}: readers have kept this archive open for more than {timeout_s:g} s while an earlier "
                f"change waits to be written into it; nothing new was written. Close them and try again."
            )
        try:
            fd = os.open(path, os.O_RDWR)
        except OSError as exc:
            raise _write_error(path, exc) from None
        try:
            overlay = jr.PageOverlay(fd)
            try:
                f = h5py.File(overlay, "r+")
            except OSError:
                raise ArchiveError(f"{path}: not a readable HDF5 archive") from None
            try:
                if not older_schema:
                    from .store import check_root

                    check_root(f, path, writing=True)
                yield f
            except BaseException as exc:
                with contextlib.suppress(Exception):
                    f.close()
                if isinstance(exc, OSError):
                    raise _write_error(path, exc) from None
                raise
            try:
                f.close()  # HDF5 flushes everything it cached into the overlay; the disk is untouched
            except OSError as exc:
                raise _write_error(path, exc) from None
            _commit(path, fd, overlay, timeout_s)
        finally:
            os.close(fd)


def _write_error(path: Path, exc: OSError) -> ArchiveError:
    if exc.errno == errno.ENOSPC:
        return ArchiveError(f"{path}: disk full while writing; the archive is unchanged. Free some space and try again.")
    return ArchiveError(f"{path}: could not write the archive ({exc.strerror or exc}); it is unchanged")


def _commit(path: Path, fd: int, overlay: jr.PageOverlay, timeout_s: float) -> None:
    """Steps 4 and 5 of the module docstring."""
    j = overlay.changes()
    if j is None:
        return
    jp = jr.journal_path(path)
    try:
        if j.new_len > j.old_len:
            at = j.old_len
            for piece in overlay.iter_range(j.old_len, j.new_len):
                jr.pwrite_all(fd, piece, at)
                at += len(piece)
            jr.sync_data(fd)
        jr.write_journal(jp, j)
    except BaseException as exc:  # a full disk, or an interrupt: put the file back as it was
        with contextlib.suppress(OSError):
            jp.unlink()
        with contextlib.suppress(OSError):
            if os.fstat(fd).st_size != j.old_len:
                os.ftruncate(fd, j.old_len)
            jr.sync_data(fd)
        if isinstance(exc, OSError):
            raise _write_error(path, exc) from None
        raise
    # Committed.  From here on a failure cannot undo the change, only delay writing it in.
    if not _flock_until(fd, fcntl.LOCK_EX, time.monotonic() + timeout_s):
        return  # readers kept the file busy; the next reader or writer completes it from the journal
    try:
        jr.apply_journal(fd, j)
        # The archive now holds the new state on disk; a journal that outlives this
        # (if removing it fails) is applied once more by the next opener, harmlessly.
        with contextlib.suppress(OSError):
            jp.unlink()
            jr.sync_dir(path.parent)
    except OSError as exc:
        raise ArchiveError(
            f"{path}: the change is committed in {jp.name} but could not be written into the archive "
            f"({exc.strerror or exc}); readers see it through the journal, and the next varstar command that "
            f"changes this archive completes it once the problem (disk space?) is fixed"
        ) from None
    finally:
        fcntl.flock(fd, fcntl.LOCK_UN)


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
        # A journal left by a killed writer of a removed archive of the same name
        # must never be applied to the new one.
        with contextlib.suppress(FileNotFoundError):
            jr.journal_path(path).unlink()
        tmp = _tmp_path(path)
        try:
            with h5py.File(tmp, "w", **CREATE_OPTIONS) as f:
                build(f)
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
            os.link(tmp, path)  # fails if path appeared meanwhile: never overwrite
            tmp.unlink()
            jr.sync_dir(path.parent)
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


# --------------------------------------------------------------------------- reading
class _ReadFile(h5py.File):
    """A read-only :class:`h5py.File` that holds the archive's shared lock until it is closed."""

    def __init__(self, name, lock: io.FileIO, **kwargs) -> None:
        super().__init__(name, "r", **kwargs)
        self._varstar_lock = lock

    def close(self) -> None:
        try:
            super().close()
        finally:
            lock = getattr(self, "_varstar_lock", None)
            if lock is not None:
                lock.close()  # closing the descriptor releases the flock


def open_read(path: Path, *, timeout_s: float = 30.0) -> h5py.File:
    """Open an archive for reading at its last committed state.

    The returned :class:`h5py.File` holds a shared lock on the archive until it
    is closed (use it in a ``with`` block), so a writer never writes into the
    file while it is read.
    """
    path = Path(path)
    deadline = time.monotonic() + timeout_s
    through_journal = False
    waiting_since: float | None = None
    while True:
        try:
            lock = open(path, "rb", buffering=0)  # noqa: SIM115 (closed by the returned file, or below)
        except FileNotFoundError:
            raise ArchiveError(f"{path}: no such archive (create it with 'varstar init')") from None
        except OSError as exc:
            raise ArchiveError(f"{path}: cannot open the archive ({exc.strerror})") from None
        try:
            if not _flock_until(lock.fileno(), fcntl.LOCK_SH, deadline):
                raise ArchiveError(
                    f"{path}: another varstar process ({_holder(path)}) kept this archive busy for more than "
                    f"{timeout_s:g} s; try again when it has finished"
                )
            j = jr.read_journal(jr.journal_path(path))
            if j is None:
                return _open_file(path, path, lock, locking=False)
            if through_journal:
                if not jr.tail_matches(lock.fileno(), j):
                    raise ArchiveError(_mismatch_message(path, jr.journal_path(path)))
                return _open_file(path, jr.PageOverlay.from_journal(lock.fileno(), j), lock)
        except BaseException:
            lock.close()
            raise
        lock.close()
        # A committed change is waiting to be written into the archive.
        wfd = _try_writer_lock(path)
        if wfd is None:
            # Its writer is alive and about to write it in (it waits for readers to
            # finish): give it a moment, then read through the journal, which shows
            # the same committed state.
            waiting_since = waiting_since if waiting_since is not None else time.monotonic()
            through_journal = time.monotonic() - waiting_since >= _READER_APPLY_WAIT_S
            if not through_journal:
                time.sleep(_POLL_S)
            continue
        try:
            done = recover(path, _READER_APPLY_WAIT_S)
        except (OSError, ArchiveError):
            done = False  # e.g. a read-only archive: read through the journal
        finally:
            _clear_holder(wfd)
            fcntl.flock(wfd, fcntl.LOCK_UN)
            os.close(wfd)
        through_journal = not done


def _open_file(path: Path, name, lock: io.FileIO, **kwargs) -> h5py.File:
    try:
        return _ReadFile(name, lock, **kwargs)
    except OSError:
        lock.close()
        raise ArchiveError(f"{path}: not a readable HDF5 archive") from None
