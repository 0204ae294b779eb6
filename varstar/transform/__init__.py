"""Transformation of differential B and V photometry to the standard system.

The standard and instrumental systems are related by (Hardie 1962, in
Astronomical Techniques, ed. Hiltner; Henden & Kaitchuck 1982, Astronomical
Photometry)::

    V - v   = eps (B - V) + zeta_v
    (B - V) = mu (b - v) + zeta_bv

with ``v``, ``b`` instrumental magnitudes corrected for extinction.  Against an
ensemble of comparison stars in the same field the zero points and the
first-order extinction cancel, leaving ``Delta(B - V) = mu Delta(b - v)`` and
``Delta V = Delta v + eps Delta(B - V)``; the second-order (colour) extinction
``k'' X c`` does not cancel and is carried explicitly.

In varstar every band of a night has an ensemble solution (:mod:`varstar.ensemble`)
whose zero points ``Z_j`` turn an instrumental magnitude into a *calibrated
instrumental* magnitude ``v~ = v - Z_j`` (likewise ``b~``), tied to the catalogue by
``sum_i u_i (v~_i - V_i) = 0`` over comparison stars with tie weights ``u_i``.
Exactly under the model, with ``c = B - V``:

* ``v~_T = V_T - eps (c_T - c_tie) + kappa_v X (c_T - cref_v)`` where ``c_tie`` is
  the tie-weighted catalogue colour of the V ensemble, ``kappa_v`` the fitted
  colour extinction of the V ensemble and ``cref_v`` the colour its zero points
  refer to;
* ``c_T = c_ref + mu [(b~'_T - v~'_T) - r_inst]`` for any "reference star" made of
  comparison stars with weights summing to one, of standard colour ``c_ref`` and
  calibrated instrumental colour ``r_inst``; the primes mark magnitudes freed of
  the colour extinction, ``b~' = b~ - kappa_b X (c_T - cref_b)``.  This is linear in
  ``c_T`` and is solved in closed form;
* ``V_T = v~'_T + eps (c_T - c_tie)`` and ``B_T = V_T + c_T``.

B and V are taken in turn, not simultaneously, so the target's magnitude in the
other band is interpolated to each exposure time (:func:`interpolate_series`),
with an error for the interpolation itself.

The package is a pure computational core (arrays in, frozen dataclasses out),
one module per step:

* :mod:`~varstar.transform.coefficients`: :class:`Coefficients`,
  :func:`fit_coefficients` / :class:`CoefficientFit` (a standard field);
* :mod:`~varstar.transform.york`: the straight lines with errors in both
  variables (York et al. 2004) and the outlier test the fit uses;
* :mod:`~varstar.transform.interpolate`: :func:`interpolate_series` /
  :class:`Interpolated` (the other band at each exposure);
* :mod:`~varstar.transform.reference`: :class:`NightReference`,
  :func:`night_reference` (what a night's ensembles contribute);
* :mod:`~varstar.transform.apply`: :func:`transform_target` /
  :class:`TransformedSeries` (/ :class:`TransformedBand`);
* :mod:`~varstar.transform.temperature`: :func:`ballesteros_temperature`;
* :mod:`~varstar.transform.checks`: the input checks and constants they share.
"""

from varstar.transform.apply import TransformedBand, TransformedSeries, transform_target
from varstar.transform.coefficients import (
    EPSILON_LIMIT,
    EPSILON_USUAL,
    K2_LIMIT,
    MU_LIMITS,
    MU_USUAL,
    CoefficientFit,
    Coefficients,
    fit_coefficients,
)
from varstar.transform.interpolate import Interpolated, interpolate_series
from varstar.transform.reference import NightReference, night_reference
from varstar.transform.temperature import BALLESTEROS_RANGE, ballesteros_temperature

__all__ = [
    "Coefficients",
    "CoefficientFit",
    "fit_coefficients",
    "Interpolated",
    "interpolate_series",
    "NightReference",
    "night_reference",
    "TransformedBand",
    "TransformedSeries",
    "transform_target",
    "ballesteros_temperature",
    # the limits a coefficient and a colour are checked against
    "EPSILON_LIMIT",
    "EPSILON_USUAL",
    "K2_LIMIT",
    "MU_LIMITS",
    "MU_USUAL",
    "BALLESTEROS_RANGE",
]
