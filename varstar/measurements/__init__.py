"""Measurement tables: long and wide CSV forms -> one tidy, validated DataFrame.

Long form: one row per star per exposure, columns ``jd`` (JD, UTC, mid-exposure),
``band``, ``star``, ``mag`` (instrumental), ``mag_err``; optional ``airmass``,
``exptime`` (s), ``flag`` (0 = good), ``frame`` (exposure id).

Wide form: one row per exposure, columns ``jd``, ``band`` and the optional
per-exposure columns, plus ``<id>`` and ``<id>_err`` for each star.

Either form may name its columns differently: ``columns`` maps varstar's name to
the file's (``{"jd": "JD_UTC", "band": "FILTER"}``); varstar's names are matched
without regard to case.  Cells are separated by commas, or by semicolons or tabs
when the header line has no comma.  Lines starting with ``#`` and blank lines
are ignored; every error names the file and the line.

A row marked bad upstream (``flag`` not 0) is kept whatever its magnitude and
error hold; a good row holding a placeholder such as ``99.999`` is kept flagged.
What the reader changed this way is said in ``table.attrs["warnings"]`` (a list
of sentences, each naming the file), which the night's report carries.

A table is read in pieces of whole lines (:data:`CHUNK_BYTES`): the header is
checked before any row is parsed, each piece is checked before the next is
read, and only the checks that need every row (one exposure's rows agree, no
star twice in an exposure) wait for the end.  A bad file therefore costs what
was read up to its first fault, and memory stays bounded whatever the file.

The steps live in their own modules; this one runs them over a file:

* :mod:`~varstar.measurements.stream`: bytes in bounded pieces of whole lines,
  hashed while read; opening files; :func:`file_sha256`, :func:`read_bytes`,
  :func:`is_regular_file`;
* :mod:`~varstar.measurements.header`: the header line, the column mapping,
  long or wide form;
* :mod:`~varstar.measurements.lines`: a piece's lines -> a table of cells;
* :mod:`~varstar.measurements.wide`: the wide form turned into the long form;
* :mod:`~varstar.measurements.validate`: values checked row by row, and the
  checks across rows at the end of the file;
* :mod:`~varstar.measurements.messages`: how a fault is named (file, line, cell).
"""

from __future__ import annotations

import hashlib
import io
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import pandas as pd

from ..errors import InputError
from .header import DELIMITER_NAMES, OPTIONAL, PER_EXPOSURE, REQUIRED_LONG, Header, plan_header
from .lines import check_fields, read_piece, split_lines
from .messages import fail
from .stream import CHUNK_BYTES, MAX_LINE_BYTES, file_sha256, is_regular_file, open_table, read_bytes, read_error, text_pieces
from .validate import (
    AIRMASS_MAX, EXPTIME_MAX_S, FLAG_MAX, FLAG_MIN, JD_MAX, JD_MIN, MAG_ABS_MAX, MAG_ERR_MAX,
    SENTINEL_FLAG, SENTINELS, check_cut_line, check_exposures, sentinel_warning, validate_rows,
)
from .wide import wide_to_long

__all__ = [
    "TIDY_COLUMNS", "REQUIRED_LONG", "OPTIONAL", "PER_EXPOSURE",
    "JD_MIN", "JD_MAX", "EXPTIME_MAX_S", "MAG_ABS_MAX", "MAG_ERR_MAX", "AIRMASS_MAX", "FLAG_MIN", "FLAG_MAX",
    "SENTINELS", "SENTINEL_FLAG",
    "CHUNK_BYTES", "MAX_LINE_BYTES",
    "parse_measurements", "parse_stream", "read_measurement_file", "read_measurements",
    "read_bytes", "file_sha256", "is_regular_file",
]

#: Columns of the tidy table returned by :func:`parse_measurements`.
TIDY_COLUMNS = (
    "source", "line", "frame", "jd", "band", "star", "mag", "mag_err", "airmass", "exptime_s", "flag",
)


def parse_measurements(
    data: bytes,
    source: str,
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
    *,
    time_format: str = "jd",
) -> pd.DataFrame:
    """Parse and validate one measurement table.

    Parameters
    ----------
    data
        The file's bytes (UTF-8 text; cells separated by commas, or by semicolons or tabs when the header line has no comma).
    source
        Name used in messages and in the ``source`` column (usually the path).
    star_ids
        The ids declared in the target description.
    columns
        Optional mapping from varstar's column name to the file's.
    time_format
        What the time column holds: ``"jd"`` (default) or ``"mjd"``; the table's
        ``jd`` is a Julian Date either way.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TIDY_COLUMNS`; ``airmass`` and ``exptime_s`` are NaN where
        not given, ``flag`` is 0 where not given, ``frame`` is a string id.
        ``attrs["warnings"]`` lists what the reader read generously (a delimiter
        other than the comma, placeholders flagged), each naming the file.

    Raises
    ------
    InputError
        Naming ``source``, the line and the column of the first problem.
    """
    return parse_stream(io.BytesIO(data), source, star_ids, columns, time_format=time_format)


def parse_stream(
    stream: BinaryIO,
    source: str,
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
    *,
    hasher: Any = None,
    time_format: str = "jd",
) -> pd.DataFrame:
    """Parse and validate a measurement table read from a binary stream, piece by piece.

    As :func:`parse_measurements`; ``hasher`` (a :mod:`hashlib` object), if
    given, is fed every byte read.  The stream is read only as far as the first
    fault.
    """
    ids = list(star_ids)
    id_set = set(ids)
    plan: Header | None = None
    parts: list[pd.DataFrame] = []
    n_rows = 0
    cut_line: int | None = None  # a last line without a line end
    placeholder_lines: list[np.ndarray] = []
    placeholder_values: list[str] = []
    for text, first, last in text_pieces(stream, source, hasher):
        if "\x00" in text:
            raise fail(source, None, "contains NUL bytes: not a text table")
        body, numbers = split_lines(text)
        numbers = numbers + (first - 1)
        if last and not text.endswith("\n") and numbers.size and int(numbers[-1]) == first + text.count("\n"):
            cut_line = int(numbers[-1])
        if plan is None:
            if numbers.size == 0:
                continue
            head, _, body = body.partition("\n")
            plan = plan_header(head, int(numbers[0]), source, columns, ids, id_set)
            numbers = numbers[1:]
        if numbers.size == 0:
            continue
        n_rows += numbers.size
        part = _parse_piece(body, numbers, plan, source, ids, id_set, cut_line, time_format)
        if part is not None:
            found = part.attrs.pop("placeholders", None)
            if found is not None:
                placeholder_lines.append(found[0])
                placeholder_values += found[1]
            parts.append(part)
    if plan is None:
        raise fail(source, None, "empty table (no header line)")
    if n_rows == 0:
        raise fail(source, None, "the table has a header but no rows")
    if not parts:
        raise fail(source, None, "no star has any measurement")
    out = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    out.insert(0, "source", source)
    check_exposures(out, source)
    if cut_line is not None and cut_line != plan.line:
        check_cut_line(out, cut_line, source)
    warnings = []
    if plan.sep != ",":
        warnings.append(f"{source}: read with cells separated by {DELIMITER_NAMES[plan.sep]} (the header line has no comma)")
    if placeholder_lines:
        found = np.concatenate(placeholder_lines)
        warnings.append(sentinel_warning(source, found, placeholder_values, int(found.size)))
    out.attrs["warnings"] = warnings
    return out


def _parse_piece(
    body: str, numbers: np.ndarray, plan: Header, source: str, ids: list[str], id_set: set[str], cut_line: int | None,
    time_format: str,
) -> pd.DataFrame | None:
    """The tidy rows of one piece of data lines (``numbers`` their line numbers), checked row by row; None if it has none."""
    text = plan.placeholder + "\n" + body
    lines_all = np.concatenate([[plan.line], numbers])
    df = read_piece(text, lines_all, source, plan, cut_line)
    if len(df) != len(numbers):  # a quoted cell over a line end, or a lone carriage return
        check_fields(text, lines_all, source, cut_line, plan.sep)
        raise fail(source, None, "could not match rows to lines")  # pragma: no cover - check_fields names the line
    df.columns = list(plan.names)
    if plan.long:
        df["line"] = numbers
    else:
        df = wide_to_long(df, numbers, source)
        if df.empty:  # no star measured in any row of this piece
            return None
    return validate_rows(df, source, ids, id_set, time_format)


def read_measurement_file(
    path: str | Path,
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
    *,
    time_format: str = "jd",
) -> tuple[pd.DataFrame, str]:
    """Read and validate one measurement file, piece by piece; also return the SHA-256 of what was read.

    The file is read once (a pipe works too) and only as far as its first
    fault; ``source`` in the table and in messages is the path as given.
    """
    p = Path(path)
    h = hashlib.sha256()
    with open_table(p) as fh:
        try:
            table = parse_stream(fh, str(p), star_ids, columns, hasher=h, time_format=time_format)
        except OSError as exc:
            raise read_error(p, exc) from None
    return table, h.hexdigest()


def read_measurements(
    paths: str | Path | Iterable[str | Path],
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
) -> pd.DataFrame:
    """Read one or more measurement files into one tidy table.

    Frame ids are made unique across files by prefixing the file name where
    several files are read.
    """
    if isinstance(paths, (str, Path)):
        paths = [paths]
    tables = [read_measurement_file(p, star_ids, columns)[0] for p in map(Path, paths)]
    if not tables:
        raise InputError("no measurement files given")
    if len(tables) > 1:
        for t in tables:
            t["frame"] = Path(t["source"].iloc[0]).name + ":" + t["frame"].astype(str)
    warnings = [w for t in tables for w in t.attrs.get("warnings", [])]
    out = pd.concat(tables, ignore_index=True)
    out.attrs["warnings"] = warnings
    return out
