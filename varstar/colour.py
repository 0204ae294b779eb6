"""Colour science from a transformed archive: B - V curve, temperature, field diagram.

A thin shell over :mod:`varstar.transform` and the archive: it gathers the
transformed points and the nightly ensemble tables and returns plain tables and
JSON-ready summaries for the CLI and scripts.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .errors import ArchiveError, InputError
from .transform import ballesteros_temperature

if TYPE_CHECKING:  # pragma: no cover
    from .archive import Archive
    from .target import Target

#: What a temperature from an observed colour means without a colour excess.
REDDENING_CAUTION = (
    "interstellar reddening makes an observed B - V redder, so without E(B-V) these temperatures are lower "
    "bounds; give [target] ebv (and ebv_err) to deredden"
)


def ephemeris(target: "Target") -> tuple[float, float] | None:
    """(epoch BJD_TDB, period in days) from an optional ``[ephemeris]`` table, for phasing.

    Read by :func:`varstar.timings.ephemeris_from_table`, so the checks (a plausible
    BJD epoch, a positive period, known keys) are the same as for timings.
    """
    from .timings import ephemeris_from_table

    table = target.extra.get("ephemeris")
    if table is None:
        return None
    if not isinstance(table, dict):
        raise InputError(f"{target.source}: [ephemeris] must be a table")
    eph = ephemeris_from_table(table, f"{target.source}: [ephemeris]")
    return eph.epoch, eph.period


def colour_summary(lc: pd.DataFrame, target: "Target") -> dict[str, Any]:
    """B - V range and effective temperature (Ballesteros 2012) of a transformed light curve.

    Parameters
    ----------
    lc
        :meth:`Archive.lightcurve` output (both bands); only points with a
        standard colour count.
    """
    d = lc[np.isfinite(lc["bv"].to_numpy())]
    if d.empty:
        raise ArchiveError(
            "no transformed points with a colour: give transformation coefficients ([transformation] in the target "
            "file, or 'varstar transform') and observe B and V"
        )
    ebv, ebv_err = (target.ebv, target.ebv_err) if target.ebv is not None else (0.0, 0.0)
    bv = d["bv"].to_numpy()
    bv_err = d["bv_err"].to_numpy()
    temp, temp_err = ballesteros_temperature(bv, bv_err, ebv, ebv_err)
    w = 1.0 / bv_err**2
    mean_bv = float(np.sum(w * bv) / np.sum(w))
    # The mean colour's error is dominated by the nights' systematic part (comparison
    # stars' catalogue colours, mu): take the typical one, not only the statistical error.
    sys = float(np.nanmedian(d["bv_sys_err"])) if "bv_sys_err" in d else 0.0
    mean_bv_err = math.sqrt(1.0 / np.sum(w) + sys**2)
    t_mean, t_mean_err = ballesteros_temperature(mean_bv, mean_bv_err, ebv, ebv_err)
    hot, cool = int(np.nanargmin(bv)), int(np.nanargmax(bv))
    out: dict[str, Any] = {
        "star": str(d["star"].iloc[0]),
        "n_points": int(len(d)),
        "bv_mean": mean_bv,
        "bv_mean_err": mean_bv_err,
        "bv_min": float(bv[hot]),
        "bv_min_err": float(bv_err[hot]),
        "bv_max": float(bv[cool]),
        "bv_max_err": float(bv_err[cool]),
        "ebv": target.ebv,
        "ebv_err": target.ebv_err if target.ebv is not None else None,
        "temperature_method": "Ballesteros (2012, EPL 97, 34008) black-body relation",
        "teff_mean_k": float(t_mean),
        "teff_mean_err_k": float(t_mean_err),
        "teff_max_k": float(temp[hot]),
        "teff_max_err_k": float(temp_err[hot]),
        "teff_min_k": float(temp[cool]),
        "teff_min_err_k": float(temp_err[cool]),
        "dereddened": target.ebv is not None,
    }
    if target.ebv is None:
        out["caution"] = REDDENING_CAUTION
    eph = ephemeris(target)
    if eph is not None:
        out["ephemeris"] = {"epoch": eph[0], "period": eph[1]}
    return out


def phases(bjd: np.ndarray, target: "Target") -> np.ndarray | None:
    """Phase in [0, 1) from the ``[ephemeris]`` table, or None without one."""
    eph = ephemeris(target)
    if eph is None:
        return None
    return np.mod((np.asarray(bjd, float) - eph[0]) / eph[1], 1.0)


def field_diagram(arch: "Archive", night: str) -> tuple[pd.DataFrame, pd.DataFrame]:
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
    from .night import night_reference_from_tables
    from .transform import transform_target

    from .night import active_transformation

    target = arch.target
    with arch._open() as f:
        active = active_transformation(f)
    if active is None:
        raise ArchiveError(f"{arch.path}: no transformation coefficients yet; see 'varstar transform'")
    _, coeffs, gap = active
    comps = arch.comparisons()
    comps = comps[comps["night_label"] == night]
    if comps.empty:
        raise ArchiveError(f"{arch.path}: no night '{night}' (see 'varstar summary')")
    ens = arch.ensembles()
    ens = ens[ens["night_label"] == night]
    if not {"B", "V"} <= set(ens["band"]):
        raise ArchiveError(f"{arch.path}: night {night} lacks B or V exposures: no colours")
    ref = night_reference_from_tables(target, coeffs, comps, ens)
    exp = arch.exposures()
    x_mean = float(exp.loc[exp["night_label"] == night, "airmass"].mean())
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
                     "V_err": float(res.V.mag_err[0]), "bv": float(res.V.colour[0]), "bv_err": float(res.V.colour_err[0])})
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
