"""Colour science from a transformed light curve: the B - V curve, its extremes and temperatures.

Computation on a light-curve DataFrame (:meth:`varstar.archive.ArchiveStore.lightcurve`);
the field's colour-magnitude diagram, which needs the stored nightly tables, is
:func:`varstar.workflows.standard.field_diagram`.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .errors import ArchiveError, InputError
from .transform import ballesteros_temperature

if TYPE_CHECKING:  # pragma: no cover
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
            "no transformed points with a colour: put transformation coefficients in force with 'varstar transform "
            "ARCHIVE --coefficients FILE' (a setups file or a fit from 'varstar coefficients') and observe B and V"
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
