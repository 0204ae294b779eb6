"""The facts behind a simulated series, as JSON-safe values (``SimulatedSeries.info``,
written to ``truth.json``): the target's and comparisons' variability, colour
terms and transformation, extinction by night, clouds, flagged, missing and
lost rows, and counts.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .scenario import Scenario

__all__ = ["series_info"]


def _r(x: float, nd: int = 6) -> float:
    """``x`` rounded to ``nd`` decimals as a plain float."""
    return float(round(float(x), nd))


def _cloud_reports(scenario: Scenario, truth: pd.DataFrame, per_exp: pd.DataFrame, evenings: tuple[str, ...],
                   thick: np.ndarray) -> list[dict[str, Any]]:
    """One entry per cloud passage: its frames, extinction range, thick frames and the stars lost."""
    thick_frames = set(per_exp["frame"].to_numpy()[thick])
    clouds = []
    for c in scenario.clouds:
        sel = per_exp[(per_exp["night"] == evenings[c.night]) & per_exp["cloud"]]
        lost = truth[(truth["night"] == evenings[c.night]) & truth["cloud"] & (truth["status"] == "lost")]
        clouds.append({
            "night": evenings[c.night],
            "n_frames": int(len(sel)),
            "first_frame": str(sel["frame"].iloc[0]) if len(sel) else None,
            "last_frame": str(sel["frame"].iloc[-1]) if len(sel) else None,
            "frames": [str(f) for f in sel["frame"]],
            "cloud_mag_range": [_r(sel["cloud_mag"].min(), 3), _r(sel["cloud_mag"].max(), 3)] if len(sel) else None,
            "thick_frames": [str(f) for f in sel["frame"] if f in thick_frames],
            "stars_lost": [{"frame": str(f), "star": str(s)} for f, s in zip(lost["frame"], lost["star"])],
            "passage": c.to_dict(),
        })
    return clouds


def _transformation(scenario: Scenario) -> dict[str, float]:
    """The true transformation coefficients implied by the colour terms (epsilon from V, mu from B and V)."""
    eps = {b.name: b.colour_term for b in scenario.bands}
    transformation = {}
    if "V" in eps:
        transformation["epsilon"] = _r(-eps["V"])
    if "V" in eps and "B" in eps:
        transformation["mu"] = _r(1.0 / (1.0 + eps["B"] - eps["V"]))
    return transformation


def _night_reports(scenario: Scenario, per_exp: pd.DataFrame, nights: list[pd.DataFrame], evenings: tuple[str, ...],
                   k1_night: np.ndarray, zp_night: np.ndarray) -> list[dict[str, Any]]:
    """One entry per night: exposures, rows, time and airmass range, drawn extinction and zero point, clouds."""
    band_names = [b.name for b in scenario.bands]
    night_info = []
    for i, (ev, df) in enumerate(zip(evenings, nights)):
        pe = per_exp[per_exp["night"] == ev]
        night_info.append({
            "evening": ev,
            "n_exposures": int(len(pe)),
            "n_exposures_by_band": {b: int((pe["band"] == b).sum()) for b in band_names},
            "n_rows": int(len(df)),
            "first_jd": _r(pe["jd"].min()),
            "last_jd": _r(pe["jd"].max()),
            "airmass_range": [_r(pe["airmass"].min(), 4), _r(pe["airmass"].max(), 4)],
            "k1": {b: _r(k1_night[i, j], 4) for j, b in enumerate(band_names)},
            "zero_point_offset": _r(zp_night[i], 4),
            "cloudy": bool(pe["cloud"].any()),
        })
    return night_info


def series_info(scenario: Scenario, truth: pd.DataFrame, nights: list[pd.DataFrame], evenings: tuple[str, ...],
                k1_night: np.ndarray, zp_night: np.ndarray, thick: np.ndarray) -> dict[str, Any]:
    """JSON-safe facts of a simulated series.

    Parameters
    ----------
    scenario
        The simulated scenario.
    truth, nights
        The truth table and the per-night measurement tables of the simulation.
    evenings
        The nights' evening dates.
    k1_night, zp_night
        The drawn first-order extinction (night, band) and zero-point offset (night).
    thick
        Per exposure: inside a thick moment of a cloud passage.
    """
    band_names = [b.name for b in scenario.bands]
    target = next(s for s in scenario.stars if s.role == "target")
    per_exp = truth.drop_duplicates("frame")
    clouds = _cloud_reports(scenario, truth, per_exp, evenings, thick)
    bad = truth[truth["status"].isin(["saturated", "cosmic_ray"])]
    miss = truth[truth["status"] == "missing"]
    lost_all = truth[truth["status"] == "lost"]
    eps = {b.name: b.colour_term for b in scenario.bands}
    variable_comps = [
        {"id": s.id, **s.variability.to_dict()} for s in scenario.stars if s.role != "target" and s.variability is not None
    ]
    night_info = _night_reports(scenario, per_exp, nights, evenings, k1_night, zp_night)
    return {
        "generator": "varstar.simulate.simulate",
        "field": scenario.field_name,
        "invented": True,
        "seed": int(scenario.seed),
        "target": {"id": target.id, **(target.variability.to_dict() if target.variability else {"kind": "constant"}),
                   "mean_mag": {b: _r(target.mean_mag(b), 4) for b in band_names}},
        "variable_comparisons": variable_comps,
        "check_stars": [s.id for s in scenario.stars if s.role == "check"],
        "colour_terms": {b: _r(eps[b]) for b in band_names},
        "transformation": {**_transformation(scenario),
                           "note": "V - v0 = epsilon (B - V) + zp_V and (B - V) = mu (b - v)0 + zp_BV after first- and second-order extinction"},
        "extinction": {"k2": {b.name: b.k2 for b in scenario.bands}, "k1_by_night": {n["evening"]: n["k1"] for n in night_info}},
        "nights": night_info,
        "clouds": clouds,
        "flagged": [{"frame": str(f), "star": str(s), "flag": 1 if st == "saturated" else 2, "reason": str(st)}
                    for f, s, st in zip(bad["frame"], bad["star"], bad["status"])],
        "missing": [{"frame": str(f), "star": str(s)} for f, s in zip(miss["frame"], miss["star"])],
        "counts": {
            "exposures": int(len(per_exp)),
            "rows": int(sum(len(n) for n in nights)),
            "rows_flagged": int(len(bad)),
            "rows_missing_at_random": int(len(miss)),
            "rows_lost_below_detection": int(len(lost_all)),
        },
        "noise": {"reported_mag_err": "CCD equation only (Merline & Howell 1995), from the measured counts",
                  "scintillation": f"Young (1967) x {scenario.scintillation_factor}, not in the reported errors",
                  "detection_snr": scenario.detection_snr},
    }
