"""Lines of text -> a table of cells: comment and blank lines dropped, one CSV row per line checked.

A piece of the file (whole lines, see :mod:`varstar.measurements.stream`) is
turned into a pandas DataFrame with one row per data line: numbers by pandas'
C reader where that is safe, otherwise every cell as text after each line has
been checked to be one row with as many fields as the header.  What the cells
mean is checked later (:mod:`varstar.measurements.validate`).
"""

from __future__ import annotations

import csv
import io
import re

import numpy as np
import pandas as pd

from .header import DELIMITER_NAMES, Header
from .messages import fail

_SKIPPED_LINE = re.compile(r"^[ \t\r]*(#|$)", re.M)


def split_lines(text: str) -> tuple[str, np.ndarray]:
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


def check_fields(body: str, numbers: np.ndarray, source: str, cut_line: int | None = None, sep: str = ",") -> None:
    """Name the first line that is not one CSV row with as many fields as the header.

    A measurement table has one row per line.  pandas would read a quoted cell
    across a line end, take a lone carriage return for a line end and fill the
    missing cells of a short row with empty text (which may be allowed), so the
    lines are checked here; only on the slow path, where the table has empty or
    unusual cells anyway, or when the rows do not match the lines.  The first
    line of ``body`` is the header.  ``cut_line`` is the number of a last line
    without a line end, whose shortness is then explained as a cut.  ``sep`` is
    the table's delimiter (:func:`varstar.measurements.header.delimiter_of`).
    """
    n_header = None
    for k, ln in enumerate(body.split("\n")):
        ln = ln.strip("\r")  # at either end a carriage return is a line-end blank (pandas reads it so)
        if "\r" in ln:
            raise fail(source, int(numbers[k]), "carriage return inside the line (one table row per line; save the file with ordinary line ends)")
        if '"' in ln:
            try:
                n = len(next(csv.reader([ln], delimiter=sep, skipinitialspace=True, strict=True)))
            except csv.Error:
                raise fail(source, int(numbers[k]), "unbalanced double quote (a quoted cell must end on the same line)") from None
        else:
            n = ln.count(sep) + 1
        if n_header is None:
            n_header = n
        elif n != n_header:
            hint = ""
            if cut_line is not None and int(numbers[k]) == cut_line and n < n_header:
                hint = "; it is the last line and has no line end: the file looks cut short (copy it again)"
            raise fail(source, int(numbers[k]), f"{n} fields, but the header has {n_header} (one cell per column, separated by {DELIMITER_NAMES.get(sep, repr(sep))}){hint}")


#: Long-form columns that the fast path reads as numbers.
_LONG_NUMERIC = ("jd", "mag", "mag_err", "airmass", "exptime", "flag")


def read_piece(body: str, numbers: np.ndarray, source: str, plan: Header, cut_line: int | None) -> pd.DataFrame:
    """Read one piece (its first line the placeholder header); numbers by pandas' C reader when that is safe.

    The fast path reads a long-form table's numeric columns as floats.  If any
    of them is not a plain finite number everywhere (an empty cell, text), or a
    text cell is missing (pandas fills the cells of a short row), or the piece
    has quotes or not as many delimiters as its lines need, the piece is read as
    text after its lines are checked, so that validation can tell an empty cell
    from a bad one and name its line.
    """
    sep = plan.sep

    def as_text() -> pd.DataFrame:
        check_fields(body, numbers, source, cut_line, sep)
        try:
            return pd.read_csv(io.StringIO(body), sep=sep, dtype=str, keep_default_na=False, skipinitialspace=True)
        except (pd.errors.ParserError, ValueError) as exc:
            raise fail(source, None, f"cannot read as CSV: {str(exc).strip()[:300]}") from None

    if not plan.long or '"' in body:
        return as_text()
    # Every line one field per column: one count, before pandas sees a row with extra fields (it would
    # make the extra leading cells of a first row an index, at a cost that grows with their number).
    if body.count(sep) != len(numbers) * (len(plan.names) - 1):
        return as_text()
    cols = [f"c{k}" for k in range(len(plan.names))]
    numeric = {c for c, n in zip(cols, plan.names) if n in _LONG_NUMERIC}
    try:
        df = pd.read_csv(io.StringIO(body), sep=sep, dtype={c: (float if c in numeric else str) for c in cols}, skipinitialspace=True,
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

