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
committed journal and no live writer.  A journal that was written to its end
but whose bytes changed since (:func:`~.journal.inspect_journal`: damaged) may
hold a committed change half written into the archive: it is never deleted but
renamed ``ARCHIVE.h5.journal.damaged-<UTC time>``, and every command but
``varstar verify`` refuses the archive, saying what happened and what to do,
until the user has checked the archive and removed that file.  Anything else at
the journal's path (a user's file, a directory) is never touched: writers refuse.

Damage (:mod:`.integrity`): before it changes anything a writer checks, read
only, that every table and column of the layout can be opened and that the
archive's record of its free space can be read (HDF5 reads that record only when
writing, and fails, or crashes, on a damaged one); an HDF5 read failure inside a
change, or inside a reader's ``with`` block, becomes one :class:`ArchiveError`
naming what could not be read.

Reading (:func:`open_read`)
    A reader holds a shared ``flock`` on the archive file for as long as its
    :class:`h5py.File` is open, so it never overlaps step 5.  If it finds a
    committed journal, it waits up to a second for it to be written in (by its
    writer, or by the reader itself under the writer lock when the writer is
    gone); failing that (read-only file system, no permission, long readers
    elsewhere) it reads through a :class:`~.journal.PageOverlay` of the journal,
    which shows the committed state without changing the file.  A committed
    change is never undone, so no reader sees the new state and later the old.
    Readers always read through a :class:`~.journal.PageOverlay` (h5py's
    file-object driver), which checks each global heap collection before HDF5
    parses it (HDF5 loops forever on some damaged ones).

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
import datetime as _dt
import errno
import fcntl
import io
import os
import re
import socket
import stat
import time
from collections.abc import Iterator
from pathlib import Path
from types import MappingProxyType

import h5py

from ..errors import ArchiveError
from . import integrity
from . import journal as jr
from .layout import check_root

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


#: What :func:`_mark_holder` writes into the lock file (empty when nobody holds it), or
#: the start of it (a writer killed while writing it).
_HOLDER_TEXT = re.compile(rb"\A(pid \d+ on [^\n]*|p(i(d( (\d+( (o(n)?)?)?)?)?)?)?)?\Z")


def _open_lock(path: Path) -> int:
    """Open (or create) the writer-lock file ``ARCHIVE.h5.lock``, refusing any other file of that name.

    The lock file is varstar's: empty, or naming its holder.  A file of that
    name with other contents, a symbolic link, a directory or a device is the
    user's and is never truncated or written.
    """
    lp = lock_path(path)
    try:
        fd = os.open(lp, os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
    except OSError as exc:
        if exc.errno in (errno.ELOOP, errno.EISDIR, errno.ENXIO):
            raise ArchiveError(_not_ours(path, lp, "is not varstar's lock file")) from None
        raise ArchiveError(f"{path}: cannot create lock file {lp.name}: {exc.strerror}") from None
    try:
        st = os.fstat(fd)
        ours = stat.S_ISREG(st.st_mode) and st.st_size <= 300 and _HOLDER_TEXT.match(os.pread(fd, 301, 0).strip())
    except OSError:
        ours = False
    if not ours:
        os.close(fd)
        raise ArchiveError(_not_ours(path, lp, "is not varstar's lock file"))
    return fd


def _not_ours(path: Path, other: Path, what: str, done: str = "nothing was changed") -> str:
    return (f"{path}: {other} {what}; varstar needs that name beside the archive and never overwrites a file it did "
            f"not write. Rename or move {other.name} (it is not part of the archive), then try again; {done}.")


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
        fd = _open_lock(path)
    except ArchiveError:
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
    fd = _open_lock(path)
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
    """Remove what a killed ``varstar init`` left: ``.ARCHIVE.h5.<pid>.tmp`` files holding HDF5 data only."""
    for stale in path.parent.glob(f".{path.name}.*.tmp"):
        if not stale.name[len(path.name) + 2:-4].isdigit():
            continue
        with contextlib.suppress(OSError):
            st = os.lstat(stale)
            if stat.S_ISREG(st.st_mode):
                with open(stale, "rb") as fh:
                    hdf5 = fh.read(8) == b"\x89HDF\r\n\x1a\n"
                if hdf5:
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
    found = jr.inspect_journal(jp)
    if found.state == jr.ABSENT:
        return True
    if found.state == jr.INCOMPLETE:
        # Its writer died before the commit point; the archive holds the state
        # before (maybe with unused bytes past HDF5's end, which the next change
        # truncates away).
        with contextlib.suppress(FileNotFoundError):
            jp.unlink()
        jr.sync_dir(path.parent)
        return True
    if found.state == jr.FOREIGN:
        raise ArchiveError(_not_ours(path, jp, f"is {found.why}"))
    if found.state == jr.DAMAGED:
        raise _set_aside(path, jp, found.why)
    j = found.journal
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


def damaged_journals(path: Path) -> list[Path]:
    """Journals of this archive that were found damaged and kept aside (``ARCHIVE.h5.journal.damaged-*``)."""
    prefix = jr.journal_path(path).name + ".damaged-"
    try:
        return sorted(p for p in Path(path).parent.iterdir() if p.name.startswith(prefix))
    except OSError:
        return []


def _set_aside(path: Path, jp: Path, why: str) -> ArchiveError:
    """Rename a damaged journal to ``…journal.damaged-<UTC time>`` (never deleted); the error to raise."""
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    kept = jp.with_name(f"{jp.name}.damaged-{stamp}")
    k = 1
    while kept.exists():
        k += 1
        kept = jp.with_name(f"{jp.name}.damaged-{stamp}-{k}")
    try:
        fd = os.open(path, os.O_RDONLY)
        try:
            state = jr.written_in(fd, jp)
        finally:
            os.close(fd)
    except OSError:
        state = "the archive could not be read to tell how much of it was written in"
    try:
        os.rename(jp, kept)
        jr.sync_dir(path.parent)
    except OSError as exc:
        return ArchiveError(
            f"{path}: the journal of an earlier change, {jp.name}, is damaged ({why}) and could not be renamed "
            f"aside ({exc.strerror}); nothing was changed. Move {jp.name} away yourself, then run 'varstar verify {path}'."
        )
    return ArchiveError(_damaged_message(path, kept, f"is damaged ({why}); {state}. It was kept as {kept.name}"))


def _damaged_message(path: Path, kept: Path, what: str) -> str:
    return (
        f"{path}: the journal of an earlier change {what}. The change it held can neither be completed nor trusted, "
        f"so this archive is not used until you have checked it; nothing was changed. Run 'varstar verify {path}': "
        f"if it finds no problem but this journal, delete {kept.name} and carry on (making that change again if it "
        f"is missing); otherwise put back a copy of the archive."
    )


def _refuse_damaged(path: Path) -> None:
    kept = damaged_journals(path)
    if kept:
        names = ", ".join(k.name for k in kept)
        raise ArchiveError(_damaged_message(path, kept[-1], f"was found damaged and is kept as {names}"))


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
    current schema (:func:`varstar.archive.layout.check_root` with ``writing``);
    only the upgrade itself passes ``older_schema=True``.
    """
    path = Path(path)
    with writer_lock(path, timeout_s):
        if not path.exists():
            raise ArchiveError(f"{path}: no such archive (create it with 'varstar init')")
        _refuse_damaged(path)
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
            _check_before_writing(path, fd, older_schema)
            overlay = jr.PageOverlay(fd, name=str(path))
            try:
                f = h5py.File(overlay, "r+")
            except Exception as exc:  # noqa: BLE001
                if isinstance(exc, OSError) or integrity.is_hdf5_failure(exc):
                    raise ArchiveError(f"{path}: not a readable HDF5 archive") from None
                raise
            try:
                if not older_schema:
                    check_root(f, path, writing=True)
                yield f
            except BaseException as exc:
                failed = integrity.unreadable(path, exc, writing=True) if integrity.is_hdf5_failure(exc) else None
                with contextlib.suppress(Exception):
                    f.close()
                if failed is not None:
                    raise failed from None
                if isinstance(exc, OSError):
                    raise _write_error(path, exc) from None
                raise
            try:
                f.close()  # HDF5 flushes everything it cached into the overlay; the disk is untouched
            except Exception as exc:  # noqa: BLE001
                if integrity.is_hdf5_failure(exc):
                    raise integrity.unreadable(path, exc, writing=True) from None
                if isinstance(exc, OSError):
                    raise _write_error(path, exc) from None
                raise
            _commit(path, fd, overlay, timeout_s)
        finally:
            os.close(fd)


def _check_before_writing(path: Path, fd: int, older_schema: bool) -> None:
    """Refuse, before anything is written, an archive whose structure or free-space record is damaged.

    Read only, through its own handle: the format mark and schema, every table
    and column of the layout (their object headers, not their data: the cost does
    not grow with the archive), and the free-space record HDF5 reads only when
    it writes (:func:`.integrity.free_space_problem`).  Damage in the data of
    earlier nights that this change does not read is left for ``varstar verify``
    to find; the change cannot make it worse.
    """
    problems: list[str] = []
    try:
        f = h5py.File(jr.PageOverlay(fd, name=str(path)), "r")
    except Exception as exc:  # noqa: BLE001
        if isinstance(exc, OSError) or integrity.is_hdf5_failure(exc):
            raise ArchiveError(f"{path}: not a readable HDF5 archive") from None
        raise
    try:
        try:
            check_root(f, path, writing=not older_schema)
            found, lengths = integrity.structure_problems(f, int(f.attrs["schema_version"]))
            problems.extend(found or integrity.capacity_problems(lengths))
        except Exception as exc:  # noqa: BLE001
            if not integrity.is_hdf5_failure(exc):
                raise
            raise integrity.unreadable(path, exc, writing=True) from None
    finally:
        with contextlib.suppress(Exception):
            f.close()
    if not problems:
        fs = integrity.free_space_problem(fd)
        if fs:
            problems.append(fs)
    if problems:
        more = f" (and {len(problems) - 2} more)" if len(problems) > 2 else ""
        raise ArchiveError(
            f"{path}: the archive is damaged: {'; '.join(problems[:2])}{more}. Nothing was written. Run 'varstar "
            f"verify {path}' to see what is affected, and put back a copy of the archive."
        )


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
        _clear_journal_path(path)
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


def _clear_journal_path(path: Path) -> None:
    """Before creating ``path``: the journal's name beside it must be free, or hold only a torn journal.

    A journal there belongs to an earlier archive of the same name; it must never
    be applied to the new one.  One its writer never finished (incomplete) holds
    nothing and is removed.  A committed or damaged one holds a change of an
    archive that may have been moved, and anything else is not ours: both are
    left alone and the creation is refused.
    """
    jp = jr.journal_path(path)
    found = jr.inspect_journal(jp)
    if found.state == jr.INCOMPLETE:
        with contextlib.suppress(FileNotFoundError):
            jp.unlink()
    elif found.state in (jr.COMMITTED, jr.DAMAGED):
        raise ArchiveError(
            f"{path}: {jp} holds a change to an earlier archive of this name (it is {found.state}) and the "
            f"archive is not here; nothing was created. If you moved that archive, move {jp.name} beside it (the "
            f"change is written in the next time it is opened); if you deleted it, delete {jp.name} too; or choose "
            f"another name."
        )
    elif found.state == jr.FOREIGN:
        raise ArchiveError(_not_ours(path, jp, f"exists and is {found.why}", "nothing was created"))
    kept = damaged_journals(path)
    if kept:
        raise ArchiveError(
            f"{path}: {kept[0]} is a damaged journal kept from an earlier archive of this name; nothing was created. "
            f"Delete or move it (and any other {jp.name}.damaged-* file), or choose another name."
        )


# --------------------------------------------------------------------------- reading
class _ReadFile(h5py.File):
    """A read-only :class:`h5py.File` that holds the archive's shared lock until it is closed."""

    def __init__(self, name, lock: io.FileIO, path: Path, **kwargs) -> None:
        super().__init__(name, "r", **kwargs)
        self._varstar_lock = lock
        self._varstar_path = path

    def __exit__(self, exc_type, exc, tb) -> bool:
        """Close; an HDF5 read failure of the block (or of closing) becomes one :class:`ArchiveError`."""
        # worded before closing: naming the object that failed needs the file open
        failed = integrity.unreadable(self._varstar_path, exc, writing=False) if (
            exc is not None and integrity.is_hdf5_failure(exc)) else None
        closing: BaseException | None = None
        try:
            super().__exit__(exc_type, exc, tb)
        except Exception as close_exc:  # noqa: BLE001
            closing = close_exc
        if failed is not None:
            raise failed from None
        if closing is not None and exc is None:
            if integrity.is_hdf5_failure(closing):
                raise integrity.unreadable(self._varstar_path, closing, writing=False) from None
            raise closing
        return False

    def close(self) -> None:
        try:
            super().close()
        finally:
            lock = getattr(self, "_varstar_lock", None)
            if lock is not None:
                lock.close()  # closing the descriptor releases the flock


def open_read(path: Path, *, timeout_s: float = 30.0, damaged_ok: bool = False) -> h5py.File:
    """Open an archive for reading at its last committed state.

    The returned :class:`h5py.File` holds a shared lock on the archive until it
    is closed (use it in a ``with`` block), so a writer never writes into the
    file while it is read; an HDF5 read failure inside the block becomes an
    :class:`ArchiveError` naming what could not be read.

    A damaged journal (found now, or kept aside earlier) makes it refuse, unless
    ``damaged_ok`` (for ``varstar verify``, which reports it): then the archive
    is read as it is on disk.
    """
    path = Path(path)
    deadline = time.monotonic() + timeout_s
    through_journal = False
    as_is = False  # a damaged journal was reported: read the archive as it is on disk (damaged_ok only)
    waiting_since: float | None = None
    while True:
        if not damaged_ok:
            _refuse_damaged(path)
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
            found = jr.inspect_journal(jr.journal_path(path))
            if found.state in (jr.ABSENT, jr.INCOMPLETE, jr.FOREIGN) or (found.state == jr.DAMAGED and as_is):
                # nothing committed is pending (a writer refuses a foreign file there); read through
                # an overlay all the same: it checks what HDF5 would parse unchecked (journal.PageOverlay)
                return _open_file(path, jr.PageOverlay(lock.fileno(), name=str(path)), lock)
            if through_journal and found.journal is not None:
                if not jr.tail_matches(lock.fileno(), found.journal):
                    raise ArchiveError(_mismatch_message(path, jr.journal_path(path)))
                return _open_file(path, jr.PageOverlay.from_journal(lock.fileno(), found.journal, name=str(path)), lock)
        except BaseException:
            lock.close()
            raise
        lock.close()
        if found.state == jr.DAMAGED:
            # Kept aside under the writer lock when it is free (recover() does it and raises);
            # refused either way, except by verify, which reads on and reports it.
            err: ArchiveError | None = ArchiveError(
                _damaged_message(path, jr.journal_path(path), f"is damaged ({found.why})"))
            wfd = _try_writer_lock(path)
            if wfd is not None:
                try:
                    recover(path, _READER_APPLY_WAIT_S)
                    err = None  # meanwhile replaced by a sound journal, now written in
                except ArchiveError as exc:
                    err = exc
                except OSError:
                    pass
                finally:
                    _clear_holder(wfd)
                    fcntl.flock(wfd, fcntl.LOCK_UN)
                    os.close(wfd)
            if err is not None and not damaged_ok:
                raise err
            as_is = err is not None
            continue
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
        return _ReadFile(name, lock, path, **kwargs)
    except Exception as exc:  # noqa: BLE001
        lock.close()
        if isinstance(exc, OSError) or integrity.is_hdf5_failure(exc):
            detail = f" (HDF5: {integrity.hdf5_detail(exc)})" if integrity.is_hdf5_failure(exc) else ""
            raise ArchiveError(f"{path}: not a readable HDF5 archive{detail}; if it is a varstar archive, it is "
                               f"damaged: put back a copy") from None
        raise
