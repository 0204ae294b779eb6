"""The redo journal behind :mod:`.transaction`: a paged in-memory overlay of the
archive file for h5py, and the journal file that makes its changes durable.

:class:`PageOverlay` is a file-like object for h5py's Python file-object driver
(``h5py.File(overlay, mode)``).  Reads come from the archive file on disk,
overlaid with the pages written so far; writes only ever go to memory, in
whole 4 KiB pages.  Closing the :class:`h5py.File` therefore leaves the archive
untouched and every byte HDF5 changed in the overlay.  :meth:`PageOverlay.changes`
turns those pages into a :class:`Journal`: the runs of changed pages inside the
old file, the new length, and a digest of the file's new end (the bytes beyond
the old length, which the writer puts straight into the archive beyond HDF5's
end-of-allocation mark, where no reader looks, before committing).

Journal file ``ARCHIVE.h5.journal`` (all integers little-endian)::

    header   8 s  magic  b"VSTARJNL"
             u32  version (1)       u32  reserved (0)
             u64  old_len            u64  new_len
             u64  n_runs             u64  data_len (sum of the run lengths)
             32 s sha256 of the archive's bytes [old_len, new_len) after the change
    index    n_runs x (u64 offset, u64 length)
    data     the runs' new bytes, in index order
    trailer  32 s sha256 of everything above,  8 s  b"VSTAREND"

A journal counts as committed only when its length is exactly what the header
says and the trailer's digest matches.  A writer killed while writing it leaves
a prefix, and a power loss before its flush may leave its end unwritten (zeros):
both are incomplete, uncommitted journals and are ignored.  A journal written to
its end whose bytes changed afterwards is *damaged*: it may hold a committed
change, so it is never ignored (:func:`inspect_journal`; :mod:`.transaction`
keeps it aside and refuses the archive).  Applying a committed journal writes
whole runs of final bytes and truncates to ``new_len``, so applying it twice, or
after a partial apply, gives the same file (idempotent).

Why this and not something else: the archive is one HDF5 file whose library
writes in place at arbitrary offsets (metadata, rewritten gzip chunks, free
space reuse), so neither renaming a new file (cost O(archive)) nor appending a
log inside HDF5 works; a page-level redo journal under the file-object driver is
the smallest mechanism whose cost is proportional to the bytes HDF5 changed and
that h5py supports without a custom HDF5 driver.  SQLite's rollback journal is
the well-known relative; we use redo (new bytes) rather than undo (old bytes) so
that nothing in the archive changes before the commit point.
"""

from __future__ import annotations

import dataclasses
import errno
import hashlib
import os
import stat
import struct
from collections.abc import Iterator
from pathlib import Path

PAGE_SIZE = 4096
MAGIC = b"VSTARJNL"
END_MAGIC = b"VSTAREND"
VERSION = 1
_HEADER = struct.Struct("<8sIIQQQQ32s")
_INDEX = struct.Struct("<QQ")
_DIGEST_LEN = 32
_IO_PIECE = 4 << 20  # bytes per read or write call when streaming large regions


def journal_path(path: Path) -> Path:
    """``ARCHIVE.h5.journal`` beside the archive."""
    return path.with_name(path.name + ".journal")


@dataclasses.dataclass(frozen=True)
class Journal:
    """One committed change of an archive file.

    Attributes
    ----------
    old_len, new_len
        File length before and after the change, bytes.
    runs
        ``(offset, new bytes)`` of every changed region that starts inside the
        old file, in offset order, not overlapping.
    tail_sha256
        Digest of the bytes ``[old_len, new_len)`` of the new file (empty when
        the file does not grow); those bytes are written into the archive before
        the journal is committed.
    """

    old_len: int
    new_len: int
    runs: tuple[tuple[int, bytes], ...]
    tail_sha256: bytes

    @property
    def n_bytes(self) -> int:
        """Bytes of run data (what the journal costs beyond its fixed parts)."""
        return sum(len(d) for _, d in self.runs)

    def to_dict(self) -> dict[str, int]:
        return {"old_len": self.old_len, "new_len": self.new_len, "n_runs": len(self.runs), "run_bytes": self.n_bytes}


# --------------------------------------------------------------------------- low-level I/O
def pread_into(fd: int, buf: memoryview, offset: int) -> int:
    """Fill ``buf`` from ``fd`` at ``offset``; return the bytes read (short only at end of file)."""
    done = 0
    while done < len(buf):
        if hasattr(os, "preadv"):
            n = os.preadv(fd, [buf[done:]], offset + done)  # straight into the buffer, no copy
        else:
            piece = os.pread(fd, len(buf) - done, offset + done)
            n = len(piece)
            buf[done:done + n] = piece
        if n == 0:
            break
        done += n
    return done


def pwrite_all(fd: int, data: bytes | bytearray | memoryview, offset: int) -> None:
    """Write all of ``data`` at ``offset`` (retrying short writes)."""
    mv = memoryview(data).cast("B")
    done = 0
    while done < len(mv):
        done += os.pwrite(fd, mv[done:], offset + done)


def write_all(fd: int, data: bytes | bytearray | memoryview) -> None:
    mv = memoryview(data).cast("B")
    done = 0
    while done < len(mv):
        done += os.write(fd, mv[done:])


def sync_data(fd: int) -> None:
    """Flush ``fd``'s data (and its length) to the device."""
    (getattr(os, "fdatasync", None) or os.fsync)(fd)


def sync_dir(directory: Path) -> None:
    """Make creations, renames and removals in ``directory`` durable."""
    fd = os.open(directory, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


# --------------------------------------------------------------------------- overlay
class PageOverlay:
    """The archive file as HDF5 sees it during a change: disk bytes overlaid with dirty pages.

    A plain seekable binary file object (``seek``, ``tell``, ``readinto``,
    ``read``, ``write``, ``truncate``, ``flush``) as h5py's file-object driver
    needs.  It never writes to ``fd``; the caller owns ``fd``.

    Parameters
    ----------
    fd
        Open descriptor of the archive (read access is enough).
    base_len
        Bytes of ``fd`` that belong to the file (default: its current size).
    pages
        Pages already changed (page index -> ``PAGE_SIZE`` bytes), e.g. a
        committed journal a reader overlays without applying it.
    length
        Current file length (default ``base_len``).
    name
        The archive's path, which the overlay gives as its ``repr``: h5py reports
        that as the file's name (``h5py.File.filename``), so messages name the archive.
    """

    def __init__(self, fd: int, base_len: int | None = None, pages: dict[int, bytearray] | None = None,
                 length: int | None = None, name: str | None = None) -> None:
        self._fd = fd
        self._name = name
        self._heaps_checked: set[int] = set()  # offsets of heap collections found sound (see _check_heap)
        self._base_len = os.fstat(fd).st_size if base_len is None else int(base_len)
        # Disk bytes at or beyond this offset read as zeros (set lower by a shrinking truncate).
        self._base_visible = self._base_len
        self._pages: dict[int, bytearray] = dict(pages or {})
        self._size = self._base_len if length is None else int(length)
        self._pos = 0
        self.closed = False

    def __repr__(self) -> str:
        return self._name if self._name is not None else object.__repr__(self)

    @classmethod
    def from_journal(cls, fd: int, journal: Journal, name: str | None = None) -> PageOverlay:
        """The file after ``journal``, read from an archive it has not (or only partly) been applied to."""
        pages: dict[int, bytearray] = {}
        for off, data in journal.runs:
            for k in range(0, len(data), PAGE_SIZE):
                page = bytearray(PAGE_SIZE)
                piece = data[k:k + PAGE_SIZE]
                page[: len(piece)] = piece
                pages[(off + k) // PAGE_SIZE] = page
        # Every byte below new_len that no run covers is on disk already: unchanged
        # old bytes below old_len, the pre-written new end above it.
        return cls(fd, base_len=journal.new_len, pages=pages, length=journal.new_len, name=name)

    # -- file-object protocol ---------------------------------------------------
    def seekable(self) -> bool:
        return True

    def readable(self) -> bool:
        return True

    def writable(self) -> bool:
        return True

    def seek(self, offset: int, whence: int = os.SEEK_SET) -> int:
        if whence == os.SEEK_SET:
            self._pos = offset
        elif whence == os.SEEK_CUR:
            self._pos += offset
        elif whence == os.SEEK_END:
            self._pos = self._size + offset
        else:
            raise ValueError(f"invalid whence {whence}")
        return self._pos

    def tell(self) -> int:
        return self._pos

    def flush(self) -> None:
        """Nothing to do: changes stay in memory until the journal is committed."""

    def close(self) -> None:
        self.closed = True

    def readinto(self, buf) -> int:
        mv = memoryview(buf).cast("B")
        n = len(mv)
        pos = self._pos
        self._fill(mv, pos)
        if mv[:4] == _HEAP_MAGIC and pos not in self._heaps_checked:
            self._check_heap(mv, pos)
        self._pos = pos + n
        return n

    def _fill(self, mv: memoryview, pos: int) -> None:
        """``mv`` filled with the overlay's bytes from ``pos`` on (zeros beyond the end)."""
        n = len(mv)
        end = pos + n
        lim = max(min(end, self._base_visible, self._size), pos)
        got = pread_into(self._fd, mv[: lim - pos], pos) if lim > pos else 0
        if got < n:
            mv[got:] = bytes(n - got)  # beyond the file (HDF5 reads past its end when probing) -> zeros
        if self._pages:
            stop = min(end, self._size)
            if stop > pos:
                first, last = pos // PAGE_SIZE, (stop - 1) // PAGE_SIZE
                if last - first + 1 <= len(self._pages):
                    hits = (p for p in range(first, last + 1) if p in self._pages)
                else:
                    hits = (p for p in self._pages if first <= p <= last)
                for p in hits:
                    ps = p * PAGE_SIZE
                    a, b = max(ps, pos), min(ps + PAGE_SIZE, stop)
                    mv[a - pos:b - pos] = self._pages[p][a - ps:b - ps]

    def _check_heap(self, mv: memoryview, pos: int) -> None:
        """Refuse (as a read error HDF5 reports) a global heap collection it cannot parse safely.

        HDF5 reads a collection's first 4 KiB, then the rest in a second read that
        does not start with the signature: the whole collection is read here and
        walked at the first read (:func:`heap_collection_problem`).  HDF5 reads a
        collection again whenever its cache let it go; one found sound is not
        walked again by this overlay (what HDF5 itself writes into it later is sound).
        """
        data: memoryview | bytearray = mv
        if len(mv) >= _HEAP_HEADER.size:
            size = _HEAP_HEADER.unpack_from(mv, 0)[3]
            if len(mv) < size <= self._size - pos:
                data = bytearray(size)
                data[: len(mv)] = mv
                self._fill(memoryview(data)[len(mv):], pos + len(mv))
        problem = heap_collection_problem(data, self._size - pos)
        if problem:
            raise DamagedFile(errno.EIO, f"global heap collection at byte {pos} is damaged: {problem}")
        if len(data) >= _HEAP_HEADER.size and len(data) >= _HEAP_HEADER.unpack_from(data, 0)[3]:
            self._heaps_checked.add(pos)  # (a partial first read of a too-large collection is not)

    def read(self, size: int = -1) -> bytes:
        if size is None or size < 0:
            size = max(self._size - self._pos, 0)
        buf = bytearray(size)
        self.readinto(buf)
        return bytes(buf)

    def _load_page(self, p: int) -> bytearray:
        page = bytearray(PAGE_SIZE)
        ps = p * PAGE_SIZE
        lim = min(ps + PAGE_SIZE, self._base_visible)
        if lim > ps:
            pread_into(self._fd, memoryview(page)[: lim - ps], ps)
        return page

    def write(self, data) -> int:
        mv = memoryview(data).cast("B")
        n = len(mv)
        pos = self._pos
        end = pos + n
        off = pos
        pages = self._pages
        while off < end:
            p = off // PAGE_SIZE
            a = off - p * PAGE_SIZE
            take = min(PAGE_SIZE - a, end - off)
            page = pages.get(p)
            if page is None:
                if take == PAGE_SIZE:  # whole page: no need to read what was there
                    pages[p] = bytearray(mv[off - pos:off - pos + PAGE_SIZE])
                    off += take
                    continue
                page = pages[p] = self._load_page(p)
            page[a:a + take] = mv[off - pos:off - pos + take]
            off += take
        self._size = max(self._size, end)
        self._pos = end
        return n

    def truncate(self, size: int | None = None) -> int:
        size = self._pos if size is None else int(size)
        if size < self._size:
            for p in [p for p in self._pages if p * PAGE_SIZE >= size]:
                del self._pages[p]
            part = size % PAGE_SIZE
            if part and size // PAGE_SIZE in self._pages:
                self._pages[size // PAGE_SIZE][part:] = bytes(PAGE_SIZE - part)
            self._base_visible = min(self._base_visible, size)
        self._size = size
        return size

    # -- what changed -------------------------------------------------------------
    @property
    def length(self) -> int:
        return self._size

    @property
    def base_len(self) -> int:
        return self._base_len

    def read_range(self, offset: int, length: int) -> bytes:
        """The overlay's bytes ``[offset, offset + length)``."""
        self.seek(offset)
        return self.read(length)

    def iter_range(self, start: int, stop: int) -> Iterator[bytes]:
        """The overlay's bytes ``[start, stop)`` in pieces of at most 4 MiB."""
        for off in range(start, stop, _IO_PIECE):
            yield self.read_range(off, min(_IO_PIECE, stop - off))

    def changes(self) -> Journal | None:
        """The journal that turns the file on disk into this overlay, or None if they are equal.

        Pages HDF5 rewrote with the bytes they already had are left out (it
        rewrites the superblock on every open for writing, for example).
        """
        old_len, new_len = self._base_len, self._size
        inside = min(old_len, new_len)
        changed: list[int] = []
        for p in sorted(self._pages):
            if p * PAGE_SIZE >= inside:
                continue  # at or beyond the old end: part of the pre-written tail
            changed.append(p)
        # Below the old end, bytes a shrinking truncate cut off and nothing rewrote read
        # as zeros here but not on disk: those pages change too.
        if self._base_visible < inside:
            cut = set(range(self._base_visible // PAGE_SIZE, (inside - 1) // PAGE_SIZE + 1))
            changed = sorted(set(changed) | cut)
        runs: list[tuple[int, bytes]] = []
        k = 0
        while k < len(changed):
            j = k
            while j + 1 < len(changed) and changed[j + 1] == changed[j] + 1:
                j += 1
            start = changed[k] * PAGE_SIZE
            stop = min((changed[j] + 1) * PAGE_SIZE, new_len)
            new = self.read_range(start, stop - start)
            old = bytearray(stop - start)
            got = pread_into(self._fd, memoryview(old), start)
            old[got:] = bytes(len(old) - got)
            if new != old:
                # Split the run where pages are unchanged, so the journal carries only changed pages.
                runs.extend(_changed_pieces(start, new, old))
            k = j + 1
        if not runs and new_len == old_len:
            return None
        digest = hashlib.sha256()
        if new_len > old_len:
            for piece in self.iter_range(old_len, new_len):
                digest.update(piece)
        return Journal(old_len, new_len, tuple(runs), digest.digest() if new_len > old_len else b"")


class DamagedFile(OSError):
    """A read error the overlay raises for bytes HDF5 must not parse (an unsafe global heap collection)."""


#: Signature of an HDF5 global heap collection, where variable-length text lives.
_HEAP_MAGIC = b"GCOL"
_HEAP_HEADER = struct.Struct("<4sB3sQ")  # signature, version, reserved, collection size
_HEAP_OBJECT = struct.Struct("<HH4sQ")  # object index, reference count, reserved, object size
_HEAP_OBJECT_KEY = struct.Struct("<H6xQ")  # the same, index and size only
_HEAP_MIN_SIZE = 4096  # HDF5's smallest collection (H5HG_MINSIZE)


def heap_collection_problem(data: memoryview | bytes, room: int) -> str | None:
    """What is wrong with an HDF5 global heap collection HDF5 is about to parse; None if nothing.

    HDF5 keeps variable-length text in "global heap collections", which carry no
    checksum, and walks a collection's objects by their sizes (HDF5 file format
    specification, "Global Heap").  An object of index 0 and size 0 (zeroed
    bytes, a typical form of damage) makes that walk stand still: HDF5 then
    loops forever.  The overlay therefore checks every collection HDF5 reads
    before HDF5 sees it, with the same walk: header, then objects that must each
    advance and fit inside the collection.  ``data`` starts at the collection;
    it may be HDF5's first read of 4 KiB, in which case only what it holds is
    walked.  ``room`` is the bytes from the collection to the end of the file.
    """
    if len(data) < _HEAP_HEADER.size:
        return None
    _, version, _, size = _HEAP_HEADER.unpack_from(data, 0)
    if version != 1:
        return f"version {version}"
    if size < _HEAP_MIN_SIZE or size > room:
        return f"a size of {size} bytes ({room} left in the file)"
    end = min(size, len(data))
    p = _HEAP_HEADER.size
    unpack = _HEAP_OBJECT_KEY.unpack_from
    while p + _HEAP_OBJECT.size <= end:
        idx, osize = unpack(data, p)
        need = osize if idx == 0 else _HEAP_OBJECT.size + ((osize + 7) & ~7)
        if need <= 0:
            return f"an empty object header at byte {p} of the collection"
        if p + need > size:
            return f"object {idx} at byte {p} runs past the collection's end"
        p += need  # (index 0 is free space, normally the rest of the collection)
    return None


def _changed_pieces(start: int, new: bytes, old: bytearray) -> list[tuple[int, bytes]]:
    """Runs of the pages of ``new`` (starting at ``start``) that differ from ``old``."""
    out: list[tuple[int, bytes]] = []
    run_at = -1
    n = len(new)
    for k in range(0, n, PAGE_SIZE):
        same = new[k:k + PAGE_SIZE] == old[k:k + PAGE_SIZE]
        if not same and run_at < 0:
            run_at = k
        elif same and run_at >= 0:
            out.append((start + run_at, new[run_at:k]))
            run_at = -1
    if run_at >= 0:
        out.append((start + run_at, new[run_at:]))
    return out


# --------------------------------------------------------------------------- journal file
def encode_header(j: Journal) -> bytes:
    return _HEADER.pack(MAGIC, VERSION, 0, j.old_len, j.new_len, len(j.runs), j.n_bytes,
                        j.tail_sha256.ljust(_DIGEST_LEN, b"\0"))


def write_journal(jpath: Path, j: Journal) -> None:
    """Write ``j`` to ``jpath`` and make it durable (file and directory entry).

    Once this returns, the change is committed.  On any error the caller
    removes ``jpath`` (an incomplete journal is ignored anyway).
    """
    digest = hashlib.sha256()
    fd = os.open(jpath, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    try:
        head = encode_header(j) + b"".join(_INDEX.pack(off, len(d)) for off, d in j.runs)
        digest.update(head)
        write_all(fd, head)
        for _, data in j.runs:
            digest.update(data)
            write_all(fd, data)
        write_all(fd, digest.digest() + END_MAGIC)
        os.fsync(fd)
    finally:
        os.close(fd)
    sync_dir(jpath.parent)


#: What a file at the journal's path is (:func:`inspect_journal`).
ABSENT, INCOMPLETE, COMMITTED, DAMAGED, FOREIGN = "absent", "incomplete", "committed", "damaged", "foreign"
_TRAILER = _DIGEST_LEN + len(END_MAGIC)


@dataclasses.dataclass(frozen=True)
class JournalFile:
    """What lies at a journal's path.

    Attributes
    ----------
    state
        ``absent``; ``incomplete`` (its writer died before the commit point: a
        prefix of a journal, or one whose end was never written, so the archive
        holds the state before it); ``committed`` (whole and checksummed:
        ``journal`` holds it); ``damaged`` (a journal written to its end whose
        bytes changed since: it may have been committed, so it can be neither
        applied nor thrown away); ``foreign`` (not a varstar journal at all).
    journal
        The committed journal (state ``committed`` only).
    why
        For ``damaged`` and ``foreign``: what is wrong, in words.
    """

    state: str
    journal: Journal | None = None
    why: str = ""


def inspect_journal(jpath: Path) -> JournalFile:
    """Tell what lies at ``jpath``: no journal, an incomplete, committed or damaged one, or something else.

    The writer writes a journal front to back and ends it with a digest and
    ``VSTAREND``.  A writer killed before the commit point therefore leaves a
    prefix (shorter than its header says, without the end mark), and a power
    loss before the final flush may leave the unwritten end as zeros; both are
    ``incomplete``.  A journal that has its end mark but fails its checksum or
    length, or has the length of a whole journal but a wrong end mark, was
    written completely and changed afterwards (a flipped bit, a bad sector): it
    may be a committed change that was half written into the archive, so it is
    ``damaged``, never ``incomplete``.  (A single changed byte anywhere in a
    committed journal always gives ``damaged``.)
    """
    try:
        st = os.lstat(jpath)
    except FileNotFoundError:
        return JournalFile(ABSENT)
    if not stat.S_ISREG(st.st_mode):
        kind = ("a directory" if stat.S_ISDIR(st.st_mode) else
                "a symbolic link" if stat.S_ISLNK(st.st_mode) else "a special file")
        return JournalFile(FOREIGN, why=f"{kind}, not a varstar journal")
    try:
        with open(jpath, "rb") as fh:
            blob = fh.read()
    except FileNotFoundError:
        return JournalFile(ABSENT)
    ends = blob.endswith(END_MAGIC)
    if not ends and blob[: len(MAGIC)] != MAGIC[: len(blob)]:
        return JournalFile(FOREIGN, why=f"a file of {len(blob)} bytes that is not a varstar journal")
    if len(blob) < _HEADER.size:
        if ends:
            return JournalFile(DAMAGED, why=f"it ends with the journal's end mark but is only {len(blob)} bytes long")
        return JournalFile(INCOMPLETE)  # torn inside its header (an empty file included)
    magic, version, _, old_len, new_len, n_runs, data_len, tail = _HEADER.unpack_from(blob, 0)
    if magic != MAGIC:
        return JournalFile(DAMAGED, why="its header mark is damaged")
    if version != VERSION:
        return JournalFile(DAMAGED, why=f"it says it is of journal version {version}, which this varstar does not know "
                                        f"(written by another varstar version, or damaged)")
    body = _HEADER.size + n_runs * _INDEX.size + data_len
    if not ends:
        if len(blob) < body + _TRAILER:
            return JournalFile(INCOMPLETE)  # a prefix: its writer died while writing it
        if not any(blob[-_TRAILER:]):
            return JournalFile(INCOMPLETE)  # its end was never written (power lost before the flush)
        return JournalFile(DAMAGED, why="its end mark is damaged")
    if len(blob) != body + _TRAILER:
        return JournalFile(DAMAGED, why=f"it is {len(blob):,} bytes long where its header says {body + _TRAILER:,}")
    if hashlib.sha256(memoryview(blob)[:body]).digest() != blob[body:body + _DIGEST_LEN]:
        return JournalFile(DAMAGED, why="its checksum does not match its contents")
    return JournalFile(COMMITTED, journal=_decode(blob, old_len, new_len, n_runs, tail))


def read_journal(jpath: Path) -> Journal | None:
    """The committed journal at ``jpath``; None if there is none, or it is incomplete, damaged or foreign.

    Use :func:`inspect_journal` to tell those apart (recovery must: a damaged
    journal may hold a committed change and is never simply deleted).
    """
    return inspect_journal(jpath).journal


def _decode(blob: bytes, old_len: int, new_len: int, n_runs: int, tail: bytes) -> Journal:
    runs = []
    at = _HEADER.size + n_runs * _INDEX.size
    for k in range(n_runs):
        off, length = _INDEX.unpack_from(blob, _HEADER.size + k * _INDEX.size)
        runs.append((off, blob[at:at + length]))
        at += length
    return Journal(old_len, new_len, tuple(runs), tail if new_len > old_len else b"")


def written_in(fd: int, jpath: Path) -> str:
    """How much of a damaged journal's change the archive holds, in words (best effort).

    Reads what the journal's header and index still say and compares each
    changed region with the archive's bytes there.  The regions of a change are
    written into the archive only after its commit, so: all equal means the
    change was written in completely (a damaged region may differ where the
    journal itself is damaged), none equal means it was not written in at all.
    """
    try:
        with open(jpath, "rb") as fh:
            blob = fh.read()
        magic, _, _, old_len, _, n_runs, data_len, _ = _HEADER.unpack_from(blob, 0)
    except (OSError, struct.error):
        return "what it records cannot be read"
    body = _HEADER.size + n_runs * _INDEX.size + data_len
    if magic != MAGIC or n_runs > len(blob) // _INDEX.size or body > len(blob):
        return "its header is damaged, so what it records cannot be told"
    same = differ = 0
    at = _HEADER.size + n_runs * _INDEX.size
    for k in range(n_runs):
        off, length = _INDEX.unpack_from(blob, _HEADER.size + k * _INDEX.size)
        if at + length > body or off > 1 << 56:
            return "its index is damaged, so what it records cannot be told"
        new = blob[at:at + length]
        at += length
        # Only whole pages inside the old file tell: a journal holds a page only if it changed,
        # and bytes past the old end were written into the archive before the commit anyway.
        inside = min(off + length, old_len // PAGE_SIZE * PAGE_SIZE) - off
        if inside <= 0:
            continue
        old = bytearray(inside)
        got = pread_into(fd, memoryview(old), off)
        if got == inside and old == new[:inside]:
            same += 1
        else:
            differ += 1
    n_runs = same + differ
    if n_runs == 0:
        return "it records no changed region inside the old file"
    if differ == 0:
        return f"all {n_runs} regions it changes already hold its new bytes: the change had been written into the archive"
    if same == 0:
        return (f"none of the {n_runs} regions it changes holds its new bytes: the change was not written into the "
                f"archive, which holds the state before it (that change is lost: make it again)")
    return (f"{same} of the {n_runs} regions it changes hold its new bytes and {differ} do not: the change was written "
            f"into the archive in part, or completely where the journal itself is damaged")


def tail_matches(fd: int, j: Journal) -> bool:
    """Whether the archive holds the journal's new end (bytes ``[old_len, new_len)``).

    The writer puts those bytes into the archive before committing; a mismatch
    means the journal does not belong to this file (for example an archive
    restored from a copy while a journal of a crashed writer was left beside it).
    """
    if os.fstat(fd).st_size < j.new_len:
        return False
    if j.new_len <= j.old_len:
        return True
    digest = hashlib.sha256()
    buf = bytearray(min(_IO_PIECE, j.new_len - j.old_len))
    for off in range(j.old_len, j.new_len, _IO_PIECE):
        mv = memoryview(buf)[: min(_IO_PIECE, j.new_len - off)]
        if pread_into(fd, mv, off) != len(mv):
            return False
        digest.update(mv)
    return digest.digest() == j.tail_sha256


def apply_journal(fd: int, j: Journal) -> None:
    """Write the journal's runs into the archive, set its length, and flush it to the device."""
    for off, data in j.runs:
        pwrite_all(fd, data, off)
    if os.fstat(fd).st_size != j.new_len:
        os.ftruncate(fd, j.new_len)
    os.fsync(fd)
