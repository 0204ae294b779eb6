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

The module is a pure computational core: arrays in, frozen dataclasses out.

Public API
----------
:class:`Coefficients`, :func:`fit_coefficients` / :class:`CoefficientFit`,
:func:`interpolate_series` / :class:`Interpolated`, :class:`NightReference`,
:func:`night_reference`, :func:`transform_target` / :class:`TransformedSeries`
(/ :class:`TransformedBand`), :func:`ballesteros_temperature`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from scipy import special

from varstar.errors import InputError
from varstar.results import json_float as _json_float

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
]

# Hard limits outside which a coefficient is surely wrong (a mix-up of sign,
# band or definition), and the ranges of a reasonable B, V filter set
# (common practice: eps within +-0.1, mu within 0.9-1.15).
EPSILON_LIMIT = 0.5
MU_LIMITS = (0.5, 1.5)
K2_LIMIT = 0.5
EPSILON_USUAL = 0.1
MU_USUAL = (0.9, 1.15)
# Upper quantile of a normal distribution at +1 sigma, Phi(1).
_ONE_SIGMA_QUANTILE = 0.8413447460685429
# Smallest variance used as a weight denominator (1 micromag squared).
_VAR_FLOOR = 1e-12
# Validity range of the Ballesteros relation used here (dereddened B - V, mag).
BALLESTEROS_RANGE = (-0.4, 2.0)
# Samples farther than this many max_gap_d from the end sample do not enter the
# slope used for extrapolation at the ends of a series.
_SLOPE_WINDOW = 4.0


# --------------------------------------------------------------------------- helpers


def _json_list(a: np.ndarray) -> list:
    a = np.asarray(a)
    if a.dtype == bool:
        return [bool(v) for v in a]
    return [_json_float(v) for v in a]


def _ro(a: Any, dtype: Any = float) -> np.ndarray:
    arr = np.array(a, dtype=dtype)
    arr.setflags(write=False)
    return arr


def _as_1d(a: Any, name: str, n: int | None = None) -> np.ndarray:
    try:
        arr = np.asarray(a, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be an array of numbers ({exc})") from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise InputError(f"{name} must be a one-dimensional array, got shape {arr.shape}")
    if n is not None and arr.shape[0] != n:
        raise InputError(f"{name} has {arr.shape[0]} values but {n} were expected (one per star or exposure)")
    return arr


def _check_positive(value: Any, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a positive number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise InputError(f"{name} must be a positive number, got {value!r}")
    return v


def _finite_fields(obj: Any, names: Sequence[str], what: str, where: str = "") -> None:
    """Turn the named fields of a frozen dataclass into finite floats; ``*_err`` must be >= 0."""
    for name in names:
        value = getattr(obj, name)
        try:
            v = float(value)
        except (TypeError, ValueError, OverflowError):  # OverflowError: an integer too large for a float
            raise InputError(f"{what} {name} must be a number, got {value!r}{where}") from None
        if not math.isfinite(v):
            raise InputError(f"{what} {name} must be finite, got {value!r}{where}")
        if name.endswith("_err") and v < 0:
            raise InputError(f"{what} {name} must be >= 0, got {v!r}{where}")
        object.__setattr__(obj, name, v)


def _paule_mandel(d: np.ndarray, v: np.ndarray) -> float:
    """Excess variance of ``d`` about its weighted mean (Paule & Mandel 1982, reference
    from memory): the ensemble's estimator, with this module's variance floor."""
    from .ensemble import paule_mandel as excess

    return excess(d, np.maximum(v, _VAR_FLOOR))


# --------------------------------------------------------------------------- coefficients


@dataclass(frozen=True)
class Coefficients:
    """Transformation coefficients of a B, V filter set.

    Attributes
    ----------
    epsilon_v : float
        ``eps`` in ``V - v = eps (B - V) + zeta_v``.
    mu_bv : float
        ``mu`` in ``(B - V) = mu (b - v) + zeta_bv``.
    k2_bv : float
        Second-order extinction of the ``b - v`` colour (mag per airmass per mag
        of colour), used by :func:`night_reference` only for a night whose
        ensembles did not fit colour extinction; it is then given to ``b`` and
        ``v`` gets none (common practice: the second-order term of V is small).
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
        _finite_fields(self, ("epsilon_v", "mu_bv", "k2_bv", "epsilon_v_err", "mu_bv_err", "k2_bv_err"),
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
        """JSON-safe plain dict."""
        return {
            "epsilon_v": self.epsilon_v,
            "epsilon_v_err": self.epsilon_v_err,
            "mu_bv": self.mu_bv,
            "mu_bv_err": self.mu_bv_err,
            "k2_bv": self.k2_bv,
            "k2_bv_err": self.k2_bv_err,
            "source": self.source,
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True, eq=False)
class CoefficientFit:
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
        return {
            "method": (
                "Hardie (1962) equations fitted as straight lines with correlated errors in both variables "
                "(York et al. 2004) and a fitted catalogue excess scatter"
            ),
            "epsilon_v": _json_float(self.epsilon_v),
            "epsilon_v_err": _json_float(self.epsilon_v_err),
            "zeta_v": _json_float(self.zeta_v),
            "zeta_v_err": _json_float(self.zeta_v_err),
            "mu_bv": _json_float(self.mu_bv),
            "mu_bv_err": _json_float(self.mu_bv_err),
            "zeta_bv": _json_float(self.zeta_bv),
            "zeta_bv_err": _json_float(self.zeta_bv_err),
            "rms_v": _json_float(self.rms_v),
            "rms_bv": _json_float(self.rms_bv),
            "intrinsic_v": _json_float(self.intrinsic_v),
            "intrinsic_bv": _json_float(self.intrinsic_bv),
            "n_stars": int(self.n_stars),
            "colour_range": _json_float(self.colour_range),
            "rejected": [{"star": s, "reason": r} for s, r in self.rejected],
            "warnings": list(self.warnings),
            "settings": {
                "clip_sigma": float(self.clip_sigma),
                "min_stars": int(self.min_stars),
                "min_colour_range": float(self.min_colour_range),
            },
            "stars": [
                {
                    "star": sid,
                    "used": bool(self.used[i]),
                    "b_minus_v_std": _json_float(self.x_v[i]),
                    "v_std_minus_inst": _json_float(self.y_v[i]),
                    "resid_v": _json_float(self.resid_v[i]),
                    "b_minus_v_inst": _json_float(self.x_bv[i]),
                    "resid_bv": _json_float(self.resid_bv[i]),
                }
                for i, sid in enumerate(self.star_ids)
            ],
        }


def _york_batch(
    x: np.ndarray,
    y: np.ndarray,
    sx2: np.ndarray,
    sy2: np.ndarray,
    cxy: np.ndarray,
    extra: tuple[float, float, float],
    mask: np.ndarray,
) -> dict[str, np.ndarray]:
    """Straight lines ``y = a + b x`` through subsets of points, errors in both variables.

    York et al. (2004, Am. J. Phys. 72, 367; reference from memory) least-squares line with correlated
    errors (``sx2``, ``sy2``, ``cxy`` per point), plus an excess variance ``s2``
    fitted per subset so that ``chi2 = n - 2`` (zero if the errors already explain
    the scatter).  The excess enters ``(var x, var y, cov xy)`` as ``extra * s2``:
    excess scatter of the catalogue magnitudes, which enter both variables.
    Each row of ``mask`` (``(m, n)`` bool) selects one subset; all are solved at
    once.  Returns per row: slope ``b``, intercept ``a``, their York standard
    errors (``b_err``, ``a_err``, for known variances), ``s2``, ``sum_w`` and the
    weighted mean adjusted abscissa ``xbar`` (for prediction variances), and the
    per-point weights ``w`` ``(m, n)``.
    """
    ax, ay, ac = extra
    mk = mask.astype(float)
    npts = mk.sum(axis=1)
    dof = npts - 2.0
    # start from an unweighted straight line
    xm = (mk * x).sum(axis=1) / npts
    ym = (mk * y).sum(axis=1) / npts
    b = (mk * (x - xm[:, None]) * (y - ym[:, None])).sum(axis=1) / (mk * (x - xm[:, None]) ** 2).sum(axis=1)
    s2 = np.zeros(mask.shape[0])

    def state(b: np.ndarray, s2: np.ndarray) -> tuple[np.ndarray, ...]:
        """York weights, weighted centroid, centred data and the beta terms at slope b, excess s2."""
        sx = sx2[None, :] + ax * s2[:, None]
        sy = sy2[None, :] + ay * s2[:, None]
        cc = cxy[None, :] + ac * s2[:, None]
        W = mk / np.maximum(sy + b[:, None] ** 2 * sx - 2.0 * b[:, None] * cc, _VAR_FLOOR)
        sw = W.sum(axis=1)
        X = (W * x).sum(axis=1) / sw
        Y = (W * y).sum(axis=1) / sw
        U = x[None, :] - X[:, None]
        V = y[None, :] - Y[:, None]
        beta = W * (U * sy + b[:, None] * V * sx - (b[:, None] * U + V) * cc)
        return W, sw, X, Y, U, V, beta

    for _ in range(500):
        W, sw, X, Y, U, V, beta = state(b, s2)
        b_new = (W * beta * V).sum(axis=1) / (W * beta * U).sum(axis=1)
        a = Y - b_new * X
        r2 = mk * (y[None, :] - a[:, None] - b_new[:, None] * x[None, :]) ** 2
        # excess: sum r2 / (v0 + m s2) = dof, solved on all rows at once
        sxv, syv, ccv = sx2[None, :], sy2[None, :], cxy[None, :]
        v0 = np.maximum(syv + b_new[:, None] ** 2 * sxv - 2.0 * b_new[:, None] * ccv, _VAR_FLOOR)
        mult = np.maximum(ay + b_new**2 * ax - 2.0 * b_new * ac, 1e-12)[:, None]
        chi0 = (r2 / v0).sum(axis=1)
        need = (chi0 > dof) & (dof > 0)
        lo = np.zeros_like(s2)
        hi = np.where(need, (r2 / mult).sum(axis=1) / np.maximum(dof, 1.0), 0.0)
        z = np.clip(s2, lo, hi)
        for _ in range(100):  # safeguarded Newton in the bracket [lo, hi]
            d = v0 + mult * z[:, None]
            q = r2 / d
            f = q.sum(axis=1) - dof
            fp = -(mult[:, 0] * (q / d).sum(axis=1))
            lo = np.where(need & (f > 0), z, lo)
            hi = np.where(need & (f <= 0), z, hi)
            with np.errstate(divide="ignore", invalid="ignore"):
                newton = z - f / fp
            step_bad = ~np.isfinite(newton) | (newton <= lo) | (newton >= hi)
            new = np.where(need, np.where(step_bad, 0.5 * (lo + hi), newton), 0.0)
            if np.all(np.abs(new - z) <= 1e-16 + 1e-10 * np.abs(z)):
                z = new
                break
            z = new
        s2_new = np.where(need, z, 0.0)
        done = np.all(np.abs(b_new - b) <= 1e-12 * (1.0 + np.abs(b))) and np.all(
            np.abs(s2_new - s2) <= 1e-14 + 1e-8 * s2
        )
        b, s2 = b_new, s2_new
        if done:
            break
    W, sw, X, Y, U, V, beta = state(b, s2)
    a = Y - b * X
    xadj = X[:, None] + beta
    xbar = (W * xadj).sum(axis=1) / sw
    u = xadj - xbar[:, None]
    b_var = 1.0 / (W * u * u).sum(axis=1)
    a_var = 1.0 / sw + xbar**2 * b_var
    return {"b": b, "a": a, "b_err": np.sqrt(b_var), "a_err": np.sqrt(a_var), "cov_ab": -xbar * b_var,
            "s2": s2, "sum_w": sw, "xbar": xbar, "w": W, "dof": dof}


def _line_and_outliers(
    x: np.ndarray, y: np.ndarray, sx2: np.ndarray, sy2: np.ndarray, cxy: np.ndarray,
    extra: tuple[float, float, float], clip_sigma: float, test: bool,
) -> tuple[dict[str, Any], np.ndarray, np.ndarray]:
    """The line through all points, and each point judged against the line through the others.

    Returns the full fit (row 0 of :func:`_york_batch`) and, per point, its
    externally studentised residual and the rejection threshold: the residual
    from the line fitted without it, over the square root of its
    variance (errors and the others' excess) plus the variance of that line at
    its abscissa.  The threshold is the Student-t quantile with the others'
    ``n - 3`` degrees of freedom at the two-sided probability of ``clip_sigma``
    normal sigma (the scatter is judged from the others).  Without ``test``
    only the full fit is made (residuals zero, thresholds infinite).
    """
    n = x.size
    rows = [np.ones((1, n), dtype=bool)]
    if test:
        rows.append(~np.eye(n, dtype=bool))
    fit = _york_batch(x, y, sx2, sy2, cxy, extra, np.vstack(rows))
    full = {k: v[0] for k, v in fit.items()}
    if not test:
        return full, np.zeros(n), np.full(n, np.inf)
    b, a, s2 = fit["b"][1:], fit["a"][1:], fit["s2"][1:]
    ax, ay, ac = extra
    d = y - a - b * x
    var_pt = (sy2 + ay * s2) + b**2 * (sx2 + ax * s2) - 2.0 * b * (cxy + ac * s2)
    var_line = 1.0 / fit["sum_w"][1:] + (x - fit["xbar"][1:]) ** 2 * fit["b_err"][1:] ** 2
    t = np.abs(d) / np.sqrt(np.maximum(var_pt + var_line, _VAR_FLOOR))
    p_two = special.erfc(clip_sigma / math.sqrt(2.0))
    dof_o = fit["dof"][1:]  # the others: (n - 1) - 2
    thr = special.stdtrit(np.maximum(dof_o, 1.0), 1.0 - 0.5 * p_two)
    return full, t, thr


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
    ids = tuple(str(s) for s in star_ids)
    n = len(ids)
    clip_sigma = _check_positive(clip_sigma, "clip_sigma")
    min_colour_range = float(min_colour_range)
    if not (math.isfinite(min_colour_range) and min_colour_range >= 0):
        raise InputError(f"min_colour_range must be a number >= 0 (mag), got {min_colour_range!r}")
    if isinstance(min_stars, bool) or not isinstance(min_stars, (int, np.integer)) or min_stars < 3:
        raise InputError(f"min_stars must be an integer >= 3 (a line with a fitted scatter needs 3), got {min_stars!r}")
    Vc, Bc, vi, bi = (_as_1d(a, nm, n) for a, nm in ((V, "V"), (B, "B"), (v_inst, "v_inst"), (b_inst, "b_inst")))
    errs = {}
    for a, nm in ((V_err, "V_err"), (B_err, "B_err"), (v_inst_err, "v_inst_err"), (b_inst_err, "b_inst_err")):
        e = _as_1d(a, nm, n)
        neg = np.flatnonzero(np.isfinite(e) & (e < 0))
        if neg.size:
            raise InputError(f"{nm} of standard star {ids[neg[0]]} is negative ({e[neg[0]]:g}); errors must be >= 0")
        errs[nm] = e
    warnings: list[str] = []
    no_err = np.zeros(n, dtype=bool)
    for nm in errs:
        no_err |= ~np.isfinite(errs[nm])
        errs[nm] = np.where(np.isfinite(errs[nm]), errs[nm], 0.0)
    sV, sB, sv, sb = errs["V_err"], errs["B_err"], errs["v_inst_err"], errs["b_inst_err"]

    usable = np.isfinite(Vc) & np.isfinite(Bc) & np.isfinite(vi) & np.isfinite(bi)
    rejected: list[tuple[str, str]] = []
    for i in np.flatnonzero(~usable):
        missing = [nm for nm, a in (("V", Vc), ("B", Bc), ("v_inst", vi), ("b_inst", bi)) if not np.isfinite(a[i])]
        rejected.append((ids[i], "no " + ", ".join(missing)))
    n_usable = int(np.count_nonzero(usable))
    if n_usable < min_stars:
        raise InputError(
            f"a standard field needs at least {min_stars} stars with B, V and both instrumental magnitudes; "
            f"found {n_usable}"
        )
    if np.any(no_err & usable):
        warnings.append(
            f"{int(np.count_nonzero(no_err & usable))} standard star(s) have a missing error (treated as 0; "
            f"the fitted excess scatter stands in)"
        )

    x1_all = Bc - Vc
    y1_all = Vc - vi
    x2_all = bi - vi
    y2_all = Bc - Vc

    # fit 1: x = B - V, y = V - v: var x = sB^2 + sV^2, var y = sV^2 + sv^2, cov = -sV^2
    # fit 2: x = b - v, y = B - V: var x = sb^2 + sv^2, var y = sB^2 + sV^2, cov = 0
    # excess s^2 of the catalogue magnitudes (each of B and V): fit 1 (2, 1, -1) s^2, fit 2 (0, 2, 0) s^2
    extra1, extra2 = (2.0, 1.0, -1.0), (0.0, 2.0, 0.0)
    used = usable.copy()
    while True:
        idx = np.flatnonzero(used)
        x1, y1 = x1_all[idx], y1_all[idx]
        x2, y2 = x2_all[idx], y2_all[idx]
        sV2, sB2, sv2, sb2 = sV[idx] ** 2, sB[idx] ** 2, sv[idx] ** 2, sb[idx] ** 2
        if np.ptp(x1) <= 0 or np.ptp(x2) <= 0:
            raise InputError(
                "the standard stars all have the same colour: the transformation slopes cannot be fitted; "
                "use standards spanning at least about 1 mag in B - V"
            )
        test = idx.size > min_stars
        line1, t1, thr1 = _line_and_outliers(x1, y1, sB2 + sV2, sV2 + sv2, -sV2, extra1, clip_sigma, test)
        line2, t2, thr2 = _line_and_outliers(x2, y2, sb2 + sv2, sB2 + sV2, np.zeros_like(sV2), extra2, clip_sigma,
                                             test)
        if not test:
            break
        ratio1, ratio2 = t1 / thr1, t2 / thr2
        ratio = np.maximum(ratio1, ratio2)
        worst = int(np.argmax(ratio))
        if not ratio[worst] > 1.0:
            break
        gi = int(idx[worst])
        first = ratio1[worst] >= ratio2[worst]
        which = "V - v against B - V" if first else "B - V against b - v"
        ln = line1 if first else line2
        xx, yy = (x1, y1) if first else (x2, y2)
        res = float(yy[worst] - ln["a"] - ln["b"] * xx[worst])
        t_w, thr_w = (t1[worst], thr1[worst]) if first else (t2[worst], thr2[worst])
        rejected.append(
            (ids[gi], f"residual {res:+.3f} mag in {which}: {float(t_w):.1f} sigma from the line through the "
                      f"other {idx.size - 1} stars (limit {float(thr_w):.1f}, the Student-t equivalent of "
                      f"{clip_sigma:g} sigma)")
        )
        used[gi] = False

    colour_range = float(np.ptp(x1))
    if colour_range < min_colour_range:
        warnings.append(
            f"the standard stars span only {colour_range:.2f} mag in B - V (at least {min_colour_range:g} wanted): "
            f"the colour range is too narrow to constrain the slope; the coefficients are uncertain"
        )
    resid_v = np.full(n, np.nan)
    resid_bv = np.full(n, np.nan)
    resid_v[usable] = y1_all[usable] - line1["a"] - line1["b"] * x1_all[usable]
    resid_bv[usable] = y2_all[usable] - line2["a"] - line2["b"] * x2_all[usable]
    widen = []
    for ln in (line1, line2):
        # with the excess estimated from the data the slope follows Student's t with n - 2
        # degrees of freedom: widen to its 68.27% quantile, as the ensemble's calibration error is
        dof = idx.size - 2
        widen.append(float(special.stdtrit(dof, _ONE_SIGMA_QUANTILE)) if ln["s2"] > 0 else 1.0)
    r1 = y1 - line1["a"] - line1["b"] * x1
    r2 = y2 - line2["a"] - line2["b"] * x2
    fit = CoefficientFit(
        epsilon_v=float(line1["b"]),
        epsilon_v_err=float(line1["b_err"]) * widen[0],
        zeta_v=float(line1["a"]),
        zeta_v_err=float(line1["a_err"]) * widen[0],
        mu_bv=float(line2["b"]),
        mu_bv_err=float(line2["b_err"]) * widen[1],
        zeta_bv=float(line2["a"]),
        zeta_bv_err=float(line2["a_err"]) * widen[1],
        rms_v=float(np.sqrt(np.mean(r1**2))),
        rms_bv=float(np.sqrt(np.mean(r2**2))),
        intrinsic_v=float(math.sqrt(line1["s2"])),
        intrinsic_bv=float(math.sqrt(line2["s2"])),
        n_stars=int(idx.size),
        colour_range=colour_range,
        rejected=tuple(rejected),
        warnings=tuple(warnings),
        star_ids=ids,
        x_v=_ro(np.where(usable, x1_all, np.nan)),
        y_v=_ro(np.where(usable, y1_all, np.nan)),
        resid_v=_ro(resid_v),
        x_bv=_ro(np.where(usable, x2_all, np.nan)),
        y_bv=_ro(np.where(usable, y2_all, np.nan)),
        resid_bv=_ro(resid_bv),
        used=_ro(used, bool),
        clip_sigma=clip_sigma,
        min_stars=int(min_stars),
        min_colour_range=min_colour_range,
        xerr_v=_ro(np.hypot(sB, sV)),
        yerr_v=_ro(np.hypot(sV, sv)),
        xerr_bv=_ro(np.hypot(sb, sv)),
        yerr_bv=_ro(np.hypot(sB, sV)),
    )
    return fit


# --------------------------------------------------------------------------- interpolation


@dataclass(frozen=True, eq=False)
class Interpolated:
    """A series evaluated at other times (see :func:`interpolate_series`).

    Attributes
    ----------
    value, err : numpy.ndarray
        Interpolated value and its total 1-sigma (NaN where not ``ok``).
    meas_err : numpy.ndarray
        Part of ``err`` from the samples' own errors.
    interp_err : numpy.ndarray
        Part of ``err`` from the interpolation itself (curvature between samples;
        at the ends the slope times the gap).
    gap_d : numpy.ndarray
        Between two samples the larger distance to them; at an end the distance
        to the nearest sample; where refused the distance to the nearest usable
        sample (inf if none).
    one_sided : numpy.ndarray
        Only one side had a sample within ``max_gap_d`` (extrapolated).
    ok : numpy.ndarray
        A value could be given.
    max_gap_d : float
        The limit used.
    """

    value: np.ndarray
    err: np.ndarray
    meas_err: np.ndarray
    interp_err: np.ndarray
    gap_d: np.ndarray
    one_sided: np.ndarray
    ok: np.ndarray
    max_gap_d: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dict with the per-time arrays (NaN and inf become None)."""
        return {
            "max_gap_d": float(self.max_gap_d),
            "n": int(self.ok.size),
            "n_ok": int(np.count_nonzero(self.ok)),
            "value": _json_list(self.value),
            "err": _json_list(self.err),
            "meas_err": _json_list(self.meas_err),
            "interp_err": _json_list(self.interp_err),
            "gap_d": _json_list(self.gap_d),
            "one_sided": _json_list(self.one_sided),
            "ok": _json_list(self.ok),
        }


def _window_curvature(t: np.ndarray, y: np.ndarray, s2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Second derivative and its variance for every interval between neighbouring samples.

    Interval ``k`` (between samples ``k`` and ``k + 1``) gets a weighted quadratic fit
    over the four samples ``k - 1 .. k + 2`` (the window slides inwards at the ends);
    with three samples the quadratic through them; with fewer, zero (unknown).
    """
    n = t.size
    n_int = max(n - 1, 0)
    if n < 3:
        return np.zeros(n_int), np.zeros(n_int)
    m = min(4, n)
    k = np.arange(n_int)
    start = np.clip(k - 1, 0, n - m)
    ii = start[:, None] + np.arange(m)[None, :]
    tw, yw, ww = t[ii], y[ii], 1.0 / np.maximum(s2[ii], _VAR_FLOOR)
    tc = tw.mean(axis=1, keepdims=True)
    hw = 0.5 * np.ptp(tw, axis=1, keepdims=True)
    good = hw[:, 0] > 0
    hw = np.where(hw > 0, hw, 1.0)
    u = (tw - tc) / hw
    A = np.stack([np.ones_like(u), u, u * u], axis=2)  # (n_int, m, 3)
    N = np.einsum("kmi,km,kmj->kij", A, ww, A)
    b = np.einsum("kmi,km,km->ki", A, ww, yw)
    # a window with repeated times can be singular: regularise only those
    bad = ~good | (np.abs(np.linalg.det(N)) <= 1e-300)
    N[bad] = np.eye(3)
    b[bad] = 0.0
    Ninv = np.linalg.inv(N)
    coef = np.einsum("kij,kj->ki", Ninv, b)
    scale = 2.0 / hw[:, 0] ** 2
    ypp = np.where(bad, 0.0, coef[:, 2] * scale)
    var = np.where(bad, 0.0, Ninv[:, 2, 2] * scale**2)
    return ypp, var


def _end_slopes(t: np.ndarray, s2: np.ndarray, window: float) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least-squares slope coefficients at every sample, backwards and forwards.

    Returns ``(back, fwd)``, each ``(n, 3)``: the slope at sample ``k`` is
    ``sum_j back[k, j] y[k - 2 + j]`` (from samples ``k - 2 .. k``) or
    ``sum_j fwd[k, j] y[k + j]`` (from ``k .. k + 2``), using only samples within
    ``window`` of sample ``k``; all-zero rows where fewer than two samples qualify.
    """
    n = t.size
    out = []
    for offsets in (np.array([-2, -1, 0]), np.array([0, 1, 2])):
        ii = np.arange(n)[:, None] + offsets[None, :]
        inside = (ii >= 0) & (ii < n)
        iic = np.clip(ii, 0, max(n - 1, 0))
        tw = t[iic]
        valid = inside & (np.abs(tw - t[:, None]) <= window)
        w = np.where(valid, 1.0 / np.maximum(s2[iic], _VAR_FLOOR), 0.0)
        sw = w.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            tm = np.where(sw > 0, (w * tw).sum(axis=1, keepdims=True) / sw, 0.0)
            sxx = (w * (tw - tm) ** 2).sum(axis=1, keepdims=True)
            coef = np.where(sxx > 0, w * (tw - tm) / sxx, 0.0)
        enough = (valid.sum(axis=1) >= 2)[:, None] & (sxx > 0)
        out.append(np.where(enough, coef, 0.0))
    return out[0], out[1]


def interpolate_series(t_at: Any, t: Any, y: Any, y_err: Any, *, max_gap_d: float) -> Interpolated:
    """Evaluate a sampled series (the target's magnitude in the other band) at other times.

    * Between two samples both within ``max_gap_d``: linear interpolation,
      ``y = (1 - w) y1 + w y2`` with ``w = (t - t1)/(t2 - t1)``; measurement
      variance ``(1 - w)^2 s1^2 + w^2 s2^2``.  The interpolation error of a
      function with second derivative ``y''`` is ``1/2 |y''| (t - t1)(t2 - t)``;
      ``y''`` comes from a weighted quadratic fit to the four samples around the
      interval, and ``sqrt(y''^2 + var(y''))`` is used so that a curvature hidden
      in the noise is not taken for zero.
    * With a usable sample within ``max_gap_d`` on one side only (the ends of a
      series, or next to a hole): the nearest sample plus the local slope times
      the gap (slope from a weighted line through up to three samples on that
      side, within ``4 max_gap_d``); the error adds ``|slope| x gap`` (as large
      as if no slope had been applied: one-sided data cannot tell whether the
      trend continues) and the curvature term ``1/2 |y''| gap^2``.  With a
      single sample nearby no variation can be estimated: the value is that
      sample with its own error, and ``max_gap_d`` is the only guard.
    * Farther than ``max_gap_d`` from every usable sample: ``ok = False``.

    Parameters
    ----------
    t_at : array_like
        Times to evaluate at (days; any order; NaN gives ``ok = False``).
    t, y, y_err : array_like
        The series: times (days, any order: sorted here), values and 1-sigma
        errors.  Samples with a non-finite time, value or error, or a negative
        error, are skipped.
    max_gap_d : float
        Largest distance (days) from a sample to a time it may be used for.

    Returns
    -------
    Interpolated
    """
    gap = _check_positive(max_gap_d, "max_gap_d")
    tq = _as_1d(t_at, "t_at")
    ts = _as_1d(t, "t")
    ys = _as_1d(y, "y", ts.size)
    es = _as_1d(y_err, "y_err", ts.size)
    keep = np.isfinite(ts) & np.isfinite(ys) & np.isfinite(es) & (es >= 0)
    order = np.argsort(ts[keep], kind="stable")
    ts, ys, es = ts[keep][order], ys[keep][order], es[keep][order]
    s2 = es**2
    n = ts.size
    m = tq.size
    value = np.full(m, np.nan)
    err = np.full(m, np.nan)
    meas = np.full(m, np.nan)
    interp = np.full(m, np.nan)
    gap_d = np.full(m, np.inf)
    one_sided = np.zeros(m, dtype=bool)
    ok = np.zeros(m, dtype=bool)
    if n == 0:
        return Interpolated(_ro(value), _ro(err), _ro(meas), _ro(interp), _ro(gap_d), _ro(one_sided, bool),
                            _ro(ok, bool), gap)

    finite_q = np.isfinite(tq)
    tqc = np.where(finite_q, tq, ts[0])
    right = np.searchsorted(ts, tqc, side="right")  # first sample after
    left = right - 1
    has_l = left >= 0
    has_r = right < n
    li = np.clip(left, 0, n - 1)
    ri = np.clip(right, 0, n - 1)
    dl = np.where(has_l, tqc - ts[li], np.inf)
    dr = np.where(has_r, ts[ri] - tqc, np.inf)
    in_l = has_l & (dl <= gap) & finite_q
    in_r = has_r & (dr <= gap) & finite_q
    exact = in_l & (dl == 0)

    # curvature per interval (interval k between samples k and k+1)
    ypp, ypp_var = _window_curvature(ts, ys, s2)
    curv = np.sqrt(ypp**2 + ypp_var)  # |y''| inflated by its own uncertainty
    # curvature at a sample, for extrapolation: the larger of the two intervals beside it
    if n >= 2:
        if n > 2:
            curv_at = np.concatenate([curv[:1], np.maximum(curv[:-1], curv[1:]), curv[-1:]])
        else:
            curv_at = np.repeat(curv, 2)
    else:
        curv_at = np.zeros(1)

    # --- two-sided linear interpolation
    both = in_l & in_r & ~exact
    if np.any(both):
        i1, i2 = li[both], ri[both]
        d1, d2 = dl[both], dr[both]
        h = ts[i2] - ts[i1]
        w = np.where(h > 0, d1 / np.where(h > 0, h, 1.0), 0.5)
        value[both] = (1.0 - w) * ys[i1] + w * ys[i2]
        meas[both] = np.sqrt((1.0 - w) ** 2 * s2[i1] + w**2 * s2[i2])
        interp[both] = 0.5 * curv[i1] * d1 * d2
        gap_d[both] = np.maximum(d1, d2)
    # --- exactly at a sample
    if np.any(exact):
        value[exact] = ys[li[exact]]
        meas[exact] = es[li[exact]]
        interp[exact] = 0.0
        gap_d[exact] = 0.0

    # --- one side only: nearest sample plus slope x gap
    fwd_only = in_l & ~in_r & ~exact  # extrapolate forwards from the left sample
    bwd_only = in_r & ~in_l  # backwards from the right sample
    if np.any(fwd_only | bwd_only):
        back, fwd = _end_slopes(ts, s2, _SLOPE_WINDOW * gap)
        for sel, coef, base, sign, dist, offsets in (
            (fwd_only, back, li, 1.0, dl, np.array([-2, -1, 0])),
            (bwd_only, fwd, ri, -1.0, dr, np.array([0, 1, 2])),
        ):
            if not np.any(sel):
                continue
            k = base[sel]
            d = dist[sel]
            c = coef[k]  # (q, 3)
            jj = np.clip(k[:, None] + offsets[None, :], 0, n - 1)
            slope = (c * ys[jj]).sum(axis=1)
            step = sign * d  # time from the sample to the query
            # value = y_k + slope * step: linear combination of the samples
            lin = step[:, None] * c
            lin = lin + (jj == k[:, None]) * (offsets[None, :] == 0)
            value[sel] = ys[k] + slope * step
            meas[sel] = np.sqrt((lin**2 * s2[jj]).sum(axis=1))
            interp[sel] = np.sqrt((slope * d) ** 2 + (0.5 * curv_at[k] * d * d) ** 2)
            gap_d[sel] = d
            one_sided[sel] = True

    ok = finite_q & (in_l | in_r)
    err = np.where(ok, np.sqrt(meas**2 + interp**2), np.nan)
    value = np.where(ok, value, np.nan)
    meas = np.where(ok, meas, np.nan)
    interp = np.where(ok, interp, np.nan)
    refused = ~ok
    gap_d = np.where(refused, np.where(finite_q, np.minimum(dl, dr), np.inf), gap_d)
    return Interpolated(
        value=_ro(value),
        err=_ro(err),
        meas_err=_ro(meas),
        interp_err=_ro(interp),
        gap_d=_ro(gap_d),
        one_sided=_ro(one_sided, bool),
        ok=_ro(ok, bool),
        max_gap_d=gap,
    )


# --------------------------------------------------------------------------- night reference


@dataclass(frozen=True)
class NightReference:
    """What a night's two ensemble solutions contribute to the transformation.

    Attributes
    ----------
    tie_colour_v : float
        ``c_tie``: catalogue B - V of the V ensemble's tie, ``sum_i u^V_i c_i``.
    ref_colour_std, ref_colour_std_err : float
        Standard B - V of the reference star (comparison stars with weights
        ``u_i`` summing to one) and its 1-sigma from the catalogue.
    ref_colour_inst, ref_colour_inst_err : float
        Its calibrated instrumental colour ``sum_i u_i (b~_i - v~_i)`` (comparison
        stars' colour-extinction-free calibrated mean magnitudes) and its 1-sigma
        from the photometry.
    kappa_b, kappa_b_err, kappa_v, kappa_v_err : float
        Second-order (colour) extinction in b and v (mag per airmass per mag of
        B - V) and 1-sigma; 0 where none is applied.
    cref_b, cref_v : float
        The colour each band's zero points refer to (NaN allowed where that
        band's kappa and its error are zero).
    cal_err_b, cal_err_v : float
        The bands' night calibration errors (ties to the catalogue).
    """

    tie_colour_v: float
    ref_colour_std: float
    ref_colour_std_err: float
    ref_colour_inst: float
    ref_colour_inst_err: float
    kappa_b: float = 0.0
    kappa_b_err: float = 0.0
    kappa_v: float = 0.0
    kappa_v_err: float = 0.0
    cref_b: float = float("nan")
    cref_v: float = float("nan")
    cal_err_b: float = 0.0
    cal_err_v: float = 0.0

    def __post_init__(self) -> None:
        _finite_fields(self, (
            "tie_colour_v", "ref_colour_std", "ref_colour_std_err", "ref_colour_inst", "ref_colour_inst_err",
            "kappa_b", "kappa_b_err", "kappa_v", "kappa_v_err", "cal_err_b", "cal_err_v",
        ), "night reference")
        for band in ("b", "v"):
            cref = float(getattr(self, f"cref_{band}"))
            object.__setattr__(self, f"cref_{band}", cref)
            used = getattr(self, f"kappa_{band}") != 0 or getattr(self, f"kappa_{band}_err") != 0
            if used and not math.isfinite(cref):
                raise InputError(
                    f"night reference cref_{band} must be finite when kappa_{band} or its error is not zero: the "
                    f"colour-extinction correction needs the colour the zero points refer to"
                )

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict (NaN becomes None)."""
        return {k: _json_float(getattr(self, k)) for k in self.__dataclass_fields__}


def night_reference(
    catalog_B: Any,
    catalog_B_err: Any,
    catalog_V: Any,
    catalog_V_err: Any,
    b_mean: Any,
    b_mean_err: Any,
    v_mean: Any,
    v_mean_err: Any,
    tie_weight_v: Any,
    coeffs: Coefficients,
    *,
    kappa_b: float = float("nan"),
    kappa_b_err: float = float("nan"),
    kappa_v: float = float("nan"),
    kappa_v_err: float = float("nan"),
    cref_b: float = float("nan"),
    cref_v: float = float("nan"),
    cal_err_b: float = 0.0,
    cal_err_v: float = 0.0,
) -> NightReference:
    """Build a :class:`NightReference` from per-comparison-star arrays.

    Weights: the reference star uses ``u_i`` = the V ensemble's tie weights
    ``tie_weight_v`` restricted to stars with a finite catalogue B and V and
    finite ``b_mean`` and ``v_mean``, renormalised to sum one.  The same ``u``
    gives ``tie_colour_v`` (exact when every V-tie star has both catalogue
    magnitudes, otherwise an approximation).

    ``ref_colour_std_err`` combines the catalogue errors,
    ``sum u_i^2 (sB_i^2 + sV_i^2 + s^2)``, where ``s^2`` is the excess scatter
    (Paule & Mandel 1982) of ``c_i - mu (b~_i - v~_i)`` among the stars beyond
    their errors (catalogue colours worse than quoted); when ``s^2`` had to be
    estimated the error is widened to the Student-t 68.27% quantile with
    ``n - 1`` degrees of freedom, as the ensemble's calibration error is.
    ``ref_colour_inst_err`` is ``sqrt(sum u_i^2 (sb~_i^2 + sv~_i^2))``.

    Colour extinction: a NaN ``kappa`` means the ensemble did not fit it; then
    ``kappa_v = 0`` and ``kappa_b = coeffs.k2_bv`` (errors from ``coeffs``), and
    the reference colour stands in for the colour the zero points refer to
    (without a colour term the zero points follow the weighted mean colour of
    the comparison stars).  A NaN error of a given kappa counts as zero.

    Parameters
    ----------
    catalog_B, catalog_B_err, catalog_V, catalog_V_err : array_like
        ``(n_star,)`` catalogue magnitudes and errors (NaN error counts as zero).
    b_mean, b_mean_err, v_mean, v_mean_err : array_like
        ``(n_star,)`` colour-extinction-free calibrated mean magnitudes of the
        comparison stars (with :mod:`varstar.ensemble`: ``catalog_mag +
        star_offset`` of the stars in the fit) and their 1-sigma.
    tie_weight_v : array_like
        ``(n_star,)`` the V ensemble's tie weights (``EnsembleSolution.tie_weight``).
    coeffs : Coefficients
        For ``mu`` (excess test) and the fallback ``k2_bv``.
    kappa_b, kappa_b_err, kappa_v, kappa_v_err, cref_b, cref_v : float
        ``colour_extinction``, ``colour_extinction_err`` and ``colour_reference``
        of the two ensembles.
    cal_err_b, cal_err_v : float
        ``calibration_err`` of the two ensembles.

    Returns
    -------
    NightReference

    Raises
    ------
    InputError
        No comparison star in the V tie has both catalogue colours and both
        calibrated means.
    """
    if not isinstance(coeffs, Coefficients):
        raise InputError(f"coeffs must be a Coefficients, got {type(coeffs).__name__}")
    u_all = _as_1d(tie_weight_v, "tie_weight_v")
    n = u_all.size
    cB, cV = _as_1d(catalog_B, "catalog_B", n), _as_1d(catalog_V, "catalog_V", n)
    bm, vm = _as_1d(b_mean, "b_mean", n), _as_1d(v_mean, "v_mean", n)
    eB, eV, eb, ev = (
        np.nan_to_num(np.abs(_as_1d(a, nm, n)), nan=0.0)
        for a, nm in ((catalog_B_err, "catalog_B_err"), (catalog_V_err, "catalog_V_err"),
                      (b_mean_err, "b_mean_err"), (v_mean_err, "v_mean_err"))
    )
    sel = np.isfinite(cB) & np.isfinite(cV) & np.isfinite(bm) & np.isfinite(vm) & np.isfinite(u_all) & (u_all > 0)
    if not np.any(sel):
        raise InputError(
            "no comparison star in the V ensemble's tie has catalogue B and V and calibrated means in both bands: "
            "the colour transformation needs at least one (better three or more); give catalogue B magnitudes"
        )
    u = u_all[sel] / u_all[sel].sum()
    c = (cB - cV)[sel]
    r = (bm - vm)[sel]
    ref_std = float(u @ c)
    ref_inst = float(u @ r)
    cat_var = eB[sel] ** 2 + eV[sel] ** 2
    inst_var = eb[sel] ** 2 + ev[sel] ** 2
    mu = coeffs.mu_bv
    s2 = _paule_mandel(c - mu * r, cat_var + mu * mu * inst_var)
    ref_std_err = math.sqrt(float(np.sum(u**2 * (cat_var + s2))))
    n_sel = int(np.count_nonzero(sel))
    if s2 > 0 and n_sel >= 2:
        ref_std_err *= float(special.stdtrit(n_sel - 1, _ONE_SIGMA_QUANTILE))
    ref_inst_err = math.sqrt(float(np.sum(u**2 * inst_var)))

    def pick(k: float, k_err: float, fallback: float, fallback_err: float, cref: float) -> tuple[float, float, float]:
        k, k_err, cref = float(k), float(k_err), float(cref)
        if math.isfinite(k):
            return k, (k_err if math.isfinite(k_err) else 0.0), cref
        return fallback, fallback_err, ref_std

    kb, kb_err, crb = pick(kappa_b, kappa_b_err, coeffs.k2_bv, coeffs.k2_bv_err, cref_b)
    kv, kv_err, crv = pick(kappa_v, kappa_v_err, 0.0, 0.0, cref_v)
    return NightReference(
        tie_colour_v=ref_std,
        ref_colour_std=ref_std,
        ref_colour_std_err=ref_std_err,
        ref_colour_inst=ref_inst,
        ref_colour_inst_err=ref_inst_err,
        kappa_b=kb,
        kappa_b_err=kb_err,
        kappa_v=kv,
        kappa_v_err=kv_err,
        cref_b=crb,
        cref_v=crv,
        cal_err_b=float(cal_err_b),
        cal_err_v=float(cal_err_v),
    )


# --------------------------------------------------------------------------- applying


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
    sys_err : numpy.ndarray
        Systematic 1-sigma common to the night (coefficients, reference colour,
        colour extinction, the band's calibration), not included in ``mag_err``.
    colour, colour_err, colour_sys_err : numpy.ndarray
        The target's B - V at this time, its random and systematic 1-sigma.
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
    sys_err: np.ndarray
    colour: np.ndarray
    colour_err: np.ndarray
    colour_sys_err: np.ndarray
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
            return _json_float(np.median(a[okm])) if np.any(okm) else None

        return {
            "band": self.band,
            "n_exposures": int(okm.size),
            "n_transformed": int(np.count_nonzero(okm)),
            "n_refused": int(np.count_nonzero(~okm)),
            "n_one_sided": int(np.count_nonzero(self.one_sided & okm)),
            "median_mag_err": med(self.mag_err),
            "median_sys_err": med(self.sys_err),
            "median_colour": med(self.colour),
            "median_colour_err": med(self.colour_err),
            "median_colour_sys_err": med(self.colour_sys_err),
            "median_interp_err": med(self.interp_err),
        }


@dataclass(frozen=True, eq=False)
class TransformedSeries:
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

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe summary (per-exposure values: :meth:`to_frame`)."""
        return {
            "method": "differential transformation to the standard system (Hardie 1962; Henden & Kaitchuck 1982)",
            "max_gap_d": float(self.max_gap_d),
            "coefficients": self.coefficients.to_dict(),
            "reference": self.reference.to_dict(),
            "bands": {"V": self.V.summary(), "B": self.B.summary()},
            "warnings": list(self.warnings),
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
                        "sys_err": tb.sys_err,
                        "colour": tb.colour,
                        "colour_err": tb.colour_err,
                        "colour_sys_err": tb.colour_sys_err,
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
        return _ro(np.where(ok, arr, np.nan))

    return TransformedBand(
        band=own_band,
        time=_ro(t),
        mag=masked(mag),
        mag_err=masked(mag_err),
        sys_err=masked(sys_err),
        colour=masked(c),
        colour_err=masked(colour_err),
        colour_sys_err=masked(colour_sys),
        paired_mag=masked(other.value),
        paired_err=masked(other.err),
        interp_err=masked(other.interp_err),
        gap_d=_ro(other.gap_d),
        one_sided=_ro(other.one_sided & ok, bool),
        ok=_ro(ok, bool),
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
    gap = _check_positive(max_gap_d, "max_gap_d")
    tv = _as_1d(t_v, "t_v")
    vv = _as_1d(v, "v", tv.size)
    ve = _as_1d(v_err, "v_err", tv.size)
    xv = _as_1d(airmass_v, "airmass_v", tv.size)
    tb = _as_1d(t_b, "t_b")
    bb = _as_1d(b, "b", tb.size)
    be = _as_1d(b_err, "b_err", tb.size)
    xb = _as_1d(airmass_b, "airmass_b", tb.size)
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


# --------------------------------------------------------------------------- temperature


def ballesteros_temperature(
    bv: Any, bv_err: Any = None, ebv: Any = 0.0, ebv_err: Any = 0.0
) -> tuple[Any, Any]:
    """Effective temperature from B - V (Ballesteros 2012, EPL 97, 34008).

    ``T = 4600 K [1 / (0.92 c + 1.7) + 1 / (0.92 c + 0.62)]`` with the dereddened
    colour ``c = (B - V) - E(B - V)``.  The relation comes from black bodies seen
    through idealised B and V filters, calibrated on main-sequence stars; it is
    used here only for ``-0.4 <= c <= 2.0`` (roughly 22,000 K to 2,800 K; the
    first term's pole is at c = -0.67 and the relation is meaningless beyond
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
