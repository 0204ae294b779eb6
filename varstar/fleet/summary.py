"""The fleet at a glance: one row per target, with a short reason when it needs attention.

Read from each archive's stored results (nights, period history, timings, the
last night's report, comparison-star statuses) and from the last fleet
ingest's failures; nothing is computed again and nothing is written.

"Needs attention" (thresholds are our choice unless a source is named):

- the latest period differs from the previous analysis (same star and bands) by
  more than :data:`PERIOD_CHANGE_SIGMA` combined standard errors (3σ, common practice);
- a comparison star was rejected as variable on the last night after being kept
  on the previous night of that band (it began to vary);
- most exposures of the last night are flagged (more than :data:`FLAGGED_FRACTION`);
- a check star's scatter on the last night is more than :data:`CHECK_RMS_RATIO`
  times the scatter its errors predict;
- the last fleet ingest failed for the target;
- the archive cannot be read.
"""

from __future__ import annotations

import math
import os
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import VarstarError
from .folder import FleetSpec, FleetEntry, as_fleet

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

PERIOD_CHANGE_SIGMA = 3.0
FLAGGED_FRACTION = 0.5
CHECK_RMS_RATIO = 2.0

#: The summary's columns, in order.
SUMMARY_COLUMNS = ("target", "archive", "n_nights", "last_night", "last_ingested_utc", "period", "period_err",
                   "period_change_sigma", "o_minus_c", "o_minus_c_trend", "o_minus_c_trend_err", "n_timings",
                   "check_rms_ratio", "check_star", "comparisons_rejected", "flagged_fraction", "last_ingest_error",
                   "attention")


def period_change(periods: Any, star: str) -> tuple[float, float, float]:
    """The latest period of ``star``, its error, and its change against the previous analysis of the same
    bands in combined standard errors (NaN when there is no previous one or no error)."""
    mine = periods[periods["star"] == star] if len(periods) else periods
    if not len(mine):
        return math.nan, math.nan, math.nan
    last = mine.iloc[-1]
    p, e = float(last["period"]), float(last["period_err"])
    before = mine.iloc[:-1]
    before = before[before["bands"] == last["bands"]]
    if not len(before):
        return p, e, math.nan
    prev = before.iloc[-1]
    s = math.hypot(e, float(prev["period_err"]))
    return p, e, (p - float(prev["period"])) / s if s > 0 else math.nan


def o_minus_c_trend(timings: Any) -> tuple[float, float, float, int]:
    """The latest O − C (days), the weighted straight-line slope of O − C against cycle (days per cycle) and
    its standard error, and the number of timings; the trend only over timings against the ephemeris of the
    latest one, and only with two or more distinct cycles (NaN otherwise)."""
    if not len(timings):
        return math.nan, math.nan, math.nan, 0
    t = timings.sort_values("bjd_tdb")
    latest = float(t["o_minus_c"].iloc[-1])
    same = t[t["ephemeris"] == t["ephemeris"].iloc[-1]]
    x, y = same["cycle"].to_numpy(float), same["o_minus_c"].to_numpy(float)
    err = same["err"].to_numpy(float)
    ok = np.isfinite(x) & np.isfinite(y) & np.isfinite(err) & (err > 0)
    x, y, w = x[ok], y[ok], 1.0 / err[ok] ** 2
    if np.unique(x).size < 2:
        return latest, math.nan, math.nan, len(t)
    # weighted least squares y = a + b x (its textbook normal equations)
    sw, sx, sy = w.sum(), (w * x).sum(), (w * y).sum()
    sxx, sxy = (w * x * x).sum(), (w * x * y).sum()
    det = sw * sxx - sx * sx
    if det <= 0:
        return latest, math.nan, math.nan, len(t)
    return latest, float((sw * sxy - sx * sy) / det), float(math.sqrt(sw / det)), len(t)


def check_stars(report: dict[str, Any]) -> tuple[float, str]:
    """The largest check-star ratio rms / predicted_rms of a night report, and which star and band."""
    best, which = math.nan, ""
    for band, b in sorted(report.get("bands", {}).items()):
        for sid, c in sorted((b.get("check_stars") or {}).items()):
            rms, pred = c.get("rms"), c.get("predicted_rms")
            if rms is None or pred is None or not pred or not math.isfinite(rms) or not math.isfinite(pred):
                continue
            ratio = float(rms) / float(pred)
            if not ratio <= best:  # also when best is NaN
                best, which = ratio, f"{sid} ({band})"
    return best, which


def began_to_vary(report: dict[str, Any], comparisons: Any, night: str) -> tuple[list[str], list[str]]:
    """Comparison stars rejected on ``night`` (``"C4 (V: variable)"``), and those of them rejected as variable
    after being kept on the previous night of the same band."""
    rejected, began = [], []
    for band, b in sorted(report.get("bands", {}).items()):
        for r in b.get("comparisons_rejected", []):
            rejected.append(f"{r['star']} ({band}: {r['status']})")
            if r["status"] != "variable" or not len(comparisons):
                continue
            rows = comparisons[(comparisons["star"] == r["star"]) & (comparisons["band"] == band)
                               & (comparisons["night"] < night)]
            if len(rows) and rows.sort_values("night")["status"].iloc[-1] == "kept":
                began.append(f"{r['star']} ({band})")
    return rejected, began


def _row(entry: FleetEntry, failures: dict[str, dict[str, str]]) -> dict[str, Any]:
    from ..workflows.archive import open_archive

    row: dict[str, Any] = {c: math.nan for c in SUMMARY_COLUMNS}
    row.update(target=entry.name, archive=entry.archive.name, n_nights=0, last_night="", last_ingested_utc="",
               n_timings=0, check_star="", comparisons_rejected="", last_ingest_error="")
    reasons: list[str] = []
    failed = failures.get(entry.archive.name)
    if failed:
        row["last_ingest_error"] = failed["error"]
        reasons.append(f"last ingest failed ({failed['error_kind'] or 'error'})")
    try:
        arch = open_archive(entry.archive)
        target = arch.target
        row["target"] = target.name
        nights = arch.nights()
        row["n_nights"] = int(len(nights))
        p, e, change = period_change(arch.periods(), target.target_star.id)
        row.update(period=p, period_err=e, period_change_sigma=change)
        if abs(change) > PERIOD_CHANGE_SIGMA:
            reasons.append(f"period changed by {change:+.1f} sigma")
        oc, slope, slope_err, n_t = o_minus_c_trend(arch.timings())
        row.update(o_minus_c=oc, o_minus_c_trend=slope, o_minus_c_trend_err=slope_err, n_timings=n_t)
        if len(nights):
            last = nights.sort_values("night").iloc[-1]
            label = str(last["night"])
            row.update(last_night=label, last_ingested_utc=str(nights["ingested_utc"].max()))
            n_exp = int(last["n_exposures"])
            frac = int(last["n_flagged"]) / n_exp if n_exp else math.nan
            row["flagged_fraction"] = frac
            if frac > FLAGGED_FRACTION:
                reasons.append(f"{frac:.0%} of the exposures of {label} flagged")
            report = arch.night_report(label)
            ratio, which = check_stars(report)
            row.update(check_rms_ratio=ratio, check_star=which)
            if ratio > CHECK_RMS_RATIO:
                reasons.append(f"check star {which} scatters {ratio:.1f} times its predicted rms")
            rejected, began = began_to_vary(report, arch.comparisons(last_nights=2), label)
            row["comparisons_rejected"] = ", ".join(rejected)
            if began:
                reasons.append(f"comparison star {', '.join(began)} began to vary")
    except VarstarError as exc:
        reasons.append(f"archive unreadable: {exc}")
    row["attention"] = "; ".join(reasons)
    return row


def fleet_summary(fleet: FleetSpec | str | os.PathLike[str]) -> pd.DataFrame:
    """One row per target: the state of its archive and whether it needs attention (see the module docstring).

    Columns: :data:`SUMMARY_COLUMNS` — ``target`` (name), ``archive`` (file
    name), ``n_nights``, ``last_night``, ``last_ingested_utc``, ``period`` and
    ``period_err`` (days; the latest analysis of the target star),
    ``period_change_sigma`` (against the previous analysis of the same bands),
    ``o_minus_c`` (latest, days), ``o_minus_c_trend`` and ``o_minus_c_trend_err``
    (days per cycle), ``n_timings``, ``check_rms_ratio`` (the largest check-star
    rms / predicted rms of the last night) and ``check_star``,
    ``comparisons_rejected`` (on the last night), ``flagged_fraction`` (of the
    last night's exposures), ``last_ingest_error``, ``attention`` (reasons joined
    by ``"; "``, empty when none).  NaN where a value does not exist yet.
    """
    import pandas as pd

    from .runs import read_failures

    fl = as_fleet(fleet)
    failures = read_failures(fl)
    return pd.DataFrame([_row(e, failures) for e in fl.entries], columns=list(SUMMARY_COLUMNS))
