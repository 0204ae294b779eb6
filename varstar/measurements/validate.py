"""Row-by-row checks of a measurement table, each fault named by file, line and column.

:func:`validate_rows` checks every row on its own (ids, numbers, plausible
ranges) and returns the tidy columns; :func:`check_exposures` and
:func:`check_cut_line` need every row of the file and run at its end.  Numbers
are parsed by :func:`numeric_column`, which looks at a cell's text only where
the fast parse did not give a finite number.  Ids follow the one rule of
:func:`varstar.inputs.id_problem`.

A measurement marked bad upstream (``flag`` not 0) is kept but never used, so
its magnitude and error are not held to the rules of a good one: a value that
is not a plausible number (text, ``nan``, ``99.999``) is stored as empty
(NaN).  Its time, band, star, frame, airmass and exposure time are checked as
any row's.  A good row whose magnitude or error is one of the placeholder
values photometry programs write for "no measurement" (:data:`SENTINELS`) is
stored flagged (:data:`SENTINEL_FLAG`), with a warning, rather than refused.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from ..inputs import id_problem
from .messages import fail, listing, shown_cell

# Plausibility limits (common practice for ground-based CCD/CMOS photometry).
JD_MIN, JD_MAX = 2_400_000.5, 2_500_000.5  # 1858 .. 2132
EXPTIME_MAX_S = 36_000.0
MAG_ABS_MAX = 50.0
MAG_ERR_MAX = 5.0
AIRMASS_MAX = 40.0
FLAG_MIN, FLAG_MAX = -(2**31), 2**31 - 1
#: Placeholders for "no measurement" that photometry programs commonly write in a magnitude or error
#: column (common practice).  Each is outside the plausible ranges above (|mag| > 50, mag_err > 5 or
#: negative), so no real measurement is taken for one.
SENTINELS = (99.999, 99.99, 99.9999, -99.0, -99.999)
_DECIMAL_COMMA = re.compile(r"[+-]?[0-9]+,[0-9]+")
#: The flag given to a good row that holds a placeholder (flags are plain integers, 0 = good).
SENTINEL_FLAG = 1


def numeric_column(df: pd.DataFrame, col: str, lines: np.ndarray, source: str, *, allow_empty: bool,
                   lenient: np.ndarray | None = None) -> np.ndarray:
    """The column ``col`` of ``df`` as floats (NaN where empty), or the first bad cell named by its line.

    Parameters
    ----------
    df
        Cells of a piece, as text or (fast path) already as floats.
    col
        The column's name, as the message should give it.
    lines
        The 1-based line number of each row.
    source
        The file's name, for messages.
    allow_empty
        Whether an empty cell is allowed (it becomes NaN).
    lenient
        Optional mask of rows (measurements marked bad) where a cell that is not a
        finite number becomes NaN instead of an error.

    Raises
    ------
    InputError
        For a cell that is not a finite number, or an empty one where none is allowed.
    """
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
        if lenient is not None:
            spared = bad & lenient[odd]
            vals[odd[spared]] = np.nan
            bad &= ~spared
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            hint = " (write decimals with a point, not a comma)" if _DECIMAL_COMMA.fullmatch(txt.iloc[i]) else ""
            raise fail(source, int(lines[odd[i]]), f"column '{col}': {shown_cell(txt.iloc[i])} is not a finite number{hint}")
        if not allow_empty and empty.any():
            i = int(np.flatnonzero(empty)[0])
            raise fail(source, int(lines[odd[i]]), f"column '{col}' is empty")
    return vals


def _stripped(col: pd.Series) -> np.ndarray:
    """Text column with surrounding blanks removed (stripping each distinct value once)."""
    codes, uniq = pd.factorize(col.astype(str))
    return np.asarray([u.strip() for u in uniq], dtype=object)[codes]


def flag_mask(df: pd.DataFrame) -> np.ndarray | None:
    """Rows whose ``flag`` cell reads as a number other than 0 (a loose look, before the flags are checked), or None."""
    if "flag" not in df.columns:
        return None
    fv = pd.to_numeric(df["flag"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    return np.isfinite(fv) & (fv != 0)


def _sentinel_rows(mag: np.ndarray, err: np.ndarray, good: np.ndarray) -> np.ndarray:
    """Good rows whose magnitude or error is a placeholder (:data:`SENTINELS`)."""
    return good & (np.isin(mag, SENTINELS) | np.isin(err, SENTINELS))


def sentinel_warning(source: str, lines: np.ndarray, values: list[str], n: int) -> str:
    """The warning for ``n`` good rows of ``source`` that held a placeholder (first lines and values given)."""
    shown = ", ".join(f"line {int(k)}: {v}" for k, v in zip(lines[:5], values[:5]))
    more = f" and {n - 5} more" if n > 5 else ""
    return (f"{source}: {n} measurement(s) hold a placeholder for 'no measurement' ({shown}{more}); "
            f"stored flagged (flag {SENTINEL_FLAG}) and not used")


def _check_range(vals: np.ndarray, lines: np.ndarray, source: str, col: str, lo: float, hi: float, hint: str = "") -> None:
    """Refuse the first finite value outside ``[lo, hi]``, naming its line."""
    with np.errstate(invalid="ignore"):
        bad = np.isfinite(vals) & ((vals < lo) | (vals > hi))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise fail(source, int(lines[i]), f"column '{col}': {vals[i]:g} is outside the plausible range [{lo:g}, {hi:g}]{hint}")


def _jd_hint(vals: np.ndarray) -> str:
    """A hint for times that look like a reduced or modified JD, else nothing."""
    v = vals[np.isfinite(vals)]
    if v.size and np.median(v) < 100_000:
        return (" (it looks like a reduced or modified JD: give the full Julian Date, e.g. MJD + 2400000.5, or declare "
                "an MJD column: ingest --time-format mjd, or [measurements] time_format = \"mjd\" in the target description)")
    return ""


def _check_ids(values: np.ndarray, lines: np.ndarray, source: str, col: str) -> None:
    """Every id of a column (band, frame) obeys the one rule for ids (:func:`varstar.inputs.id_problem`)."""
    codes, uniq = pd.factorize(values)
    for k, u in enumerate(uniq):
        why = id_problem(u)
        if why:
            i = int(np.flatnonzero(codes == k)[0])
            raise fail(source, int(lines[i]), f"column '{col}': {shown_cell(u)} {why}")


def _flag_column(df: pd.DataFrame, lines: np.ndarray, source: str) -> np.ndarray:
    """The flags as integers (0 where not given): whole numbers that fit the archive's 32 bits."""
    flag = np.zeros(len(df), dtype=np.int64)
    if "flag" in df.columns:
        fv = numeric_column(df, "flag", lines, source, allow_empty=True)
        fv = np.where(np.isfinite(fv), fv, 0.0)
        if np.any(fv != np.round(fv)):
            i = int(np.flatnonzero(fv != np.round(fv))[0])
            raise fail(source, int(lines[i]), f"column 'flag': {fv[i]:g} is not a whole number (0 = good)")
        # The archive stores flags as 32-bit integers: a larger one would wrap (2**32 would become 0, "good").
        big = (fv < FLAG_MIN) | (fv > FLAG_MAX)
        if big.any():
            i = int(np.flatnonzero(big)[0])
            raise fail(source, int(lines[i]), f"column 'flag': {fv[i]:g} is outside [{FLAG_MIN}, {FLAG_MAX}] (flags are stored as 32-bit integers)")
        flag = fv.astype(np.int64)
    return flag


def _frame_column(df: pd.DataFrame, jd: np.ndarray, lines: np.ndarray, source: str) -> np.ndarray:
    """The frame ids; without a 'frame' column, rows of one time form one exposure, named by the time."""
    if "frame" in df.columns:
        frame = _stripped(df["frame"])
        if (frame == "").any():
            i = int(np.flatnonzero(frame == "")[0])
            raise fail(source, int(lines[i]), "column 'frame' is empty")
        _check_ids(frame, lines, source, "frame")
        return frame
    codes, uniq = pd.factorize(jd)
    return np.asarray([f"{v:.6f}" for v in uniq], dtype=object)[codes]


#: What each declared time format adds to the column to give a Julian Date.
JD_OFFSETS = {"jd": 0.0, "mjd": 2400000.5}


def validate_rows(df: pd.DataFrame, source: str, ids: list[str], id_set: set[str], time_format: str = "jd") -> pd.DataFrame:
    """Check every row on its own (ids, numbers, ranges); the tidy columns but ``source``.

    Parameters
    ----------
    df
        One piece in the long form, varstar's column names, and a ``line`` column.
    source
        The file's name, for messages.
    ids, id_set
        The target's star ids, as a list (for messages) and as a set.
    time_format
        ``"jd"`` or ``"mjd"`` (MJD = JD - 2400000.5): what the time column holds.

    Returns
    -------
    pandas.DataFrame
        Columns ``line, frame, jd, band, star, mag, mag_err, airmass, exptime_s, flag``.

    Raises
    ------
    InputError
        Naming ``source``, the line and the column of the first fault.
    """
    lines = df["line"].to_numpy(dtype=np.int64)
    n = len(df)
    band = _stripped(df["band"])
    if (band == "").any():
        i = int(np.flatnonzero(band == "")[0])
        raise fail(source, int(lines[i]), "column 'band' is empty")
    _check_ids(band, lines, source, "band")
    star = _stripped(df["star"])
    codes, uniq = pd.factorize(star)
    unknown_u = np.array([u not in id_set for u in uniq], dtype=bool)
    if unknown_u.any():
        i = int(np.flatnonzero(unknown_u[codes])[0])
        raise fail(source, int(lines[i]), f"unknown star id {shown_cell(star[i])} (the target file lists {listing(ids)})")

    jd = numeric_column(df, "jd", lines, source, allow_empty=False) + JD_OFFSETS[time_format]
    _check_range(jd, lines, source, "jd", JD_MIN, JD_MAX, _jd_hint(jd) if time_format == "jd" else f" (read as {time_format.upper()})")
    flag = _flag_column(df, lines, source)
    # A measurement the upstream photometry marked bad may lack a magnitude, or hold anything there.
    marked = flag != 0
    mag = numeric_column(df, "mag", lines, source, allow_empty=True, lenient=marked)
    err = numeric_column(df, "mag_err", lines, source, allow_empty=True, lenient=marked)
    placeholder = _sentinel_rows(mag, err, ~marked)
    placeholders = None
    if placeholder.any():
        flag[placeholder] = SENTINEL_FLAG
        where = np.flatnonzero(placeholder)
        vals = [f"mag {mag[i]:g}" if np.isin(mag[i], SENTINELS) else f"mag_err {err[i]:g}" for i in where[:5]]
        placeholders = (lines[where], vals)
    flagged = flag != 0
    with np.errstate(invalid="ignore"):
        mag[flagged & (np.abs(mag) > MAG_ABS_MAX)] = np.nan
        err[flagged & ((err < 0) | (err > MAG_ERR_MAX))] = np.nan
    for col, vals in (("mag", mag), ("mag_err", err)):
        hole = ~np.isfinite(vals) & (flag == 0)
        if hole.any():
            i = int(np.flatnonzero(hole)[0])
            raise fail(source, int(lines[i]), f"column '{col}' is empty for a good measurement (set flag to non-zero if it is bad)")
    bad_hint = " (if it marks a measurement as bad, set its flag to non-zero)"
    _check_range(mag, lines, source, "mag", -MAG_ABS_MAX, MAG_ABS_MAX, bad_hint)
    with np.errstate(invalid="ignore"):
        nonpos = np.isfinite(err) & (err <= 0) & (flag == 0)
    if nonpos.any():
        i = int(np.flatnonzero(nonpos)[0])
        raise fail(source, int(lines[i]), f"column 'mag_err': {err[i]:g} must be positive")
    _check_range(err, lines, source, "mag_err", 0.0, MAG_ERR_MAX, bad_hint)
    airmass = numeric_column(df, "airmass", lines, source, allow_empty=True) if "airmass" in df.columns else np.full(n, np.nan)
    _check_range(airmass, lines, source, "airmass", 0.99, AIRMASS_MAX)
    exptime = numeric_column(df, "exptime", lines, source, allow_empty=True) if "exptime" in df.columns else np.full(n, np.nan)
    with np.errstate(invalid="ignore"):
        bad_t = np.isfinite(exptime) & ((exptime <= 0) | (exptime > EXPTIME_MAX_S))
    if bad_t.any():
        i = int(np.flatnonzero(bad_t)[0])
        raise fail(source, int(lines[i]), f"column 'exptime': {exptime[i]:g} s is outside the plausible range (0, {EXPTIME_MAX_S:g}] s")
    frame = _frame_column(df, jd, lines, source)

    out = pd.DataFrame(
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
    if placeholders is not None:  # (lines of every such row, the first values) for the file's warning
        out.attrs["placeholders"] = placeholders
    return out


def check_exposures(out: pd.DataFrame, source: str) -> None:
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
            raise fail(source, int(lines[i]), f"exposure {shown_cell(str(out.frame.iloc[i]))} ({out.band.iloc[i]}) has rows with different '{col}' values")
    dup = out.duplicated(["frame", "band", "star"], keep=False).to_numpy()
    if dup.any():
        rows = np.flatnonzero(dup)
        first = rows[0]
        same = rows[(out.frame.to_numpy()[rows] == out.frame.iloc[first]) & (out.star.to_numpy()[rows] == out.star.iloc[first]) & (out.band.to_numpy()[rows] == out.band.iloc[first])]
        raise fail(source, int(lines[same[-1]]), f"star '{out.star.iloc[first]}' is measured twice in exposure {shown_cell(str(out.frame.iloc[first]))} ({out.band.iloc[first]}); first at line {lines[same[0]]}")


def check_cut_line(out: pd.DataFrame, line: int, source: str) -> None:
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
        raise fail(
            source, line,
            f"the last line has no line end and is the only measurement of exposure {shown_cell(str(out.frame.iloc[i]))} "
            f"({out.band.iloc[i]}), while other exposures have up to {int(others.max())}: the file looks cut short; "
            f"copy it again (if it is complete, end its last line with a line end)"
        )
