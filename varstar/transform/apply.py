"""Applying the transformation: a night of the target's B and V photometry on the standard system.

With ``c = B - V`` and calibrated instrumental magnitudes ``v~``, ``b~`` (see
:mod:`varstar.transform`), :func:`transform_target` interpolates the other band
to each exposure (:func:`~varstar.transform.interpolate.interpolate_series`),
solves the target's colour in closed form from the night's
:class:`~varstar.transform.reference.NightReference`, and returns standard V,
B and B - V at the exposures of both bands with random and systematic errors
(a :class:`TransformedSeries` of two :class:`TransformedBand`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.results import Result, json_float, to_dict
from varstar.transform.checks import as_1d, check_positive, read_only
from varstar.transform.coefficients import Coefficients
from varstar.transform.interpolate import Interpolated, interpolate_series
from varstar.transform.reference import NightReference

__all__ = ["TransformedBand", "TransformedSeries", "transform_target"]


@dataclass(frozen=True, eq=False)
class TransformedBand:
    """Standard magnitudes at the exposures of one band.

    Attributes
    ----------
    band : str
        ``"V"`` or ``"B"``.
    time : numpy.ndarray
        The exposures' times (as given).
    mag, mag_err : numpy.ndarray
        Standard magnitude and its random 1-sigma (this exposure's calibrated
        magnitude, the other band's interpolated one including the
        interpolation error, through the partial derivatives).
    cal_err : numpy.ndarray
        Systematic 1-sigma common to the night (coefficients, reference colour,
        colour extinction, the band's calibration), not included in ``mag_err``.
    bv, bv_err, bv_sys_err : numpy.ndarray
        The target's standard B - V at this time, its random and systematic 1-sigma
        (the light curve's ``bv``, ``bv_err`` and ``bv_sys_err``).
    paired_mag, paired_err : numpy.ndarray
        The other band's calibrated instrumental magnitude interpolated to this
        time and its 1-sigma (total).
    interp_err : numpy.ndarray
        The interpolation part of ``paired_err``.
    gap_d : numpy.ndarray
        See :class:`Interpolated`.
    one_sided : numpy.ndarray
        The other band had data within ``max_gap_d`` on one side only (extrapolated).
    ok : numpy.ndarray
        A standard magnitude could be given; NaN elsewhere.

    Notes
    -----
    The random errors of neighbouring exposures are correlated (they share the
    samples of the other band), and the systematic errors of V, B and B - V are
    correlated with each other (the same catalogue stars and coefficients).
    """

    band: str
    time: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    cal_err: np.ndarray
    bv: np.ndarray
    bv_err: np.ndarray
    bv_sys_err: np.ndarray
    paired_mag: np.ndarray
    paired_err: np.ndarray
    interp_err: np.ndarray
    gap_d: np.ndarray
    one_sided: np.ndarray
    ok: np.ndarray

    def summary(self) -> dict[str, Any]:
        """JSON-safe summary of this band."""
        okm = self.ok

        def med(a: np.ndarray) -> float | None:
            return json_float(np.median(a[okm])) if np.any(okm) else None

        return {
            "band": self.band,
            "n_exposures": int(okm.size),
            "n_transformed": int(np.count_nonzero(okm)),
            "n_refused": int(np.count_nonzero(~okm)),
            "n_one_sided": int(np.count_nonzero(self.one_sided & okm)),
            "median_mag_err": med(self.mag_err),
            "median_cal_err": med(self.cal_err),
            "median_bv": med(self.bv),
            "median_bv_err": med(self.bv_err),
            "median_bv_sys_err": med(self.bv_sys_err),
            "median_interp_err": med(self.interp_err),
        }


@dataclass(frozen=True, eq=False)
class TransformedSeries(Result):
    """A night of the target transformed to the standard system (see :func:`transform_target`).

    Attributes
    ----------
    V, B : TransformedBand
        At the V exposures and at the B exposures.
    coefficients : Coefficients
    reference : NightReference
    max_gap_d : float
    warnings : tuple of str
    """

    V: TransformedBand
    B: TransformedBand
    coefficients: Coefficients
    reference: NightReference
    max_gap_d: float
    warnings: tuple[str, ...] = field(default_factory=tuple)

    _json_exclude = ("V", "B", "coefficients", "reference")

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe summary (per-exposure values: :meth:`to_frame`)."""
        # Differs from the generic dict on purpose: a summary of the night (each band's
        # counts and medians, see TransformedBand.summary) rather than every exposure,
        # which to_frame gives; the coefficients with their warnings (Coefficients.to_dict).
        d = to_dict(self)
        return {
            "method": "differential transformation to the standard system (Hardie 1962; Henden & Kaitchuck 1982)",
            "max_gap_d": d["max_gap_d"],
            "coefficients": self.coefficients.to_dict(),
            "reference": self.reference.to_dict(),
            "bands": {"V": self.V.summary(), "B": self.B.summary()},
            "warnings": d["warnings"],
        }

    def to_frame(self) -> Any:
        """Per-exposure values of both bands as one long pandas DataFrame."""
        import pandas as pd

        frames = []
        for tb in (self.V, self.B):
            frames.append(
                pd.DataFrame(
                    {
                        "band": tb.band,
                        "time": tb.time,
                        "mag": tb.mag,
                        "mag_err": tb.mag_err,
                        "cal_err": tb.cal_err,
                        "bv": tb.bv,
                        "bv_err": tb.bv_err,
                        "bv_sys_err": tb.bv_sys_err,
                        "interp_err": tb.interp_err,
                        "gap_d": tb.gap_d,
                        "one_sided": tb.one_sided,
                        "ok": tb.ok,
                    }
                )
            )
        return pd.concat(frames, ignore_index=True)


def _solve_band(
    own: np.ndarray,
    own_err: np.ndarray,
    other: Interpolated,
    X: np.ndarray,
    ref: NightReference,
    co: Coefficients,
    own_band: str,
    t: np.ndarray,
) -> TransformedBand:
    """Colour and standard magnitude at the exposures of one band (closed form)."""
    eps, mu = co.epsilon_v, co.mu_bv
    kb, kv = ref.kappa_b, ref.kappa_v
    crb = ref.cref_b if math.isfinite(ref.cref_b) else 0.0  # only used with kappa_b != 0
    crv = ref.cref_v if math.isfinite(ref.cref_v) else 0.0
    need_x = any(v != 0 for v in (kb, kv, ref.kappa_b_err, ref.kappa_v_err))
    X = X if need_x else np.nan_to_num(X, nan=0.0)
    if own_band == "V":
        vt, bt = own, other.value
        s_v, s_b = own_err, other.err
    else:
        bt, vt = own, other.value
        s_b, s_v = own_err, other.err
    dk = kb - kv
    a = 1.0 + mu * X * dk
    Q = (bt - vt) - ref.ref_colour_inst + X * (kb * crb - kv * crv)
    c = (ref.ref_colour_std + mu * Q) / a
    V = vt - kv * X * (c - crv) + eps * (c - ref.tie_colour_v)
    B = V + c
    # partial derivatives of the colour
    dc_db = mu / a
    dc_dref_inst = -mu / a
    dc_dref_std = 1.0 / a
    dc_dmu = (Q - c * X * dk) / a
    dc_dkb = mu * X * (crb - c) / a
    dc_dkv = mu * X * (c - crv) / a
    # dm/dc of the magnitude through the colour (V: eps - kv X; B = V + c: 1 + eps - kv X)
    G = eps - kv * X if own_band == "V" else 1.0 + eps - kv * X
    mag = V if own_band == "V" else B
    # random: dm/db~ = G dc/db, dm/dv~ = 1 - G dc/db
    g = G * dc_db
    mag_err = np.sqrt((1.0 - g) ** 2 * s_v**2 + g**2 * s_b**2)
    colour_err = dc_db * np.sqrt(s_v**2 + s_b**2)
    # systematic (one night): coefficients, reference colour, colour extinction, calibration
    d_eps = c - ref.tie_colour_v
    d_kv = -X * (c - crv) + G * dc_dkv
    sys_common = (
        (G * dc_dref_inst * ref.ref_colour_inst_err) ** 2
        + (d_eps * co.epsilon_v_err) ** 2
        + (G * dc_dmu * co.mu_bv_err) ** 2
        + (G * dc_dkb * ref.kappa_b_err) ** 2
        + (d_kv * ref.kappa_v_err) ** 2
    )
    if own_band == "V":
        # V tie plus the catalogue reference colour through eps - kv X (conservative: the
        # cancellation against the catalogue colour of the tie is ignored)
        sys_cat = ref.cal_err_v**2 + (G * dc_dref_std * ref.ref_colour_std_err) ** 2
    else:
        # B = V + c depends on the catalogue through the V tie plus the reference colour,
        # i.e. through the comparison stars' catalogue B: the B band's calibration error
        sys_cat = ref.cal_err_b**2
    sys_err = np.sqrt(sys_common + sys_cat)
    colour_sys = np.sqrt(
        (dc_dref_std * ref.ref_colour_std_err) ** 2
        + (dc_dref_inst * ref.ref_colour_inst_err) ** 2
        + (dc_dmu * co.mu_bv_err) ** 2
        + (dc_dkb * ref.kappa_b_err) ** 2
        + (dc_dkv * ref.kappa_v_err) ** 2
    )
    ok = other.ok & np.isfinite(own) & np.isfinite(own_err) & (own_err >= 0) & np.isfinite(mag) & np.isfinite(mag_err)
    ok &= np.isfinite(sys_err) & np.isfinite(colour_err)

    def masked(arr: np.ndarray) -> np.ndarray:
        return read_only(np.where(ok, arr, np.nan))

    return TransformedBand(
        band=own_band,
        time=read_only(t),
        mag=masked(mag),
        mag_err=masked(mag_err),
        cal_err=masked(sys_err),
        bv=masked(c),
        bv_err=masked(colour_err),
        bv_sys_err=masked(colour_sys),
        paired_mag=masked(other.value),
        paired_err=masked(other.err),
        interp_err=masked(other.interp_err),
        gap_d=read_only(other.gap_d),
        one_sided=read_only(other.one_sided & ok, bool),
        ok=read_only(ok, bool),
    )


def transform_target(
    t_v: Any,
    v: Any,
    v_err: Any,
    airmass_v: Any,
    t_b: Any,
    b: Any,
    b_err: Any,
    airmass_b: Any,
    ref: NightReference,
    coeffs: Coefficients,
    *,
    max_gap_d: float,
) -> TransformedSeries:
    """Transform one night of the target's B and V photometry to the standard system.

    At every V exposure the target's calibrated b~ is interpolated to its time
    (:func:`interpolate_series`), the colour is solved in closed form from
    ``c = c_ref + mu [(b~ - kappa_b X (c - cref_b)) - (v~ - kappa_v X (c - cref_v)) - r_inst]``,
    i.e. ``c = (c_ref + mu Q) / (1 + mu X (kappa_b - kappa_v))`` with
    ``Q = b~ - v~ - r_inst + X (kappa_b cref_b - kappa_v cref_v)``, and
    ``V = v~ - kappa_v X (c - cref_v) + eps (c - c_tie)``; at every B exposure
    likewise with v~ interpolated, and ``B = V + c``.  ``X`` is the exposure's
    own airmass (the other band's magnitude is wanted as it would have been
    measured at that moment).

    Errors (first-order propagation through the partial derivatives):

    * random, per exposure: this exposure's calibrated magnitude error and the
      interpolated other band's total error (measurement and interpolation),
      with ``dV/dv~ = 1 - g``, ``dV/db~ = g``, ``g = (eps - kappa_v X) mu / a``
      (about ``1 - eps mu`` and ``eps mu``), ``dc/db~ = -dc/dv~ = mu / a``;
    * systematic, common to the night: ``eps_err`` (``dV/deps = c - c_tie``),
      ``mu_err``, the reference colour's catalogue and photometric errors, the
      kappa errors, and the calibration error of the band.  The catalogue
      enters V through the V tie (``cal_err_v``; the reference colour's
      catalogue error through ``eps``) and B through the comparison stars'
      catalogue B magnitudes: ``B = V + c`` carries the V tie plus the catalogue
      reference colour, whose V parts cancel, which is ``cal_err_b`` when the
      reference star and the ties use the same stars and weights.  The
      instrumental zero points of b and v cancel in ``b~ - v~ - r_inst``.

    Parameters
    ----------
    t_v, v, v_err, airmass_v : array_like
        V exposures: times (days, one scale for both bands), calibrated magnitudes
        ``v~`` (instrumental minus ensemble zero point), 1-sigma including the
        zero-point error, airmass (may be NaN when no colour extinction is applied).
    t_b, b, b_err, airmass_b : array_like
        B exposures, likewise.
    ref : NightReference
    coeffs : Coefficients
    max_gap_d : float
        Largest distance (days) to a sample of the other band that may be used.

    Returns
    -------
    TransformedSeries
        Exposures that cannot be paired (or have no usable own magnitude) carry
        NaN and ``ok = False``.
    """
    if not isinstance(ref, NightReference):
        raise InputError(f"ref must be a NightReference, got {type(ref).__name__}")
    if not isinstance(coeffs, Coefficients):
        raise InputError(f"coeffs must be a Coefficients, got {type(coeffs).__name__}")
    gap = check_positive(max_gap_d, "max_gap_d")
    tv = as_1d(t_v, "t_v")
    vv = as_1d(v, "v", tv.size)
    ve = as_1d(v_err, "v_err", tv.size)
    xv = as_1d(airmass_v, "airmass_v", tv.size)
    tb = as_1d(t_b, "t_b")
    bb = as_1d(b, "b", tb.size)
    be = as_1d(b_err, "b_err", tb.size)
    xb = as_1d(airmass_b, "airmass_b", tb.size)
    b_at_v = interpolate_series(tv, tb, bb, be, max_gap_d=gap)
    v_at_b = interpolate_series(tb, tv, vv, ve, max_gap_d=gap)
    with np.errstate(invalid="ignore"):
        res_v = _solve_band(vv, ve, b_at_v, xv, ref, coeffs, "V", tv)
        res_b = _solve_band(bb, be, v_at_b, xb, ref, coeffs, "B", tb)
    warnings = list(coeffs.warnings)
    for res, other in ((res_v, "B"), (res_b, "V")):
        n_bad = int(np.count_nonzero(~res.ok))
        if n_bad:
            warnings.append(
                f"{n_bad} of {res.ok.size} {res.band} exposure(s) were not transformed: no usable {other} "
                f"measurement within max_gap_d = {gap:g} d (or no usable {res.band} magnitude, or no airmass "
                f"where colour extinction is applied)"
            )
        n_one = int(np.count_nonzero(res.one_sided))
        if n_one:
            warnings.append(
                f"{n_one} {res.band} exposure(s) have {other} data on one side only: their colour is "
                f"extrapolated, with an error that includes the slope times the gap"
            )
    return TransformedSeries(V=res_v, B=res_b, coefficients=coeffs, reference=ref, max_gap_d=gap,
                             warnings=tuple(warnings))
