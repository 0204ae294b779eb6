"""Bytes of a measurement file in bounded pieces of whole lines, hashed as they are read.

The only part of the reader that touches files and streams: opening a file
(through :func:`varstar.inputs.open_input`), reading it :data:`CHUNK_BYTES` at
a time, refusing a line longer than :data:`MAX_LINE_BYTES`, decoding UTF-8,
and feeding every byte read to a hash.  Also the small file helpers the
night's ingest uses (:func:`is_regular_file`, :func:`file_sha256`,
:func:`read_bytes`).
"""

from __future__ import annotations

import hashlib
import os
import stat
from collections.abc import Iterator
from pathlib import Path
from typing import Any, BinaryIO

from ..errors import InputError
from ..inputs import open_input
from .messages import fail

#: Bytes read, decoded and parsed at a time (whole lines): memory stays bounded whatever
#: the file, and a file that goes wrong early costs what was read up to there (our choice:
#: a night of 2,000 exposures x 30 stars is about 8 pieces).
CHUNK_BYTES = 2**20
#: The longest line accepted.  A header of 100,000 column names is about 1 MB; a line of
#: several megabytes is not a row of a measurement table (our choice).
MAX_LINE_BYTES = 4 * 2**20
_BOM = b"\xef\xbb\xbf"


def text_pieces(stream: BinaryIO, source: str, hasher: Any = None) -> Iterator[tuple[str, int, bool]]:
    """The file's text in pieces of whole lines.

    Yields ``(text, number of its first line, last)``; ``text`` keeps its line
    ends, and the last piece (``last`` true) holds the rest of the file, ending
    without a line end if the file does.  Reads :data:`CHUNK_BYTES` at a time
    (one read ahead, so that a small file is one piece) and feeds every byte
    read to ``hasher`` (a :mod:`hashlib` object) if given.
    """
    def read() -> bytes:
        block = stream.read(CHUNK_BYTES)
        if hasher is not None:
            hasher.update(block)
        return block

    def text(raw: bytes, offset: int) -> str:
        try:
            return raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise fail(source, None, f"not UTF-8 text (bad byte at offset {offset + exc.start})") from None

    buf = read()
    offset = 0
    if buf.startswith(_BOM):  # a byte-order mark, as some editors write, is not part of the text
        buf, offset = buf[len(_BOM):], len(_BOM)
    line = 1
    while True:
        more = read()
        if not more:
            if buf:
                yield text(buf, offset), line, True
            return
        cut = buf.rfind(b"\n")
        if cut < 0:
            buf += more
            if len(buf) > MAX_LINE_BYTES and b"\n" not in buf[:MAX_LINE_BYTES]:
                if b"\x00" in buf:  # say what it is: a device or a binary file
                    raise fail(source, None, "contains NUL bytes: not a text table")
                raise fail(source, line, f"longer than {MAX_LINE_BYTES // 2**20} MiB without a line end: not a row of a measurement table")
            continue
        piece, buf = buf[: cut + 1], buf[cut + 1:] + more
        yield text(piece, offset), line, False
        line += piece.count(b"\n")
        offset += len(piece)


def open_table(path: Path) -> BinaryIO:
    """Open a measurement file for reading, turning the usual OS failures into an :class:`InputError`."""
    return open_input(path, "a measurement table")


def read_error(path: Path, exc: OSError) -> InputError:
    """The error for an OS failure while reading an open measurement file."""
    if isinstance(exc, IsADirectoryError):
        return InputError(f"{path}: is a directory, not a measurement table")
    return InputError(f"{path}: cannot read: {exc.strerror}")


def is_regular_file(path: str | Path) -> bool:
    """True for a regular file (which can be read twice), False for a pipe, a device or a missing path."""
    try:
        return stat.S_ISREG(os.stat(path).st_mode)
    except (OSError, ValueError):
        return False


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file's content, read :data:`CHUNK_BYTES` at a time (bounded memory)."""
    p = Path(path)
    h = hashlib.sha256()
    with open_table(p) as fh:
        try:
            for block in iter(lambda: fh.read(CHUNK_BYTES), b""):
                h.update(block)
        except OSError as exc:
            raise read_error(p, exc) from None
    return h.hexdigest()


def read_bytes(path: Path) -> bytes:
    """Read a whole file, turning the usual OS failures into an :class:`InputError` (prefer :func:`varstar.measurements.read_measurement_file`)."""
    p = Path(path)
    with open_table(p) as fh:
        try:
            return fh.read()
        except OSError as exc:
            raise read_error(p, exc) from None
