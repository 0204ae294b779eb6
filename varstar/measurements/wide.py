"""The wide form (one row per exposure, two columns per star) turned into the long form.

Each filled star cell of a wide-form piece becomes one long-form row, so that
the wide form is validated by the same row checks as the long form
(:func:`varstar.measurements.validate.validate_rows`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .header import PER_EXPOSURE
from .messages import fail
from .validate import flag_mask, numeric_column


def wide_to_long(df: pd.DataFrame, lines: np.ndarray, source: str) -> pd.DataFrame:
    """One long-form row per filled star cell of a wide-form piece (its header checked by :func:`varstar.measurements.header.plan_header`).

    Parameters
    ----------
    df
        The piece's cells as text, varstar's column names.
    lines
        The 1-based line number of each row.
    source
        The file's name, for messages.

    Returns
    -------
    pandas.DataFrame
        The per-exposure columns and ``star``, ``mag``, ``mag_err`` (text), ``line``;
        ordered by line, then star.  Empty if no star cell is filled.

    Raises
    ------
    InputError
        For a star cell that is not a number (but in an exposure marked bad, whose
        cells are not used), or a magnitude without its error (or the reverse) where
        the table has no ``flag`` column.
    """
    stars = [c for c in df.columns if c not in PER_EXPOSURE and not c.endswith("_err")]
    base = df[[c for c in PER_EXPOSURE if c in df.columns]]
    parts = []
    marked = flag_mask(df)  # the flags themselves are checked with the long-form rows
    for s in stars:
        for c in (s, f"{s}_err"):  # here, so that a message names the file's column, not 'mag'
            numeric_column(df, c, lines, source, allow_empty=True, lenient=marked)
        mag = df[s].astype(str).str.strip()
        err = df[f"{s}_err"].astype(str).str.strip()
        lonely = ((mag == "") != (err == "")).to_numpy()
        if lonely.any() and "flag" not in df.columns:
            i = int(np.flatnonzero(lonely)[0])
            empty, given = (f"{s}_err", s) if err.iloc[i] == "" else (s, f"{s}_err")
            raise fail(source, int(lines[i]), f"column '{empty}' is empty but '{given}' is not (give both, or leave both empty)")
        present = (mag != "") | (err != "")
        part = base[present].copy()
        part["star"] = s
        part["mag"] = mag[present]
        part["mag_err"] = err[present]
        part["line"] = lines[present.to_numpy()]
        parts.append(part)
    out = pd.concat(parts, ignore_index=True)
    return out.sort_values(["line", "star"], kind="stable").reset_index(drop=True)
