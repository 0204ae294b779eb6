"""The standard system on an archive: colour references, transforming nights, the field's colours.

:func:`standardise_night` puts one night's points on the standard system with
the coefficients in force (:mod:`varstar.transform`); :func:`transform_archive`
does it for every stored night in one atomic change and records the coefficient
set; :func:`field_diagram` gives the night's stars for a colour-magnitude diagram.
"""

from __future__ import annotations

import math
from pathlib import Path
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import ArchiveError, InputError
from ..results import Result
from ..target import Target
from .reduce import CATALOGUE_ERR_ASSUMED, STD_COLUMNS, NightReduction, sources_of

if TYPE_CHECKING:  # pragma: no cover
    from ..archive import ArchiveStore
    from ..transform import Coefficients, NightReference


def night_reference_from_tables(
    target: Target,
    coeffs: Coefficients,
    comparisons: pd.DataFrame,
    ensembles: pd.DataFrame,
) -> NightReference:
    """The colour reference of one night from its comparison-star and ensemble tables.

    ``comparisons`` and ``ensembles`` hold one night (columns as
    :data:`COMPARISON_COLUMNS` and :data:`ENSEMBLE_COLUMNS`); both bands must be there.
    """
    from ..transform import night_reference

    comps = target.stars_with_role("comparison")
    ids = [s.id for s in comps]

    def band_values(band: str, col: str) -> np.ndarray:
        sub = comparisons[comparisons["band"] == band].set_index("star")
        return sub[col].reindex(ids).to_numpy(dtype=float)

    def cat(band: str, err: bool = False) -> np.ndarray:
        if err:  # a magnitude without its error: the same assumed error as the ensemble's (see reduce_night)
            return np.array([s.catalog_err.get(band, CATALOGUE_ERR_ASSUMED if band in s.catalog else np.nan)
                             for s in comps], dtype=float)
        return np.array([s.catalog.get(band, np.nan) for s in comps], dtype=float)

    ens = ensembles.set_index("band")
    return night_reference(
        cat("B"), cat("B", True), cat("V"), cat("V", True),
        cat("B") + band_values("B", "offset"), band_values("B", "mean_err"),
        cat("V") + band_values("V", "offset"), band_values("V", "mean_err"),
        band_values("V", "tie_weight"),
        coeffs,
        kappa_b=float(ens.loc["B", "colour_extinction"]),
        kappa_b_err=float(ens.loc["B", "colour_extinction_err"]),
        kappa_v=float(ens.loc["V", "colour_extinction"]),
        kappa_v_err=float(ens.loc["V", "colour_extinction_err"]),
        cref_b=float(ens.loc["B", "colour_reference"]),
        cref_v=float(ens.loc["V", "colour_reference"]),
        cal_err_b=float(ens.loc["B", "calibration_err"]),
        cal_err_v=float(ens.loc["V", "calibration_err"]),
    )


def standardise_night(
    target: Target,
    coeffs: Coefficients,
    max_gap_d: float,
    points: pd.DataFrame,
    airmass: np.ndarray,
    comparisons: pd.DataFrame,
    ensembles: pd.DataFrame,
) -> tuple[dict[str, np.ndarray], list[str]]:
    """Standard-system values for the points of one night.

    Parameters
    ----------
    points
        The night's light-curve points (columns ``star, band, bjd_tdb, mag,
        mag_err, cal_err, quality``), any order.
    airmass
        Airmass of each point's exposure (same order as ``points``).

    Returns
    -------
    (columns, notes)
        ``columns`` maps each of :data:`STD_COLUMNS` but ``transformation`` to an
        array aligned with ``points`` (NaN where not transformed); ``notes`` says
        why points were left untransformed.  Only good points (quality 0) are
        transformed and serve as the other band's samples.
    """
    from ..transform import transform_target

    n = len(points)
    out = {k: np.full(n, np.nan) for k in STD_COLUMNS if k != "transformation"}
    bands = set(ensembles["band"])
    if not {"B", "V"} <= bands:
        missing = " and ".join(sorted({"B", "V"} - bands))
        return out, [f"not transformed: no {missing} exposures this night (the transformation needs both B and V)"]
    ref = night_reference_from_tables(target, coeffs, comparisons, ensembles)
    notes: list[str] = []
    star = points["star"].to_numpy()
    band = points["band"].to_numpy()
    good = points["quality"].to_numpy() == 0
    t = points["bjd_tdb"].to_numpy()
    mag = points["mag"].to_numpy()
    err = points["mag_err"].to_numpy()
    for sid in pd.unique(star):
        iv = np.flatnonzero((star == sid) & (band == "V") & good)
        ib = np.flatnonzero((star == sid) & (band == "B") & good)
        if iv.size == 0 or ib.size == 0:
            continue
        res = transform_target(t[iv], mag[iv], err[iv], airmass[iv], t[ib], mag[ib], err[ib], airmass[ib], ref, coeffs, max_gap_d=max_gap_d)
        for idx, tb in ((iv, res.V), (ib, res.B)):
            out["mag_std"][idx] = tb.mag
            out["mag_std_err"][idx] = tb.mag_err
            # The night's systematic part: calibration tie, reference colour, coefficients.
            out["cal_std_err"][idx] = tb.cal_err
            out["bv_std"][idx] = tb.bv
            out["bv_std_err"][idx] = tb.bv_err
            out["bv_std_sys_err"][idx] = tb.bv_sys_err
            out["colour_gap_d"][idx] = np.where(tb.ok, tb.gap_d, np.nan)
        refused = int((~res.V.ok).sum() + (~res.B.ok).sum())
        if refused:
            notes.append(
                f"{sid}: {refused} exposure(s) not transformed: no exposure of the other band within "
                f"{max_gap_d * 1440:.0f} min"
            )
        if not (res.V.ok.any() or res.B.ok.any()):
            notes.append(f"{sid}: B and V exposures never come within {max_gap_d * 1440:.0f} min of each other")
    return out, notes


def apply_to_reduction(target: Target, red: NightReduction, active: tuple[int, Coefficients, float]) -> None:
    """Fill the standard-system columns of a fresh night (at ingest)."""
    tid, coeffs, gap = active
    p = red.points
    airmass = red.exposures["airmass"].to_numpy()[p["exposure"].to_numpy()]
    cols, notes = standardise_night(target, coeffs, gap, p, airmass, red.comparisons, red.ensembles)
    if {"B", "V"} <= set(red.ensembles["band"]) and not np.isfinite(cols["mag_std"]).any():
        raise InputError(
            f"{sources_of(red.raw)} (night {red.label}): the B and V exposures never come within {gap * 1440:.0f} min of each other, so no "
            f"colour can be paired for the transformation; check that the files belong to the same night, or raise "
            f"[transformation] max_gap_minutes"
        )
    for k, v in cols.items():
        p[k] = v
    p["transformation"] = np.where(np.isfinite(cols["mag_std"]), tid, -1)
    red.report["transformation"] = _transformation_summary(coeffs, gap, p, notes, target)


def _transformation_summary(coeffs: Coefficients, gap: float, p: pd.DataFrame, notes: list[str], target: Target) -> dict[str, Any]:
    done = np.isfinite(p["mag_std"].to_numpy())
    tid = target.target_star.id
    tgt = p[(p["star"] == tid) & done]
    summary: dict[str, Any] = {
        "coefficients": coeffs.to_dict(),
        "max_gap_minutes": gap * 1440.0,
        "n_transformed": int(done.sum()),
        "n_points": int(len(p)),
        "notes": notes,
    }
    if len(tgt):
        summary["target"] = {
            "bv_min": float(tgt["bv_std"].min()),
            "bv_max": float(tgt["bv_std"].max()),
            "median_bv_err": float(tgt["bv_std_err"].median()),
            "by_band": {
                str(b): {"mag_min": float(g["mag_std"].min()), "mag_max": float(g["mag_std"].max()),
                         "mean_shift": float((g["mag_std"] - g["mag"]).mean())}
                for b, g in tgt.groupby("band")
            },
        }
    return summary


@dataclass(frozen=True)
class TransformResult(Result):
    """What :func:`transform_archive` did: the coefficient set recorded and, per night, the points transformed."""

    archive: str
    transformation: int
    coefficients: Coefficients
    max_gap_minutes: float
    nights: tuple[dict[str, Any], ...]


def transform_archive(
    archive_path: str | Path,
    coeffs: Coefficients,
    max_gap_d: float,
    *,
    timeout_s: float = 30.0,
    progress: Callable[[int, int], None] | None = None,
) -> TransformResult:
    """Apply (new) coefficients to every night of an archive, all or nothing.

    The coefficient set is added to the archive's transformation history and
    every light-curve point's standard-system columns are recomputed with it;
    the untransformed values are never touched.  ``progress(done, total)`` is
    told of each night done.
    """
    from ..archive import open_archive

    arch = open_archive(archive_path)
    target = arch.target
    per_night: list[dict[str, Any]] = []
    with arch.writing(timeout_s=timeout_s) as w:
        nights = w.nights()
        if nights.empty:
            raise InputError(f"{arch.path}: no nights to transform yet; ingest some first")
        pts, comps, ens = w.night_tables()
        tid = w.add_transformation(coeffs, max_gap_d)
        new = {k: np.full(len(pts), -1 if k == "transformation" else np.nan) for k in STD_COLUMNS}
        night_of_point = pts["night"].to_numpy()
        for k_night, (night_id, label) in enumerate(zip(nights["night"], nights["label"])):
            if progress is not None:
                progress(k_night, len(nights))
            rows = np.flatnonzero(night_of_point == night_id)
            sub = pts.iloc[rows]
            cols, notes = standardise_night(
                target, coeffs, max_gap_d, sub, sub["airmass"].to_numpy(),
                comps[comps["night"] == night_id], ens[ens["night"] == night_id],
            )
            for k, v in cols.items():
                new[k][rows] = v
            new["transformation"][rows] = np.where(np.isfinite(cols["mag_std"]), tid, -1)
            per_night.append({"night": str(label), "n_points": int(rows.size),
                              "n_transformed": int(np.isfinite(cols["mag_std"]).sum()), "notes": notes})
        if not np.isfinite(new["mag_std"]).any():
            raise InputError(
                f"{arch.path}: no night has B and V exposures that can be paired within {max_gap_d * 1440:.0f} min; "
                f"nothing was transformed and the archive is unchanged"
            )
        w.set_standard_columns(new)
    return TransformResult(str(arch.path), tid, coeffs, max_gap_d * 1440.0, tuple(per_night))


def field_diagram(arch: ArchiveStore, night: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The stars of one night on the standard system, for a colour-magnitude diagram.

    Returns
    -------
    (field, track)
        ``field``: one row per comparison and check star (``star, role, status,
        V, V_err, bv, bv_err``); comparison stars from their nightly mean
        magnitudes put through the same transformation as the target, check
        stars from their transformed points.  ``track``: the target's
        transformed V points of the night.
    """
    from ..transform import transform_target

    target = arch.target
    active = arch.active_transformation()
    if active is None:
        raise ArchiveError(f"{arch.path}: no transformation coefficients yet; see 'varstar transform'")
    _, coeffs, gap = active
    arch.require_night(night)
    comps = arch.comparisons()
    comps = comps[comps["night"] == night]
    ens = arch.ensembles()
    ens = ens[ens["night"] == night]
    if not {"B", "V"} <= set(ens["band"]):
        raise ArchiveError(f"{arch.path}: night {night} lacks B or V exposures: no colours")
    ref = night_reference_from_tables(target, coeffs, comps, ens)
    exp = arch.exposures()
    x_mean = float(exp.loc[exp["night"] == night, "airmass"].mean())
    rows = []
    for s in target.stars_with_role("comparison"):
        cb = comps[(comps["star"] == s.id) & (comps["band"] == "B")]
        cv = comps[(comps["star"] == s.id) & (comps["band"] == "V")]
        if cb.empty or cv.empty or not {"B", "V"} <= set(s.catalog):
            continue
        b = s.catalog["B"] + float(cb["offset"].iloc[0])
        v = s.catalog["V"] + float(cv["offset"].iloc[0])
        res = transform_target(
            [0.0], [v], [float(cv["mean_err"].iloc[0])], [x_mean], [0.0], [b], [float(cb["mean_err"].iloc[0])], [x_mean],
            ref, coeffs, max_gap_d=gap,
        )
        statuses = [str(cv["status"].iloc[0]), str(cb["status"].iloc[0])]
        status = next((st for st in statuses if st != "kept"), "kept")
        rows.append({"star": s.id, "role": "comparison", "status": status, "V": float(res.V.mag[0]),
                     "V_err": float(res.V.mag_err[0]), "bv": float(res.V.bv[0]), "bv_err": float(res.V.bv_err[0])})
    for s in target.stars_with_role("check"):
        lc = arch.lightcurve(band="V", star=s.id)
        lc = lc[(lc["night"] == night) & lc["transformed"]]
        if lc.empty:
            continue
        n = len(lc)
        rows.append({"star": s.id, "role": "check", "status": "kept", "V": float(lc["mag"].mean()),
                     "V_err": float(lc["mag"].std(ddof=1) / math.sqrt(n)) if n > 1 else float(lc["mag_err"].iloc[0]),
                     "bv": float(lc["bv"].mean()),
                     "bv_err": float(lc["bv"].std(ddof=1) / math.sqrt(n)) if n > 1 else float(lc["bv_err"].iloc[0])})
    track = arch.lightcurve(band="V")
    track = track[(track["night"] == night) & track["transformed"]].reset_index(drop=True)
    return pd.DataFrame(rows, columns=["star", "role", "status", "V", "V_err", "bv", "bv_err"]), track
