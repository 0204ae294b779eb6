"""Text files of a simulated series: long- and wide-form measurement CSV, the truth
CSV and JSON, the target TOML (:func:`series_files`, pure), and
:func:`write_series`, the only function of :mod:`varstar.simulate` that writes.

Formatting is deterministic (fixed decimals, empty cells for missing values,
never a negative zero), so the same series gives the same bytes.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .catalogues import target_toml
from .scenario import MEASUREMENT_COLUMNS, TRUTH_FILE_COLUMNS, Scenario, SimulatedSeries

__all__ = ["measurements_csv", "series_files", "to_wide", "truth_csv", "wide_csv", "write_series"]


def _col_text(values: np.ndarray, fmt: str) -> np.ndarray:
    """Format a float column with ``fmt``; NaN -> empty; '-0.000' -> '0.000'."""
    v = np.asarray(values, dtype=float)
    fin = np.isfinite(v)
    out = np.full(v.shape, "", dtype=object)
    if fin.any():
        s = np.char.mod(fmt, v[fin])
        neg0 = np.char.startswith(s, "-") & (np.char.strip(s, "-0.") == "")
        s = np.where(neg0, np.char.lstrip(s, "-"), s)
        out[fin] = s.astype(object)
    return out


#: Print format of each numeric column of a long-form measurement CSV.
_LONG_FORMATS = {"jd": "%.6f", "mag": "%.4f", "mag_err": "%.5f", "airmass": "%.4f", "exptime": "%g"}


def measurements_csv(df: pd.DataFrame) -> str:
    """Long-form measurement table as CSV text (deterministic formatting)."""
    cols = [c for c in MEASUREMENT_COLUMNS if c in df.columns]
    out = pd.DataFrame({c: (_col_text(df[c].to_numpy(), _LONG_FORMATS[c]) if c in _LONG_FORMATS else df[c].astype(str).to_numpy(dtype=object))
                        for c in cols})
    return out.to_csv(index=False, lineterminator="\n")


def to_wide(df: pd.DataFrame, star_ids: Sequence[str]) -> pd.DataFrame:
    """Long-form table -> wide form: one row per exposure (``jd, band, exptime, frame``),
    ``<id>`` and ``<id>_err`` per star.  Flagged measurements become empty cells,
    as a wide-form producer would leave them."""
    good = df[df["flag"] == 0]
    exp = df.drop_duplicates("frame")[["jd", "band", "exptime", "frame"]].reset_index(drop=True)
    pos = pd.Index(exp["frame"]).get_indexer(good["frame"])
    star_pos = pd.Index(list(star_ids)).get_indexer(good["star"])
    mag = np.full((len(exp), len(star_ids)), np.nan)
    err = np.full_like(mag, np.nan)
    mag[pos, star_pos] = good["mag"].to_numpy()
    err[pos, star_pos] = good["mag_err"].to_numpy()
    cols: dict[str, Any] = {c: exp[c].to_numpy() for c in exp.columns}
    for j, s in enumerate(star_ids):
        cols[s] = mag[:, j]
        cols[f"{s}_err"] = err[:, j]
    return pd.DataFrame(cols)


def wide_csv(wide: pd.DataFrame, star_ids: Sequence[str]) -> str:
    """Wide-form table as CSV text (deterministic formatting, empty cells for missing)."""
    cols: dict[str, Any] = {
        "jd": _col_text(wide["jd"].to_numpy(), "%.6f"),
        "band": wide["band"].astype(str).to_numpy(dtype=object),
        "exptime": _col_text(wide["exptime"].to_numpy(), "%g"),
        "frame": wide["frame"].astype(str).to_numpy(dtype=object),
    }
    for s in star_ids:
        cols[s] = _col_text(wide[s].to_numpy(), "%.4f")
        cols[f"{s}_err"] = _col_text(wide[f"{s}_err"].to_numpy(), "%.5f")
    return pd.DataFrame(cols).to_csv(index=False, lineterminator="\n")


def truth_csv(truth: pd.DataFrame) -> str:
    """The truth table's file columns (``jd, bjd_tdb, band, star, role, mag_true, airmass, cloud``) as CSV text."""
    cols = {
        "jd": _col_text(truth["jd"].to_numpy(), "%.6f"),
        "bjd_tdb": _col_text(truth["bjd_tdb"].to_numpy(), "%.6f"),
        "band": truth["band"].to_numpy(dtype=object),
        "star": truth["star"].to_numpy(dtype=object),
        "role": truth["role"].to_numpy(dtype=object),
        "mag_true": _col_text(truth["mag_true"].to_numpy(), "%.4f"),
        "airmass": _col_text(truth["airmass"].to_numpy(), "%.4f"),
        "cloud": truth["cloud"].astype(int).astype(str).to_numpy(dtype=object),
    }
    return pd.DataFrame(cols).to_csv(index=False, lineterminator="\n")


def series_files(series: SimulatedSeries, scenario: Scenario, wide_nights: Sequence[int] | None = None) -> dict[str, str]:
    """File name -> text of everything :func:`write_series` writes (pure; no I/O)."""
    wide = set([scenario.wide_form_night] if wide_nights is None and scenario.wide_form_night is not None else (wide_nights or ()))
    star_ids = [s.id for s in scenario.stars]
    files: dict[str, str] = {"target.toml": target_toml(scenario)}
    names = {}
    for i, (ev, df) in enumerate(zip(series.evenings, series.nights)):
        if i in wide:
            name = f"night-{ev}-wide.csv"
            files[name] = wide_csv(to_wide(df, star_ids), star_ids)
        else:
            name = f"night-{ev}.csv"
            files[name] = measurements_csv(df)
        names[ev] = name
    files["truth.csv"] = truth_csv(series.truth)
    info = dict(series.info)
    info["files"] = {"target": "target.toml", "nights": names, "truth": "truth.csv",
                     "truth_columns": list(TRUTH_FILE_COLUMNS)}
    info["scenario"] = scenario.to_dict()
    files["truth.json"] = json.dumps(info, indent=2, ensure_ascii=False) + "\n"
    return files


def write_series(series: SimulatedSeries, scenario: Scenario, directory: str | Path,
                 wide_nights: Sequence[int] | None = None) -> list[Path]:
    """Write ``target.toml``, one ``night-YYYY-MM-DD.csv`` per night (``-wide.csv`` for the
    wide-form night(s), by default ``scenario.wide_form_night``), ``truth.csv`` and
    ``truth.json`` into ``directory``.  Returns the paths written."""
    d = Path(directory)
    d.mkdir(parents=True, exist_ok=True)
    written = []
    for name, text in series_files(series, scenario, wide_nights).items():
        p = d / name
        p.write_bytes(text.encode("utf-8"))
        written.append(p)
    return written
