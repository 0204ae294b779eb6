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
says and the trailer's digest matches; anything else (a writer killed while
writing it, a torn write after power loss) is an uncommitted journal and is
ignored.  Applying a committed journal writes whole runs of final bytes and
truncates to ``new_len``, so applying it twice, or after a partial apply, gives
the same file (idempotent).

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
import hashlib
import os
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
    """

    def __init__(self, fd: int, base_len: int | None = None, pages: dict[int, bytearray] | None = None,
                 length: int | None = None) -> None:
        self._fd = fd
        self._base_len = os.fstat(fd).st_size if base_len is None else int(base_len)
        # Disk bytes at or beyond this offset read as zeros (set lower by a shrinking truncate).
        self._base_visible = self._base_len
        self._pages: dict[int, bytearray] = dict(pages or {})
        self._size = self._base_len if length is None else int(length)
        self._pos = 0
        self.closed = False

    @classmethod
    def from_journal(cls, fd: int, journal: Journal) -> PageOverlay:
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
        return cls(fd, base_len=journal.new_len, pages=pages, length=journal.new_len)

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
        self._pos = end
        return n

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


def read_journal(jpath: Path) -> Journal | None:
    """The committed journal at ``jpath``; None if there is none or it is incomplete or damaged."""
    try:
        with open(jpath, "rb") as fh:
            blob = fh.read()
    except FileNotFoundError:
        return None
    if len(blob) < _HEADER.size + _DIGEST_LEN + len(END_MAGIC):
        return None
    magic, version, _, old_len, new_len, n_runs, data_len, tail = _HEADER.unpack_from(blob, 0)
    if magic != MAGIC or version != VERSION:
        return None
    body = _HEADER.size + n_runs * _INDEX.size + data_len
    if len(blob) != body + _DIGEST_LEN + len(END_MAGIC) or blob[-len(END_MAGIC):] != END_MAGIC:
        return None
    if hashlib.sha256(memoryview(blob)[:body]).digest() != blob[body:body + _DIGEST_LEN]:
        return None
    runs = []
    at = _HEADER.size + n_runs * _INDEX.size
    for k in range(n_runs):
        off, length = _INDEX.unpack_from(blob, _HEADER.size + k * _INDEX.size)
        runs.append((off, blob[at:at + length]))
        at += length
    return Journal(old_len, new_len, tuple(runs), tail if new_len > old_len else b"")


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
