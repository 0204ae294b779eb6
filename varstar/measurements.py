"""Measurement tables: long and wide CSV forms -> one tidy, validated DataFrame.

Long form: one row per star per exposure, columns ``jd`` (JD, UTC, mid-exposure),
``band``, ``star``, ``mag`` (instrumental), ``mag_err``; optional ``airmass``,
``exptime`` (s), ``flag`` (0 = good), ``frame`` (exposure id).

Wide form: one row per exposure, columns ``jd``, ``band`` and the optional
per-exposure columns, plus ``<id>`` and ``<id>_err`` for each star.

Either form may name its columns differently: ``columns`` maps varstar's name to
the file's (``{"jd": "JD_UTC", "band": "FILTER"}``).  Lines starting with ``#``
and blank lines are ignored; every error names the file and the line.

A table is read in pieces of whole lines (:data:`CHUNK_BYTES`): the header is
checked before any row is parsed, each piece is checked before the next is
read, and only the checks that need every row (one exposure's rows agree, no
star twice in an exposure) wait for the end.  A bad file therefore costs what
was read up to its first fault, and memory stays bounded whatever the file.
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
import re
import stat
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import pandas as pd

from .errors import InputError
from .inputs import id_problem, open_input

REQUIRED_LONG = ("jd", "band", "star", "mag", "mag_err")
OPTIONAL = ("airmass", "exptime", "flag", "frame")
PER_EXPOSURE = ("jd", "band") + OPTIONAL
#: Columns of the tidy table returned by :func:`parse_measurements`.
TIDY_COLUMNS = (
    "source", "line", "frame", "jd", "band", "star", "mag", "mag_err", "airmass", "exptime_s", "flag",
)

# Plausibility limits (common practice for ground-based CCD/CMOS photometry).
JD_MIN, JD_MAX = 2_400_000.5, 2_500_000.5  # 1858 .. 2132
EXPTIME_MAX_S = 36_000.0
MAG_ABS_MAX = 50.0
MAG_ERR_MAX = 5.0
AIRMASS_MAX = 40.0
FLAG_MIN, FLAG_MAX = -(2**31), 2**31 - 1

#: Bytes read, decoded and parsed at a time (whole lines): memory stays bounded whatever
#: the file, and a file that goes wrong early costs what was read up to there (our choice:
#: a night of 2,000 exposures x 30 stars is about 8 pieces).
CHUNK_BYTES = 2**20
#: The longest line accepted.  A header of 100,000 column names is about 1 MB; a line of
#: several megabytes is not a row of a measurement table (our choice).
MAX_LINE_BYTES = 4 * 2**20
#: How many names a message lists at most (a header or a target may have thousands).
_LISTED = 12
_BOM = b"\xef\xbb\xbf"


def _fail(source: str, line: int | None, msg: str) -> InputError:
    where = f"{source}, line {line}" if line is not None else source
    return InputError(f"{where}: {msg}")


def _listing(names: Sequence[str]) -> str:
    """At most :data:`_LISTED` names, comma-separated, and how many more."""
    shown = ", ".join(str(n) for n in names[:_LISTED])
    return shown + (f" and {len(names) - _LISTED} more" if len(names) > _LISTED else "")


_SKIPPED_LINE = re.compile(r"^[ \t\r]*(#|$)", re.M)


def _split_lines(text: str) -> tuple[str, np.ndarray]:
    """Drop blank and comment lines; return the rest and their 1-based line numbers.

    Lines end at ``\n`` only (``\r\n`` included), as in the fast path and in the
    CSV reader: ``str.splitlines`` would also split at characters such as
    ``\x1e`` or ``\u2028`` that may sit inside a free-text cell.
    """
    body = text[:-1] if text.endswith("\n") else text
    if not _SKIPPED_LINE.search(body):  # the common case: nothing to drop
        return body, np.arange(1, body.count("\n") + 2)
    kept, numbers = [], []
    for k, ln in enumerate(text.split("\n"), start=1):
        s = ln.strip(" \t\r")  # the same blanks as _SKIPPED_LINE
        if not s or s.startswith("#"):
            continue
        kept.append(ln)
        numbers.append(k)
    return "\n".join(kept), np.asarray(numbers, dtype=np.int64)


def _check_fields(body: str, numbers: np.ndarray, source: str, cut_line: int | None = None) -> None:
    """Name the first line that is not one CSV row with as many fields as the header.

    A measurement table has one row per line.  pandas would read a quoted cell
    across a line end, take a lone carriage return for a line end and fill the
    missing cells of a short row with empty text (which may be allowed), so the
    lines are checked here; only on the slow path, where the table has empty or
    unusual cells anyway, or when the rows do not match the lines.  The first
    line of ``body`` is the header.  ``cut_line`` is the number of a last line
    without a line end, whose shortness is then explained as a cut.
    """
    n_header = None
    for k, ln in enumerate(body.split("\n")):
        ln = ln.strip("\r")  # at either end a carriage return is a line-end blank (pandas reads it so)
        if "\r" in ln:
            raise _fail(source, int(numbers[k]), "carriage return inside the line (one table row per line; save the file with ordinary line ends)")
        if '"' in ln:
            try:
                n = len(next(csv.reader([ln], skipinitialspace=True, strict=True)))
            except csv.Error:
                raise _fail(source, int(numbers[k]), "unbalanced double quote (a quoted cell must end on the same line)") from None
        else:
            n = ln.count(",") + 1
        if n_header is None:
            n_header = n
        elif n != n_header:
            hint = ""
            if cut_line is not None and int(numbers[k]) == cut_line and n < n_header:
                hint = "; it is the last line and has no line end: the file looks cut short (copy it again)"
            raise _fail(source, int(numbers[k]), f"{n} fields, but the header has {n_header} (one cell per column, separated by commas){hint}")


def _numeric(df: pd.DataFrame, col: str, lines: np.ndarray, source: str, *, allow_empty: bool) -> np.ndarray:
    raw = df[col]
    if not pd.api.types.is_float_dtype(raw) and raw.astype(str).str.contains("+", regex=False).any():
        # pandas.to_numeric rounds some numbers written with a leading '+' one unit in the last place off
        # (e.g. '+0.015451059833479719'); without the sign they parse exactly.
        raw = raw.astype(str).str.replace(r"^(\s*)\+(?=[0-9.])", r"\1", regex=True)
    # Fast path: parse everything at once; look closer only at what did not parse
    # into a finite number (empty cells, padded text, "nan", words).
    vals = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float, na_value=np.nan, copy=True)
    odd = np.flatnonzero(~np.isfinite(vals))
    if odd.size:
        txt = raw.iloc[odd].astype(str).str.strip()
        empty = (txt == "").to_numpy()
        again = pd.to_numeric(txt.where(~empty, None), errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        vals[odd] = again
        bad = ~empty & ~np.isfinite(again)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise _fail(source, int(lines[odd[i]]), f"column '{col}': {_cell(txt.iloc[i])} is not a finite number")
        if not allow_empty and empty.any():
            i = int(np.flatnonzero(empty)[0])
            raise _fail(source, int(lines[odd[i]]), f"column '{col}' is empty")
    return vals


def _cell(text: str) -> str:
    """A cell for a message: its repr, shortened if long (a damaged file may hold a megabyte in one cell)."""
    r = repr(text)
    return r if len(r) <= 50 else r[:40] + f"...' ({len(text)} characters)"


def _stripped(col: pd.Series) -> np.ndarray:
    """Text column with surrounding blanks removed (stripping each distinct value once)."""
    codes, uniq = pd.factorize(col.astype(str))
    return np.asarray([u.strip() for u in uniq], dtype=object)[codes]


def _check_range(vals: np.ndarray, lines: np.ndarray, source: str, col: str, lo: float, hi: float, hint: str = "") -> None:
    with np.errstate(invalid="ignore"):
        bad = np.isfinite(vals) & ((vals < lo) | (vals > hi))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise _fail(source, int(lines[i]), f"column '{col}': {vals[i]:g} is outside the plausible range [{lo:g}, {hi:g}]{hint}")


def _jd_hint(vals: np.ndarray) -> str:
    v = vals[np.isfinite(vals)]
    if v.size and np.median(v) < 100_000:
        return " (it looks like a reduced or modified JD: give the full Julian Date, e.g. MJD + 2400000.5)"
    return ""


_LONG_NUMERIC = ("jd", "mag", "mag_err", "airmass", "exptime", "flag")


@dataclass(frozen=True)
class _Header:
    """The checked header line: varstar's name of every column, in the file's order."""

    line: int
    names: tuple[str, ...]
    long: bool

    @property
    def placeholder(self) -> str:
        """A header line of plain names put before each piece for pandas (the real one is checked already)."""
        return ",".join(f"c{k}" for k in range(len(self.names)))


def _header_fields(text: str, line: int, source: str) -> list[str]:
    """The column names of the header line, stripped; a byte-order mark before it is skipped."""
    text = text.strip("\r").removeprefix("\ufeff")  # as pandas skips a byte-order mark that starts what it reads
    if "\r" in text:
        raise _fail(source, line, "carriage return inside the line (one table row per line; save the file with ordinary line ends)")
    if '"' in text:
        try:
            fields = next(csv.reader([text], skipinitialspace=True, strict=True))
        except csv.Error:
            raise _fail(source, line, "unbalanced double quote (a quoted cell must end on the same line)") from None
    else:
        fields = text.split(",")
    return [f.strip() for f in fields]


def _plan_header(text: str, line: int, source: str, columns: Mapping[str, str] | None, ids: Sequence[str], id_set: set[str]) -> _Header:
    """Check the header before any row is read: names, mapping, form, star columns.

    Reading only the first line keeps the cost of a wrong header (say 100,000
    unknown columns) independent of the rows below it.
    """
    header = _header_fields(text, line, source)
    seen: set[str] = set()
    for k, h in enumerate(header):
        if h == "":
            raise _fail(source, line, f"column {k + 1} of the header has no name (every column needs one)")
        if h in seen:
            raise _fail(source, line, f"column '{h}' appears twice in the header")
        seen.add(h)
    if columns:
        missing = [theirs for theirs in columns.values() if theirs not in seen]
        if missing:
            raise _fail(source, line, f"mapped column '{missing[0]}' is not in the header ({_listing(header)})")
        ours = {theirs: mine for mine, theirs in columns.items()}
        names = [ours.get(h, h) for h in header]
        if len(set(names)) != len(names):
            dup = next(n for n in names if names.count(n) > 1)
            raise _fail(source, line, f"column '{dup}' appears twice in the header once the column mapping is applied")
    else:
        names = header
    present = set(names)
    if "star" in present:
        missing = [c for c in REQUIRED_LONG if c not in present]
        if missing:
            raise _fail(source, line, f"missing column(s) {', '.join(missing)} (long form needs {', '.join(REQUIRED_LONG)})")
        unknown = [c for c in names if c not in REQUIRED_LONG + OPTIONAL]
        if unknown:
            more = f" and {len(unknown) - 1} more" if len(unknown) > 1 else ""
            raise _fail(source, line, f"unknown column {_cell(unknown[0])}{more} (known: {', '.join(REQUIRED_LONG + OPTIONAL)}; use a column mapping to rename)")
        return _Header(line, tuple(names), True)
    for c in ("jd", "band"):
        if c not in present:
            raise _fail(source, line, f"missing column '{c}' (a table needs either a 'star' column (long form) or 'jd', 'band' and one column per star (wide form))")
    star_cols = [c for c in names if c not in PER_EXPOSURE]
    stars = {c for c in star_cols if not c.endswith("_err")}
    for c in star_cols:
        sid = c[:-4] if c.endswith("_err") else c
        if sid not in id_set:
            raise _fail(source, line, f"column {_cell(c)} is neither a known column nor a star of the target ({_listing(list(ids))})")
        if c.endswith("_err") and sid not in stars:
            raise _fail(source, line, f"column '{c}' has no magnitude column '{sid}'")
    no_err = [s for s in names if s in stars and f"{s}_err" not in present]
    if no_err:
        raise _fail(source, line, f"star column '{no_err[0]}' has no error column '{no_err[0]}_err'")
    if not stars:
        raise _fail(source, line, "no star columns found")
    return _Header(line, tuple(names), False)


def _read_csv(body: str, numbers: np.ndarray, source: str, plan: _Header, cut_line: int | None) -> pd.DataFrame:
    """Read one piece (its first line the placeholder header); numbers by pandas' C reader when that is safe.

    The fast path reads a long-form table's numeric columns as floats.  If any
    of them is not a plain finite number everywhere (an empty cell, text), or a
    text cell is missing (pandas fills the cells of a short row), or the piece
    has quotes or not as many commas as its lines need, the piece is read as
    text after its lines are checked, so that validation can tell an empty cell
    from a bad one and name its line.
    """
    def as_text() -> pd.DataFrame:
        _check_fields(body, numbers, source, cut_line)
        try:
            return pd.read_csv(io.StringIO(body), dtype=str, keep_default_na=False, skipinitialspace=True)
        except (pd.errors.ParserError, ValueError) as exc:
            raise _fail(source, None, f"cannot read as CSV: {str(exc).strip()[:300]}") from None

    if not plan.long or '"' in body:
        return as_text()
    # Every line one field per column: one count, before pandas sees a row with extra fields (it would
    # make the extra leading cells of a first row an index, at a cost that grows with their number).
    if body.count(",") != len(numbers) * (len(plan.names) - 1):
        return as_text()
    cols = [f"c{k}" for k in range(len(plan.names))]
    numeric = {c for c, n in zip(cols, plan.names) if n in _LONG_NUMERIC}
    try:
        df = pd.read_csv(io.StringIO(body), dtype={c: (float if c in numeric else str) for c in cols}, skipinitialspace=True,
                         keep_default_na=False, na_values={c: [""] for c in numeric})
    except (pd.errors.ParserError, ValueError, TypeError):
        return as_text()
    if not isinstance(df.index, pd.RangeIndex):  # pandas took a first row with extra fields for an index
        return as_text()
    if not all(np.isfinite(df[c].to_numpy()).all() for c in numeric):
        return as_text()
    if any(df[c].isna().any() for c in cols if c not in numeric):  # a short row: its missing cells
        return as_text()
    return df


def _pieces(stream: BinaryIO, source: str, hasher: Any = None) -> Iterator[tuple[str, int, bool]]:
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
            raise _fail(source, None, f"not UTF-8 text (bad byte at offset {offset + exc.start})") from None

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
                    raise _fail(source, None, "contains NUL bytes: not a text table")
                raise _fail(source, line, f"longer than {MAX_LINE_BYTES // 2**20} MiB without a line end: not a row of a measurement table")
            continue
        piece, buf = buf[: cut + 1], buf[cut + 1:] + more
        yield text(piece, offset), line, False
        line += piece.count(b"\n")
        offset += len(piece)


def parse_measurements(
    data: bytes,
    source: str,
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
) -> pd.DataFrame:
    """Parse and validate one measurement table.

    Parameters
    ----------
    data
        The file's bytes (UTF-8 text, comma-separated).
    source
        Name used in messages and in the ``source`` column (usually the path).
    star_ids
        The ids declared in the target description.
    columns
        Optional mapping from varstar's column name to the file's.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TIDY_COLUMNS`; ``airmass`` and ``exptime_s`` are NaN where
        not given, ``flag`` is 0 where not given, ``frame`` is a string id.

    Raises
    ------
    InputError
        Naming ``source``, the line and the column of the first problem.
    """
    return parse_stream(io.BytesIO(data), source, star_ids, columns)


def parse_stream(
    stream: BinaryIO,
    source: str,
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
    *,
    hasher: Any = None,
) -> pd.DataFrame:
    """Parse and validate a measurement table read from a binary stream, piece by piece.

    As :func:`parse_measurements`; ``hasher`` (a :mod:`hashlib` object), if
    given, is fed every byte read.  The stream is read only as far as the first
    fault.
    """
    ids = list(star_ids)
    id_set = set(ids)
    plan: _Header | None = None
    parts: list[pd.DataFrame] = []
    n_rows = 0
    cut_line: int | None = None  # a last line without a line end
    for text, first, last in _pieces(stream, source, hasher):
        if "\x00" in text:
            raise _fail(source, None, "contains NUL bytes: not a text table")
        body, numbers = _split_lines(text)
        numbers = numbers + (first - 1)
        if last and not text.endswith("\n") and numbers.size and int(numbers[-1]) == first + text.count("\n"):
            cut_line = int(numbers[-1])
        if plan is None:
            if numbers.size == 0:
                continue
            head, _, body = body.partition("\n")
            plan = _plan_header(head, int(numbers[0]), source, columns, ids, id_set)
            numbers = numbers[1:]
        if numbers.size == 0:
            continue
        n_rows += numbers.size
        part = _parse_piece(body, numbers, plan, source, ids, id_set, cut_line)
        if part is not None:
            parts.append(part)
    if plan is None:
        raise _fail(source, None, "empty table (no header line)")
    if n_rows == 0:
        raise _fail(source, None, "the table has a header but no rows")
    if not parts:
        raise _fail(source, None, "no star has any measurement")
    out = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    out.insert(0, "source", source)
    _check_exposures(out, source)
    if cut_line is not None and cut_line != plan.line:
        _check_cut_line(out, cut_line, source)
    return out


def _parse_piece(body: str, numbers: np.ndarray, plan: _Header, source: str, ids: list[str], id_set: set[str], cut_line: int | None) -> pd.DataFrame | None:
    """The tidy rows of one piece of data lines (``numbers`` their line numbers), checked row by row; None if it has none."""
    text = plan.placeholder + "\n" + body
    lines_all = np.concatenate([[plan.line], numbers])
    df = _read_csv(text, lines_all, source, plan, cut_line)
    if len(df) != len(numbers):  # a quoted cell over a line end, or a lone carriage return
        _check_fields(text, lines_all, source, cut_line)
        raise _fail(source, None, "could not match rows to lines")  # pragma: no cover - _check_fields names the line
    df.columns = list(plan.names)
    if plan.long:
        df["line"] = numbers
    else:
        df = _wide_form(df, numbers, source)
        if df.empty:  # no star measured in any row of this piece
            return None
    return _validate_rows(df, source, ids, id_set)


def _wide_form(df: pd.DataFrame, lines: np.ndarray, source: str) -> pd.DataFrame:
    """One long-form row per filled star cell of a wide-form piece (its header checked by :func:`_plan_header`)."""
    stars = [c for c in df.columns if c not in PER_EXPOSURE and not c.endswith("_err")]
    base = df[[c for c in PER_EXPOSURE if c in df.columns]]
    parts = []
    for s in stars:
        for c in (s, f"{s}_err"):  # here, so that a message names the file's column, not 'mag'
            _numeric(df, c, lines, source, allow_empty=True)
        mag = df[s].astype(str).str.strip()
        err = df[f"{s}_err"].astype(str).str.strip()
        lonely = ((mag == "") != (err == "")).to_numpy()
        if lonely.any() and "flag" not in df.columns:
            i = int(np.flatnonzero(lonely)[0])
            empty, given = (f"{s}_err", s) if err.iloc[i] == "" else (s, f"{s}_err")
            raise _fail(source, int(lines[i]), f"column '{empty}' is empty but '{given}' is not (give both, or leave both empty)")
        present = (mag != "") | (err != "")
        part = base[present].copy()
        part["star"] = s
        part["mag"] = mag[present]
        part["mag_err"] = err[present]
        part["line"] = lines[present.to_numpy()]
        parts.append(part)
    out = pd.concat(parts, ignore_index=True)
    return out.sort_values(["line", "star"], kind="stable").reset_index(drop=True)


def _check_ids(values: np.ndarray, lines: np.ndarray, source: str, col: str) -> None:
    """Every id of a column (band, frame) obeys the one rule for ids (:func:`varstar.inputs.id_problem`)."""
    codes, uniq = pd.factorize(values)
    for k, u in enumerate(uniq):
        why = id_problem(u)
        if why:
            i = int(np.flatnonzero(codes == k)[0])
            raise _fail(source, int(lines[i]), f"column '{col}': {_cell(u)} {why}")


def _validate_rows(df: pd.DataFrame, source: str, ids: list[str], id_set: set[str]) -> pd.DataFrame:
    """Check every row on its own (ids, numbers, ranges); the tidy columns but ``source``."""
    lines = df["line"].to_numpy(dtype=np.int64)
    n = len(df)
    band = _stripped(df["band"])
    if (band == "").any():
        i = int(np.flatnonzero(band == "")[0])
        raise _fail(source, int(lines[i]), "column 'band' is empty")
    _check_ids(band, lines, source, "band")
    star = _stripped(df["star"])
    codes, uniq = pd.factorize(star)
    unknown_u = np.array([u not in id_set for u in uniq], dtype=bool)
    if unknown_u.any():
        i = int(np.flatnonzero(unknown_u[codes])[0])
        raise _fail(source, int(lines[i]), f"unknown star id {_cell(star[i])} (the target file lists {_listing(ids)})")

    jd = _numeric(df, "jd", lines, source, allow_empty=False)
    _check_range(jd, lines, source, "jd", JD_MIN, JD_MAX, _jd_hint(jd))
    flag = np.zeros(n, dtype=np.int64)
    if "flag" in df.columns:
        fv = _numeric(df, "flag", lines, source, allow_empty=True)
        fv = np.where(np.isfinite(fv), fv, 0.0)
        if np.any(fv != np.round(fv)):
            i = int(np.flatnonzero(fv != np.round(fv))[0])
            raise _fail(source, int(lines[i]), f"column 'flag': {fv[i]:g} is not a whole number (0 = good)")
        # The archive stores flags as 32-bit integers: a larger one would wrap (2**32 would become 0, "good").
        big = (fv < FLAG_MIN) | (fv > FLAG_MAX)
        if big.any():
            i = int(np.flatnonzero(big)[0])
            raise _fail(source, int(lines[i]), f"column 'flag': {fv[i]:g} is outside [{FLAG_MIN}, {FLAG_MAX}] (flags are stored as 32-bit integers)")
        flag = fv.astype(np.int64)
    # A measurement the upstream photometry marked bad may lack a magnitude.
    mag = _numeric(df, "mag", lines, source, allow_empty=True)
    err = _numeric(df, "mag_err", lines, source, allow_empty=True)
    for col, vals in (("mag", mag), ("mag_err", err)):
        hole = ~np.isfinite(vals) & (flag == 0)
        if hole.any():
            i = int(np.flatnonzero(hole)[0])
            raise _fail(source, int(lines[i]), f"column '{col}' is empty for a good measurement (set flag to non-zero if it is bad)")
    _check_range(mag, lines, source, "mag", -MAG_ABS_MAX, MAG_ABS_MAX)
    with np.errstate(invalid="ignore"):
        nonpos = np.isfinite(err) & (err <= 0) & (flag == 0)
    if nonpos.any():
        i = int(np.flatnonzero(nonpos)[0])
        raise _fail(source, int(lines[i]), f"column 'mag_err': {err[i]:g} must be positive")
    _check_range(err, lines, source, "mag_err", 0.0, MAG_ERR_MAX)
    airmass = _numeric(df, "airmass", lines, source, allow_empty=True) if "airmass" in df.columns else np.full(n, np.nan)
    _check_range(airmass, lines, source, "airmass", 0.99, AIRMASS_MAX)
    exptime = _numeric(df, "exptime", lines, source, allow_empty=True) if "exptime" in df.columns else np.full(n, np.nan)
    with np.errstate(invalid="ignore"):
        bad_t = np.isfinite(exptime) & ((exptime <= 0) | (exptime > EXPTIME_MAX_S))
    if bad_t.any():
        i = int(np.flatnonzero(bad_t)[0])
        raise _fail(source, int(lines[i]), f"column 'exptime': {exptime[i]:g} s is outside the plausible range (0, {EXPTIME_MAX_S:g}] s")

    if "frame" in df.columns:
        frame = _stripped(df["frame"])
        if (frame == "").any():
            i = int(np.flatnonzero(frame == "")[0])
            raise _fail(source, int(lines[i]), "column 'frame' is empty")
        _check_ids(frame, lines, source, "frame")
    else:
        codes, uniq = pd.factorize(jd)
        frame = np.asarray([f"{v:.6f}" for v in uniq], dtype=object)[codes]

    return pd.DataFrame(
        {
            "line": lines,
            "frame": frame,
            "jd": jd,
            "band": band,
            "star": star,
            "mag": mag,
            "mag_err": err,
            "airmass": airmass,
            "exptime_s": exptime,
            "flag": flag,
        }
    )


def _check_exposures(out: pd.DataFrame, source: str) -> None:
    """Checks across rows: one exposure = (frame, band), whose rows agree on time, airmass, exposure time,
    and hold each star once."""
    lines = out["line"].to_numpy()
    key = ["frame", "band"]
    groups = out.groupby(key, sort=False)
    for col in ("jd", "airmass", "exptime_s"):
        spread = (groups[col].transform("max") - groups[col].transform("min")).to_numpy()
        with np.errstate(invalid="ignore"):
            bad = spread > (1e-7 if col == "jd" else 1e-9)
        if col != "jd":  # the archive keeps one value per exposure: some rows giving it and some not disagree too
            given = groups[col].transform("count").to_numpy()
            bad |= (given > 0) & (given < groups[col].transform("size").to_numpy())
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise _fail(source, int(lines[i]), f"exposure {_cell(str(out.frame.iloc[i]))} ({out.band.iloc[i]}) has rows with different '{col}' values")
    dup = out.duplicated(["frame", "band", "star"], keep=False).to_numpy()
    if dup.any():
        rows = np.flatnonzero(dup)
        first = rows[0]
        same = rows[(out.frame.to_numpy()[rows] == out.frame.iloc[first]) & (out.star.to_numpy()[rows] == out.star.iloc[first]) & (out.band.to_numpy()[rows] == out.band.iloc[first])]
        raise _fail(source, int(lines[same[-1]]), f"star '{out.star.iloc[first]}' is measured twice in exposure {_cell(str(out.frame.iloc[first]))} ({out.band.iloc[first]}); first at line {lines[same[0]]}")


def _check_cut_line(out: pd.DataFrame, line: int, source: str) -> None:
    """Refuse a last line without a line end that looks cut short: the only measurement of its exposure.

    A copy or transfer that stops early leaves a last line without its line
    end; cut inside its last cell (in a long table usually the frame id), it
    still has every field but names a new exposure with one star, which would
    be stored as such (and the night, once stored, refuses the complete file).
    A table whose other exposures have two or more measurements does not end
    with an exposure of one unless it was cut (common practice: photometry
    software writes every star of an exposure together).  A file that is
    complete needs only a line end after its last line.
    """
    on_line = (out["line"] == line).to_numpy()
    if not on_line.any():
        return
    i = int(np.flatnonzero(on_line)[0])
    key = out["frame"].astype(str) + "\x00" + out["band"].astype(str)
    sizes = key.map(key.value_counts()).to_numpy()
    same = (key == key.iloc[i]).to_numpy()
    others = sizes[~same]
    if sizes[i] == 1 and others.size and others.max() >= 2:
        raise _fail(
            source, line,
            f"the last line has no line end and is the only measurement of exposure {_cell(str(out.frame.iloc[i]))} "
            f"({out.band.iloc[i]}), while other exposures have up to {int(others.max())}: the file looks cut short; "
            f"copy it again (if it is complete, end its last line with a line end)"
        )


# -- files -------------------------------------------------------------------------------


def _open(path: Path) -> BinaryIO:
    """Open a measurement file for reading, turning the usual OS failures into an :class:`InputError`."""
    return open_input(path, "a measurement table")


def _read_error(path: Path, exc: OSError) -> InputError:
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
    with _open(p) as fh:
        try:
            for block in iter(lambda: fh.read(CHUNK_BYTES), b""):
                h.update(block)
        except OSError as exc:
            raise _read_error(p, exc) from None
    return h.hexdigest()


def read_measurement_file(
    path: str | Path,
    star_ids: Sequence[str],
    columns: Mapping[str, str] | None = None,
) -> tuple[pd.DataFrame, str]:
    """Read and validate one measurement file, piece by piece; also return the SHA-256 of what was read.

    The file is read once (a pipe works too) and only as far as its first
    fault; ``source`` in the table and in messages is the path as given.
    """
    p = Path(path)
    h = hashlib.sha256()
    with _open(p) as fh:
        try:
            table = parse_stream(fh, str(p), star_ids, columns, hasher=h)
        except OSError as exc:
            raise _read_error(p, exc) from None
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
    return pd.concat(tables, ignore_index=True)


def read_bytes(path: Path) -> bytes:
    """Read a whole file, turning the usual OS failures into an :class:`InputError` (prefer :func:`read_measurement_file`)."""
    p = Path(path)
    with _open(p) as fh:
        try:
            return fh.read()
        except OSError as exc:
            raise _read_error(p, exc) from None
