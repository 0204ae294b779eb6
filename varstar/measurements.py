"""Measurement tables: long and wide CSV forms -> one tidy, validated DataFrame.

Long form: one row per star per exposure, columns ``jd`` (JD, UTC, mid-exposure),
``band``, ``star``, ``mag`` (instrumental), ``mag_err``; optional ``airmass``,
``exptime`` (s), ``flag`` (0 = good), ``frame`` (exposure id).

Wide form: one row per exposure, columns ``jd``, ``band`` and the optional
per-exposure columns, plus ``<id>`` and ``<id>_err`` for each star.

Either form may name its columns differently: ``columns`` maps varstar's name to
the file's (``{"jd": "JD_UTC", "band": "FILTER"}``).  Lines starting with ``#``
and blank lines are ignored; every error names the file and the line.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError

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


def _fail(source: str, line: int | None, msg: str) -> InputError:
    where = f"{source}, line {line}" if line is not None else source
    return InputError(f"{where}: {msg}")


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


def _check_fields(body: str, numbers: np.ndarray, source: str) -> None:
    """Name the first line that is not one CSV row with as many fields as the header.

    A measurement table has one row per line.  pandas would read a quoted cell
    across a line end, take a lone carriage return for a line end and fill the
    missing cells of a short row with empty text (which may be allowed), so the
    lines are checked here; only on the slow path, where the table has empty or
    unusual cells anyway, or when the rows do not match the lines.
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
            raise _fail(source, int(numbers[k]), f"{n} fields, but the header has {n_header} (one cell per column, separated by commas)")


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
            raise _fail(source, int(lines[odd[i]]), f"column '{col}': {txt.iloc[i]!r} is not a finite number")
        if not allow_empty and empty.any():
            i = int(np.flatnonzero(empty)[0])
            raise _fail(source, int(lines[odd[i]]), f"column '{col}' is empty")
    return vals


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


def _read_csv(body: str, source: str, columns: Mapping[str, str] | None, numbers: np.ndarray) -> pd.DataFrame:
    """Read the table; numbers are parsed by pandas' C reader when that is safe.

    The fast path reads a long-form table's numeric columns as floats.  If any
    of them is not a plain finite number everywhere (an empty cell, text), the
    table is read again as text, so that validation can tell an empty cell from
    a bad one and name its line.
    """
    def as_text() -> pd.DataFrame:
        _check_fields(body, numbers, source)
        try:
            return pd.read_csv(io.StringIO(body), dtype=str, keep_default_na=False, skipinitialspace=True)
        except (pd.errors.ParserError, ValueError) as exc:
            raise _fail(source, None, f"cannot read as CSV: {str(exc).strip()}") from None

    header = [h.strip() for h in body.split("\n", 1)[0].split(",")]
    ours = {theirs: mine for mine, theirs in (columns or {}).items()}
    named = [ours.get(h, h) for h in header]
    if "star" not in named or len(set(header)) != len(header):
        return as_text()
    numeric = {h: float for h, n in zip(header, named) if n in _LONG_NUMERIC}
    try:
        df = pd.read_csv(io.StringIO(body), dtype={h: (numeric.get(h, str)) for h in header}, skipinitialspace=True, keep_default_na=False, na_values={h: [""] for h in numeric})
    except (pd.errors.ParserError, ValueError, TypeError):
        return as_text()
    if not all(np.isfinite(df[h].to_numpy()).all() for h in numeric):
        return as_text()
    if not isinstance(df.index, pd.RangeIndex):  # pandas took a first row with extra fields for an index
        return as_text()
    return df


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
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise _fail(source, None, f"not UTF-8 text (bad byte at offset {exc.start})") from None
    if "\x00" in text:
        raise _fail(source, None, "contains NUL bytes: not a text table")
    body, numbers = _split_lines(text)
    if not body.strip():
        raise _fail(source, None, "empty table (no header line)")
    df = _read_csv(body, source, columns, numbers)
    header_line = int(numbers[0])
    lines = numbers[1:]
    if len(df) != len(lines):  # a quoted cell over a line end, or a lone carriage return
        _check_fields(body, numbers, source)
        raise _fail(source, None, "could not match rows to lines")  # pragma: no cover - _check_fields names the line
    df.columns = [str(c).strip() for c in df.columns]
    if len(set(df.columns)) != len(df.columns):
        dup = next(c for c in df.columns if list(df.columns).count(c) > 1)
        raise _fail(source, header_line, f"column '{dup}' appears twice in the header")

    if columns:
        missing = [theirs for theirs in columns.values() if theirs not in df.columns]
        if missing:
            raise _fail(source, header_line, f"mapped column '{missing[0]}' is not in the header ({', '.join(df.columns)})")
        df = df.rename(columns={theirs: ours for ours, theirs in columns.items()})
    if df.empty:
        raise _fail(source, None, "the table has a header but no rows")

    ids = list(star_ids)
    if "star" in df.columns:
        long = _long_form(df, lines, source, header_line)
    else:
        long = _wide_form(df, lines, source, header_line, ids)
    return _validate(long, source, ids)


def _long_form(df: pd.DataFrame, lines: np.ndarray, source: str, header_line: int) -> pd.DataFrame:
    missing = [c for c in REQUIRED_LONG if c not in df.columns]
    if missing:
        raise _fail(source, header_line, f"missing column(s) {', '.join(missing)} (long form needs {', '.join(REQUIRED_LONG)})")
    unknown = [c for c in df.columns if c not in REQUIRED_LONG + OPTIONAL]
    if unknown:
        raise _fail(source, header_line, f"unknown column '{unknown[0]}' (known: {', '.join(REQUIRED_LONG + OPTIONAL)}; use a column mapping to rename)")
    out = df.copy()
    out["line"] = lines
    return out


def _wide_form(df: pd.DataFrame, lines: np.ndarray, source: str, header_line: int, ids: list[str]) -> pd.DataFrame:
    for c in ("jd", "band"):
        if c not in df.columns:
            raise _fail(source, header_line, f"missing column '{c}' (a table needs either a 'star' column (long form) or 'jd', 'band' and one column per star (wide form))")
    star_cols = [c for c in df.columns if c not in PER_EXPOSURE]
    stars = [c for c in star_cols if not c.endswith("_err")]
    for c in star_cols:
        sid = c[:-4] if c.endswith("_err") else c
        if sid not in ids:
            raise _fail(source, header_line, f"column '{c}' is neither a known column nor a star of the target ({', '.join(ids)})")
        if c.endswith("_err") and sid not in stars:
            raise _fail(source, header_line, f"column '{c}' has no magnitude column '{sid}'")
    no_err = [s for s in stars if f"{s}_err" not in df.columns]
    if no_err:
        raise _fail(source, header_line, f"star column '{no_err[0]}' has no error column '{no_err[0]}_err'")
    if not stars:
        raise _fail(source, header_line, "no star columns found")
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
    if out.empty:
        raise _fail(source, None, "no star has any measurement")
    return out.sort_values(["line", "star"], kind="stable").reset_index(drop=True)


def _validate(df: pd.DataFrame, source: str, ids: list[str]) -> pd.DataFrame:
    lines = df["line"].to_numpy(dtype=np.int64)
    n = len(df)
    band = _stripped(df["band"])
    if (band == "").any():
        i = int(np.flatnonzero(band == "")[0])
        raise _fail(source, int(lines[i]), "column 'band' is empty")
    star = _stripped(df["star"])
    unknown = ~np.isin(star, ids)
    if unknown.any():
        i = int(np.flatnonzero(unknown)[0])
        raise _fail(source, int(lines[i]), f"unknown star id {star[i]!r} (the target file lists {', '.join(ids)})")

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
    else:
        codes, uniq = pd.factorize(jd)
        frame = np.asarray([f"{v:.6f}" for v in uniq], dtype=object)[codes]

    out = pd.DataFrame(
        {
            "source": source,
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
    # One exposure = (frame, band): its rows must agree on time, airmass, exposure time.
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
            raise _fail(source, int(lines[i]), f"exposure '{out.frame.iloc[i]}' ({out.band.iloc[i]}) has rows with different '{col}' values")
    dup = out.duplicated(["frame", "band", "star"], keep=False).to_numpy()
    if dup.any():
        rows = np.flatnonzero(dup)
        first = rows[0]
        same = rows[(out.frame.to_numpy()[rows] == out.frame.iloc[first]) & (out.star.to_numpy()[rows] == out.star.iloc[first]) & (out.band.to_numpy()[rows] == out.band.iloc[first])]
        raise _fail(source, int(lines[same[-1]]), f"star '{out.star.iloc[first]}' is measured twice in exposure '{out.frame.iloc[first]}' ({out.band.iloc[first]}); first at line {lines[same[0]]}")
    return out


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
    tables = []
    for p in map(Path, paths):
        tables.append(parse_measurements(read_bytes(p), str(p), star_ids, columns))
    if not tables:
        raise InputError("no measurement files given")
    if len(tables) > 1:
        for t in tables:
            t["frame"] = Path(t["source"].iloc[0]).name + ":" + t["frame"].astype(str)
    return pd.concat(tables, ignore_index=True)


def read_bytes(path: Path) -> bytes:
    """Read a file, turning the usual OS failures into an :class:`InputError`."""
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a measurement table") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from None
