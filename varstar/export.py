"""Neutral CSV and JSON output.

CSV: one observation a row, plain column names (``bjd_tdb, mag, mag_err, ...``),
dot decimal, no index column.  Text cells that a spreadsheet would read as a
formula (starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return) are
prefixed with a single quote; numbers are written as numbers.

JSON: strict (NaN and infinity become ``null``), numpy types turned into Python
ones, so any JSON parser reads it.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

#: Columns of the exported light curve, in order.
LIGHTCURVE_COLUMNS = (
    "bjd_tdb", "hjd_utc", "jd_utc", "band", "star", "mag", "mag_err", "cal_err", "transformed", "bv", "bv_err",
    "mag_untransformed", "mag_untransformed_err", "epsilon_v", "mu_bv", "k2_bv", "airmass", "night", "frame",
    "quality", "flags",
)


def plain(obj: Any) -> Any:
    """Recursively turn numpy scalars/arrays and non-finite floats into JSON-safe Python values."""
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return plain(obj.tolist())
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        return f if math.isfinite(f) else None
    return obj


def to_json(obj: Any, *, indent: int | None = None) -> str:
    """Strict JSON text of ``obj`` (see :func:`plain`)."""
    return json.dumps(plain(obj), indent=indent, allow_nan=False, ensure_ascii=False)


def _defuse(value: Any) -> Any:
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def safe_text_columns(df: pd.DataFrame) -> pd.DataFrame:
    """Copy of ``df`` whose text cells cannot start a spreadsheet formula."""
    out = df.copy()
    for col in out.columns:
        if out[col].dtype == object or pd.api.types.is_string_dtype(out[col]):
            out[col] = out[col].map(_defuse)
    return out


def write_csv(df: pd.DataFrame, path: str | Path) -> Path:
    """Write ``df`` as neutral CSV, atomically (a partial file never appears at ``path``).

    With ``\n`` line ends the csv writer leaves a carriage return inside a cell
    unquoted, and a spreadsheet starts a new row there (whose first cell could be
    a formula); so when a text cell holds one, every text cell is quoted.
    """
    import csv

    safe = safe_text_columns(df)
    text_cols = [c for c in safe.columns if safe[c].dtype == object or pd.api.types.is_string_dtype(safe[c])]
    has_cr = any(safe[c].astype(str).str.contains("\r", regex=False).any() for c in text_cols)
    text = safe.to_csv(
        index=False, float_format="%.10g", lineterminator="\n",
        quoting=csv.QUOTE_NONNUMERIC if has_cr else csv.QUOTE_MINIMAL,
    )
    return write_atomic(path, text.encode("utf-8"))


def write_atomic(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` via a temporary file and a rename; clear error if impossible."""
    from .errors import OutputError

    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        tmp.write_bytes(data)
        os.replace(tmp, path)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write ({exc.strerror})") from None
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def lightcurve_table(lc: pd.DataFrame) -> pd.DataFrame:
    """The export form of a light curve: fixed column order, times to 1e-8 d."""
    out = lc.loc[:, list(LIGHTCURVE_COLUMNS)].copy()
    for c in ("bjd_tdb", "hjd_utc", "jd_utc"):
        out[c] = out[c].map(lambda v: f"{v:.8f}" if np.isfinite(v) else "")
    return out


# Windows device names, with or without an extension (Microsoft, "Naming Files, Paths, and Namespaces";
# COM0/LPT0 and the superscript digits, which NFKD turns into 1-3, are listed there too; from memory).
_RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(10)), *(f"LPT{i}" for i in range(10))}


def safe_filename(text: str, default: str = "target") -> str:
    """A file-name stem derived from free text (e.g. a target name).

    Keeps letters, digits, ``-``, ``_`` and ``.``; everything else (path
    separators, control characters, spaces) becomes ``_`` and runs of dots
    become one.  Never returns ``.``/``..``-style names, names containing
    ``..``, hidden names or reserved device names.
    """
    import re
    import unicodedata

    norm = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode("ascii")
    stem = re.sub(r"\.{2,}", ".", re.sub(r"[^A-Za-z0-9._-]+", "_", norm)).strip("._-")[:80].strip("._-")
    if not stem or stem.split(".")[0].upper() in _RESERVED:
        stem = f"{default}_{stem}" if stem else default
    return stem


#: Columns of the timings CSV, in order.
TIMINGS_COLUMNS = ("bjd_tdb", "err", "method", "band", "type", "cycle", "o_minus_c", "check_method", "check_bjd_tdb",
                   "check_err", "disagree", "night", "n_points", "note")


def timings_table(timings: list[dict[str, Any]]) -> pd.DataFrame:
    """Timings (as returned by :func:`varstar.analyses.timings_of_archive`) as a neutral table, one a row.

    Times are BJD_TDB, errors and O − C in days; ``disagree`` is 1 where the two
    estimates differ by more than their errors allow.
    """
    df = pd.DataFrame(list(timings), columns=[*TIMINGS_COLUMNS, "new"])[list(TIMINGS_COLUMNS)]
    df["disagree"] = df["disagree"].astype(bool).astype(int)
    for c in ("bjd_tdb", "check_bjd_tdb"):  # full Julian Dates: fixed decimals (1e-6 d = 0.09 s), not 10 digits
        df[c] = df[c].map(lambda v: f"{v:.6f}" if v is not None and np.isfinite(v) else "")
    return df
