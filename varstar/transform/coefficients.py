"""Transformation coefficients of a B, V filter set, and their fit to a standard field.

:class:`Coefficients` holds ``eps`` and ``mu`` of the Hardie (1962) equations
(with the second-order extinction of b - v) and checks them;
:func:`fit_coefficients` fits them to a standard field as two straight lines
with errors in both variables (:mod:`varstar.transform.york`) and returns a
:class:`CoefficientFit`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from scipy import special

from varstar.errors import InputError
from varstar.results import Result, json_float, to_dict
from varstar.transform.checks import ONE_SIGMA_QUANTILE, as_1d, check_positive, finite_fields, read_only
from varstar.transform.york import line_and_outliers

__all__ = [
    "EPSILON_LIMIT",
    "EPSILON_USUAL",
    "K2_LIMIT",
    "MU_LIMITS",
    "MU_USUAL",
    "CoefficientFit",
    "Coefficients",
    "fit_coefficients",
]

# Hard limits outside which a coefficient is surely wrong (a mix-up of sign,
# band or definition), and the ranges of a reasonable B, V filter set
# (common practice: eps within +-0.1, mu within 0.9-1.15).
EPSILON_LIMIT = 0.5
MU_LIMITS = (0.5, 1.5)
K2_LIMIT = 0.5
EPSILON_USUAL = 0.1
MU_USUAL = (0.9, 1.15)


@dataclass(frozen=True)
class Coefficients(Result):
    """Transformation coefficients of a B, V filter set.

    Attributes
    ----------
    epsilon_v : float
        ``eps`` in ``V - v = eps (B - V) + zeta_v``.
    mu_bv : float
        ``mu`` in ``(B - V) = mu (b - v) + zeta_bv``.
    k2_bv : float
        Second-order extinction of the ``b - v`` colour (mag per airmass per mag
        of colour), used by :func:`~varstar.transform.reference.night_reference`
        only for a night whose ensembles did not fit colour extinction; it is
        then given to ``b`` and ``v`` gets none (common practice: the
        second-order term of V is small).
    epsilon_v_err, mu_bv_err, k2_bv_err : float
        Their 1-sigma errors (>= 0).
    source : str
        Where the values came from (a standard-field fit, the target file, ...).

    Raises
    ------
    InputError
        A value that is not finite, an error that is negative, or a coefficient
        outside the wide limits ``|eps| < 0.5``, ``0.5 < mu < 1.5``,
        ``|k2_bv| < 0.5``: values there are surely wrong (a sign or definition
        mix-up), while a reasonable filter set has eps within +-0.1 and mu within
        0.9-1.15 (common practice; see :attr:`warnings`).
    """

    epsilon_v: float
    mu_bv: float
    k2_bv: float = 0.0
    epsilon_v_err: float = 0.0
    mu_bv_err: float = 0.0
    k2_bv_err: float = 0.0
    source: str = ""

    def __post_init__(self) -> None:
        where = f" (source: {self.source})" if self.source else ""
        finite_fields(self, ("epsilon_v", "mu_bv", "k2_bv", "epsilon_v_err", "mu_bv_err", "k2_bv_err"),
                      "transformation coefficient", where)
        if not isinstance(self.source, str):
            raise InputError(f"Coefficients.source must be a string, got {self.source!r}")
        if abs(self.epsilon_v) >= EPSILON_LIMIT:
            raise InputError(
                f"epsilon_v = {self.epsilon_v:g}{where} is outside -{EPSILON_LIMIT:g}..{EPSILON_LIMIT:g}: a V filter "
                f"that matches the standard system gives a value within about +-{EPSILON_USUAL:g}; check the sign "
                f"convention (V - v = epsilon (B - V) + zeta) and the standard-star data"
            )
        if not (MU_LIMITS[0] < self.mu_bv < MU_LIMITS[1]):
            raise InputError(
                f"mu_bv = {self.mu_bv:g}{where} is outside {MU_LIMITS[0]:g}..{MU_LIMITS[1]:g}: a reasonable B, V "
                f"filter set gives {MU_USUAL[0]:g}-{MU_USUAL[1]:g} (mu multiplies b - v in "
                f"(B - V) = mu (b - v) + zeta; 1/mu is a different convention)"
            )
        if abs(self.k2_bv) >= K2_LIMIT:
            raise InputError(
                f"k2_bv = {self.k2_bv:g}{where} mag per airmass per mag is outside -{K2_LIMIT:g}..{K2_LIMIT:g}; "
                f"second-order extinction of b - v is a few hundredths"
            )

    @property
    def warnings(self) -> tuple[str, ...]:
        """Notes on values outside the usual ranges (still accepted)."""
        out = []
        if abs(self.epsilon_v) > EPSILON_USUAL:
            out.append(
                f"epsilon_v = {self.epsilon_v:.3f} is outside the usual +-{EPSILON_USUAL:g} (common practice): "
                f"check the V filter or the standard-field fit"
            )
        if not (MU_USUAL[0] <= self.mu_bv <= MU_USUAL[1]):
            out.append(
                f"mu_bv = {self.mu_bv:.3f} is outside the usual {MU_USUAL[0]:g}-{MU_USUAL[1]:g} (common practice): "
                f"check the B filter or the standard-field fit"
            )
        return tuple(out)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict: each value followed by its error, then the source and the warnings."""
        # Differs from the generic dict on purpose: the keys pair each value with its
        # error (the field order is fixed by the positional constructor
        # Coefficients(epsilon_v, mu_bv, ...)), and the derived warnings are included.
        d = to_dict(self)
        keys = ("epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "k2_bv", "k2_bv_err", "source")
        return {**{k: d[k] for k in keys}, "warnings": list(self.warnings)}


@dataclass(frozen=True, eq=False)
class CoefficientFit(Result):
    """Result of fitting transformation coefficients to a standard field.

    Attributes
    ----------
    epsilon_v, epsilon_v_err, zeta_v, zeta_v_err : float
        Slope and intercept of ``V - v = eps (B - V) + zeta_v`` and 1-sigma errors.
    mu_bv, mu_bv_err, zeta_bv, zeta_bv_err : float
        Slope and intercept of ``B - V = mu (b - v) + zeta_bv`` and 1-sigma errors.
    rms_v, rms_bv : float
        Root mean square of the residuals of the used stars (mag).
    intrinsic_v, intrinsic_bv : float
        Fitted excess scatter (mag) of the catalogue magnitudes, added in
        quadrature to every star's quoted B and V errors, so that the reduced
        chi-square of the fit is one (zero if the quoted errors suffice).
    n_stars : int
        Stars in the final fits.
    colour_range : float
        Span of catalogue B - V of those stars (mag).
    rejected : tuple of (str, str)
        ``(star id, reason)`` of stars rejected as outliers or unusable.
    warnings : tuple of str
        Things a person should know.
    star_ids : tuple of str
        All input stars.
    x_v, y_v, resid_v : numpy.ndarray
        Per star: ``B - V``, ``V - v`` and the residual of fit 1 (NaN if unusable).
    x_bv, y_bv, resid_bv : numpy.ndarray
        Per star: ``b - v``, ``B - V`` and the residual of fit 2.
    xerr_v, yerr_v, xerr_bv, yerr_bv : numpy.ndarray
        Per star: the quoted 1-sigma of those four quantities (catalogue and
        instrumental errors, without the fitted excess scatter), for plotting.
    used : numpy.ndarray
        Per star: in the final fits.
    clip_sigma, min_stars, min_colour_range : float, int, float
        Settings used.
    """

    epsilon_v: float
    epsilon_v_err: float
    zeta_v: float
    zeta_v_err: float
    mu_bv: float
    mu_bv_err: float
    zeta_bv: float
    zeta_bv_err: float
    rms_v: float
    rms_bv: float
    intrinsic_v: float
    intrinsic_bv: float
    n_stars: int
    colour_range: float
    rejected: tuple[tuple[str, str], ...]
    warnings: tuple[str, ...]
    star_ids: tuple[str, ...]
    x_v: np.ndarray
    y_v: np.ndarray
    resid_v: np.ndarray
    x_bv: np.ndarray
    y_bv: np.ndarray
    resid_bv: np.ndarray
    used: np.ndarray
    clip_sigma: float = 3.5
    min_stars: int = 4
    min_colour_range: float = 1.0
    xerr_v: np.ndarray = field(default_factory=lambda: np.zeros(0))
    yerr_v: np.ndarray = field(default_factory=lambda: np.zeros(0))
    xerr_bv: np.ndarray = field(default_factory=lambda: np.zeros(0))
    yerr_bv: np.ndarray = field(default_factory=lambda: np.zeros(0))

    # per-star arrays and settings: written below as a table of stars and a settings block
    _json_exclude = ("star_ids", "x_v", "y_v", "resid_v", "x_bv", "y_bv", "resid_bv", "used", "clip_sigma",
                     "min_stars", "min_colour_range", "xerr_v", "yerr_v", "xerr_bv", "yerr_bv")

    def coefficients(self, source: str, *, k2_bv: float = 0.0, k2_bv_err: float = 0.0) -> Coefficients:
        """The fitted coefficients as :class:`Coefficients` (validated there).

        Parameters
        ----------
        source : str
            Description of the standard field and night.
        k2_bv, k2_bv_err : float
            Second-order extinction of b - v, not fitted here (see :class:`Coefficients`).
        """
        return Coefficients(
            epsilon_v=self.epsilon_v,
            mu_bv=self.mu_bv,
            k2_bv=k2_bv,
            epsilon_v_err=self.epsilon_v_err,
            mu_bv_err=self.mu_bv_err,
            k2_bv_err=k2_bv_err,
            source=source,
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dict: coefficients, errors, diagnostics and the per-star table."""
        # Differs from the generic dict on purpose: a method line first, rejections
        # as {star, reason}, the settings grouped, and the per-star arrays as one
        # row per star (a table a person can read) instead of parallel arrays.
        out: dict[str, Any] = {
            "method": (
                "Hardie (1962) equations fitted as straight lines with correlated errors in both variables "
                "(York et al. 2004) and a fitted catalogue excess scatter"
            ),
            **to_dict(self),
        }
        out["rejected"] = [{"star": s, "reason": r} for s, r in self.rejected]
        out["settings"] = {
            "clip_sigma": float(self.clip_sigma),
            "min_stars": int(self.min_stars),
            "min_colour_range": float(self.min_colour_range),
        }
        out["stars"] = [
            {
                "star": sid,
                "used": bool(self.used[i]),
                "b_minus_v_std": json_float(self.x_v[i]),
                "v_std_minus_inst": json_float(self.y_v[i]),
                "resid_v": json_float(self.resid_v[i]),
                "b_minus_v_inst": json_float(self.x_bv[i]),
                "resid_bv": json_float(self.resid_bv[i]),
            }
            for i, sid in enumerate(self.star_ids)
        ]
        return out


@dataclass(frozen=True)
class _StandardField:
    """Checked inputs of :func:`fit_coefficients`: catalogue and instrumental magnitudes and errors."""

    ids: tuple[str, ...]
    V: np.ndarray
    B: np.ndarray
    v: np.ndarray
    b: np.ndarray
    sV: np.ndarray
    sB: np.ndarray
    sv: np.ndarray
    sb: np.ndarray
    no_err: np.ndarray  # a star with some error missing (treated as 0)


def _standard_field(star_ids: Sequence[Any], V: Any, V_err: Any, B: Any, B_err: Any, v_inst: Any,
                    v_inst_err: Any, b_inst: Any, b_inst_err: Any) -> _StandardField:
    """Check the per-star inputs of :func:`fit_coefficients`; missing errors become 0."""
    ids = tuple(str(s) for s in star_ids)
    n = len(ids)
    mags = [as_1d(a, nm, n) for a, nm in ((V, "V"), (B, "B"), (v_inst, "v_inst"), (b_inst, "b_inst"))]
    errs = []
    no_err = np.zeros(n, dtype=bool)
    for a, nm in ((V_err, "V_err"), (B_err, "B_err"), (v_inst_err, "v_inst_err"), (b_inst_err, "b_inst_err")):
        e = as_1d(a, nm, n)
        neg = np.flatnonzero(np.isfinite(e) & (e < 0))
        if neg.size:
            raise InputError(f"{nm} of standard star {ids[neg[0]]} is negative ({e[neg[0]]:g}); errors must be >= 0")
        no_err |= ~np.isfinite(e)
        errs.append(np.where(np.isfinite(e), e, 0.0))
    return _StandardField(ids, *mags, *errs, no_err)


def _reject_outliers(
    sf: _StandardField, usable: np.ndarray, clip_sigma: float, min_stars: int, rejected: list[tuple[str, str]],
) -> tuple[np.ndarray, dict[str, Any], dict[str, Any]]:
    """Fit both lines and reject the worst outlier until none is left; returns ``used`` and the two lines.

    Appends a reason per rejected star to ``rejected``.
    """
    x1_all, y1_all = sf.B - sf.V, sf.V - sf.v
    x2_all, y2_all = sf.b - sf.v, sf.B - sf.V
    # fit 1: x = B - V, y = V - v: var x = sB^2 + sV^2, var y = sV^2 + sv^2, cov = -sV^2
    # fit 2: x = b - v, y = B - V: var x = sb^2 + sv^2, var y = sB^2 + sV^2, cov = 0
    # excess s^2 of the catalogue magnitudes (each of B and V): fit 1 (2, 1, -1) s^2, fit 2 (0, 2, 0) s^2
    extra1, extra2 = (2.0, 1.0, -1.0), (0.0, 2.0, 0.0)
    used = usable.copy()
    while True:
        idx = np.flatnonzero(used)
        x1, y1 = x1_all[idx], y1_all[idx]
        x2, y2 = x2_all[idx], y2_all[idx]
        sV2, sB2, sv2, sb2 = sf.sV[idx] ** 2, sf.sB[idx] ** 2, sf.sv[idx] ** 2, sf.sb[idx] ** 2
        if np.ptp(x1) <= 0 or np.ptp(x2) <= 0:
            raise InputError(
                "the standard stars all have the same colour: the transformation slopes cannot be fitted; "
                "use standards spanning at least about 1 mag in B - V"
            )
        test = idx.size > min_stars
        line1, t1, thr1 = line_and_outliers(x1, y1, sB2 + sV2, sV2 + sv2, -sV2, extra1, clip_sigma, test)
        line2, t2, thr2 = line_and_outliers(x2, y2, sb2 + sv2, sB2 + sV2, np.zeros_like(sV2), extra2, clip_sigma,
                                            test)
        if not test:
            return used, line1, line2
        ratio1, ratio2 = t1 / thr1, t2 / thr2
        ratio = np.maximum(ratio1, ratio2)
        worst = int(np.argmax(ratio))
        if not ratio[worst] > 1.0:
            return used, line1, line2
        gi = int(idx[worst])
        first = ratio1[worst] >= ratio2[worst]
        which = "V - v against B - V" if first else "B - V against b - v"
        ln = line1 if first else line2
        xx, yy = (x1, y1) if first else (x2, y2)
        res = float(yy[worst] - ln["a"] - ln["b"] * xx[worst])
        t_w, thr_w = (t1[worst], thr1[worst]) if first else (t2[worst], thr2[worst])
        rejected.append(
            (sf.ids[gi], f"residual {res:+.3f} mag in {which}: {float(t_w):.1f} sigma from the line through the "
                         f"other {idx.size - 1} stars (limit {float(thr_w):.1f}, the Student-t equivalent of "
                         f"{clip_sigma:g} sigma)")
        )
        used[gi] = False


def fit_coefficients(
    star_ids: Sequence[Any],
    V: Any,
    V_err: Any,
    B: Any,
    B_err: Any,
    v_inst: Any,
    v_inst_err: Any,
    b_inst: Any,
    b_inst_err: Any,
    *,
    clip_sigma: float = 3.5,
    min_stars: int = 4,
    min_colour_range: float = 1.0,
) -> CoefficientFit:
    """Fit ``eps`` and ``mu`` to a standard field (Hardie 1962; Henden & Kaitchuck 1982).

    Fit 1: ``V - v = eps (B - V) + zeta_v``; fit 2: ``B - V = mu (b - v) + zeta_bv``.
    Both are straight lines with errors in both variables and their correlation
    (York et al. 2004, Am. J. Phys. 72, 367, reference from memory; its weights are the effective
    variances: fit 1 shares the catalogue V between ``x`` and ``y``, so
    ``var(y - eps x) = (1 + eps)^2 sV^2 + eps^2 sB^2 + sv^2``; fit 2 has
    ``var(y - mu x) = sB^2 + sV^2 + mu^2 (sb^2 + sv^2)``), iterated in the slope.
    An excess scatter ``s`` of the catalogue magnitudes (added in quadrature to
    both sB and sV, and so entering both variables of fit 1 with the same
    correlation) is fitted per line so that the reduced chi-square is one; when
    it had to be estimated the coefficient errors are widened to the Student-t
    68.27% quantile with ``n - 2`` degrees of freedom.  Catalogue values that
    scatter beyond their quoted errors thus give honest coefficient errors.

    Outliers are rejected one at a time, the worst first: each star is compared
    with the line fitted to the other stars (with their own excess), its
    residual divided by the square root of its variance plus that line's
    variance at its colour; a star is rejected when this exceeds, in either fit,
    the Student-t quantile with the others' ``n - 3`` degrees of freedom at the
    two-sided probability of ``clip_sigma`` normal sigma (with few stars a
    scatter cannot be established, so only gross outliers go).  Never below
    ``min_stars`` stars.

    Parameters
    ----------
    star_ids : sequence
        One identifier per star (used in reasons).
    V, V_err, B, B_err : array_like
        Catalogue standard magnitudes and 1-sigma errors (NaN error: treated as 0;
        the intrinsic scatter stands in).
    v_inst, v_inst_err, b_inst, b_inst_err : array_like
        Mean instrumental magnitudes of each star with any zero point (for example
        calibrated mean magnitudes from an ensemble solution of the field; a
        common zero point drops out into ``zeta``) and their 1-sigma errors.
    clip_sigma : float
        Rejection threshold (robust sigma).
    min_stars : int
        Fewest stars to fit with (>= 3).
    min_colour_range : float
        B - V span (mag) below which the result carries a warning that the slopes
        are poorly constrained (common practice: standards should span at least
        about 1 mag in B - V).

    Returns
    -------
    CoefficientFit

    Raises
    ------
    InputError
        Mismatched inputs, negative errors, or fewer than ``min_stars`` usable stars.
    """
    clip_sigma = check_positive(clip_sigma, "clip_sigma")
    min_colour_range = float(min_colour_range)
    if not (math.isfinite(min_colour_range) and min_colour_range >= 0):
        raise InputError(f"min_colour_range must be a number >= 0 (mag), got {min_colour_range!r}")
    if isinstance(min_stars, bool) or not isinstance(min_stars, (int, np.integer)) or min_stars < 3:
        raise InputError(f"min_stars must be an integer >= 3 (a line with a fitted scatter needs 3), got {min_stars!r}")
    sf = _standard_field(star_ids, V, V_err, B, B_err, v_inst, v_inst_err, b_inst, b_inst_err)
    warnings: list[str] = []
    usable = np.isfinite(sf.V) & np.isfinite(sf.B) & np.isfinite(sf.v) & np.isfinite(sf.b)
    rejected: list[tuple[str, str]] = []
    for i in np.flatnonzero(~usable):
        missing = [nm for nm, a in (("V", sf.V), ("B", sf.B), ("v_inst", sf.v), ("b_inst", sf.b))
                   if not np.isfinite(a[i])]
        rejected.append((sf.ids[i], "no " + ", ".join(missing)))
    n_usable = int(np.count_nonzero(usable))
    if n_usable < min_stars:
        raise InputError(
            f"a standard field needs at least {min_stars} stars with B, V and both instrumental magnitudes; "
            f"found {n_usable}"
        )
    if np.any(sf.no_err & usable):
        warnings.append(
            f"{int(np.count_nonzero(sf.no_err & usable))} standard star(s) have a missing error (treated as 0; "
            f"the fitted excess scatter stands in)"
        )

    used, line1, line2 = _reject_outliers(sf, usable, clip_sigma, int(min_stars), rejected)
    x1_all, y1_all = sf.B - sf.V, sf.V - sf.v
    x2_all, y2_all = sf.b - sf.v, sf.B - sf.V
    n_used = int(np.count_nonzero(used))
    colour_range = float(np.ptp(x1_all[used]))
    if colour_range < min_colour_range:
        warnings.append(
            f"the standard stars span only {colour_range:.2f} mag in B - V (at least {min_colour_range:g} wanted): "
            f"the colour range is too narrow to constrain the slope; the coefficients are uncertain"
        )
    resid_v = np.where(usable, y1_all - line1["a"] - line1["b"] * x1_all, np.nan)
    resid_bv = np.where(usable, y2_all - line2["a"] - line2["b"] * x2_all, np.nan)
    # with the excess estimated from the data the slope follows Student's t with n - 2
    # degrees of freedom: widen to its 68.27% quantile, as the ensemble's calibration error is
    widen = [float(special.stdtrit(n_used - 2, ONE_SIGMA_QUANTILE)) if ln["s2"] > 0 else 1.0 for ln in (line1, line2)]
    return CoefficientFit(
        epsilon_v=float(line1["b"]),
        epsilon_v_err=float(line1["b_err"]) * widen[0],
        zeta_v=float(line1["a"]),
        zeta_v_err=float(line1["a_err"]) * widen[0],
        mu_bv=float(line2["b"]),
        mu_bv_err=float(line2["b_err"]) * widen[1],
        zeta_bv=float(line2["a"]),
        zeta_bv_err=float(line2["a_err"]) * widen[1],
        rms_v=float(np.sqrt(np.mean(resid_v[used] ** 2))),
        rms_bv=float(np.sqrt(np.mean(resid_bv[used] ** 2))),
        intrinsic_v=float(math.sqrt(line1["s2"])),
        intrinsic_bv=float(math.sqrt(line2["s2"])),
        n_stars=n_used,
        colour_range=colour_range,
        rejected=tuple(rejected),
        warnings=tuple(warnings),
        star_ids=sf.ids,
        x_v=read_only(np.where(usable, x1_all, np.nan)),
        y_v=read_only(np.where(usable, y1_all, np.nan)),
        resid_v=read_only(resid_v),
        x_bv=read_only(np.where(usable, x2_all, np.nan)),
        y_bv=read_only(np.where(usable, y2_all, np.nan)),
        resid_bv=read_only(resid_bv),
        used=read_only(used, bool),
        clip_sigma=clip_sigma,
        min_stars=int(min_stars),
        min_colour_range=min_colour_range,
        xerr_v=read_only(np.hypot(sf.sB, sf.sV)),
        yerr_v=read_only(np.hypot(sf.sV, sf.sv)),
        xerr_bv=read_only(np.hypot(sf.sb, sf.sv)),
        yerr_bv=read_only(np.hypot(sf.sB, sf.sV)),
    )
