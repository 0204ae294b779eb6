"""Effective temperature from B - V by the relation of Ballesteros (2012, EPL 97, 34008)."""

from __future__ import annotations

from typing import Any

import numpy as np

from varstar.errors import InputError

__all__ = ["BALLESTEROS_RANGE", "ballesteros_temperature"]

# Validity range of the Ballesteros relation used here (dereddened B - V, mag).
BALLESTEROS_RANGE = (-0.4, 2.0)


def ballesteros_temperature(
    bv: Any, bv_err: Any = None, ebv: Any = 0.0, ebv_err: Any = 0.0
) -> tuple[Any, Any]:
    """Effective temperature from B - V (Ballesteros 2012, EPL 97, 34008).

    ``T = 4600 K [1 / (0.92 c + 1.7) + 1 / (0.92 c + 0.62)]`` with the dereddened
    colour ``c = (B - V) - E(B - V)``.  The relation comes from black bodies seen
    through idealised B and V filters, calibrated on main-sequence stars; it is
    used here only for ``-0.4 <= c <= 2.0`` (about 21,700 K to 3,200 K; the
    second term's pole is at c = -0.67 and the relation is meaningless beyond
    the colours of real stars), NaN outside.

    The error is propagated to first order:
    ``sigma_T = |dT/dc| sqrt(sigma_BV^2 + sigma_E^2)`` with
    ``dT/dc = -4600 K * 0.92 [1/(0.92 c + 1.7)^2 + 1/(0.92 c + 0.62)^2]``.

    Parameters
    ----------
    bv : float or array_like
        Observed B - V (mag).
    bv_err : float or array_like, optional
        Its 1-sigma (default 0).
    ebv, ebv_err : float or array_like
        Colour excess E(B - V) and its 1-sigma.

    Returns
    -------
    (T, T_err)
        Kelvin; floats for scalar input, arrays otherwise.
    """
    scalar = all(np.ndim(a) == 0 for a in (bv, bv_err if bv_err is not None else 0.0, ebv, ebv_err))
    c = np.asarray(bv, dtype=float) - np.asarray(ebv, dtype=float)
    s_bv = np.zeros_like(c) if bv_err is None else np.asarray(bv_err, dtype=float)
    s_e = np.asarray(ebv_err, dtype=float)
    if np.any(np.asarray(s_bv) < 0) or np.any(s_e < 0):
        raise InputError("bv_err and ebv_err must be >= 0")
    inside = (c >= BALLESTEROS_RANGE[0]) & (c <= BALLESTEROS_RANGE[1])
    cc = np.where(inside, c, 0.0)
    d1 = 0.92 * cc + 1.7
    d2 = 0.92 * cc + 0.62
    T = 4600.0 * (1.0 / d1 + 1.0 / d2)
    dT = -4600.0 * 0.92 * (1.0 / d1**2 + 1.0 / d2**2)
    T_err = np.abs(dT) * np.sqrt(s_bv**2 + s_e**2)
    T = np.where(inside, T, np.nan)
    T_err = np.where(inside, T_err, np.nan)
    if scalar:
        return float(T), float(T_err)
    return T, T_err
