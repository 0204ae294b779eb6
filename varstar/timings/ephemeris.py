"""The ephemeris: its model, O - C, predictions and fits to timings (pure core).

* :class:`Ephemeris` ``T(E) = T0 + P E + Q E**2`` (BJD_TDB, days) and
  :func:`ephemeris_from_table` (a target's ``[ephemeris]`` TOML table);
* :func:`predict_extrema` (the extrema in an interval) and :func:`o_minus_c`;
* :func:`fit_ephemeris`: weighted linear and quadratic ephemerides from
  timings, with an F-test for the quadratic term and the period change
  (:class:`EphemerisFit`, each fit a :class:`PolynomialEphemeris`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from ..errors import InputError
from ..results import Result, sd, to_dict
from .checks import KINDS, check_kind

__all__ = [
    "BJD_PLAUSIBLE",
    "DAYS_PER_YEAR",
    "SECONDS_PER_DAY",
    "Ephemeris",
    "EphemerisFit",
    "PolynomialEphemeris",
    "ephemeris_from_table",
    "fit_ephemeris",
    "o_minus_c",
    "predict_extrema",
]

#: Plausible BJD_TDB range for an epoch: JD 2300000 is 1585, JD 2600000 is 2406.
BJD_PLAUSIBLE = (2_300_000.0, 2_600_000.0)
SECONDS_PER_DAY = 86400.0
#: Julian year in days (IAU).
DAYS_PER_YEAR = 365.25
_EPHEMERIS_KEYS = ("epoch", "period", "quadratic", "kind", "time_system", "epoch_err", "period_err", "quadratic_err")


# --------------------------------------------------------------------------- the model


@dataclass(frozen=True)
class Ephemeris(Result):
    """``T(E) = epoch + period E + quadratic E**2`` (BJD_TDB, days).

    Attributes
    ----------
    epoch
        T0, BJD_TDB of cycle 0.
    period
        P in days (the period at cycle 0).
    quadratic
        Q in days; the period at cycle E is ``P + 2 Q E`` (dP/dE = 2Q).
    kind
        ``"minimum"`` (cycle 0 is a minimum of light; half-integer cycles are
        secondary minima) or ``"maximum"``.
    epoch_err, period_err, quadratic_err
        Standard errors, NaN when unknown.
    """

    epoch: float
    period: float
    quadratic: float = 0.0
    kind: str = "minimum"
    epoch_err: float = math.nan
    period_err: float = math.nan
    quadratic_err: float = math.nan

    def __post_init__(self) -> None:
        for name in ("epoch", "period", "quadratic", "epoch_err", "period_err", "quadratic_err"):
            v = getattr(self, name)
            is_number = not isinstance(v, bool) and isinstance(v, (int, float, np.floating, np.integer))
            if not name.endswith("_err") and not (is_number and math.isfinite(v)):
                raise InputError(f"ephemeris {name} must be a finite number, got {v!r}")
            if not is_number:
                raise InputError(f"ephemeris {name} must be a number (NaN when unknown), got {v!r}")
            # Plain floats, so that the JSON form writes 2460000.0 for an integer epoch (errors: NaN when unknown).
            object.__setattr__(self, name, float(v))
        if self.period <= 0:
            raise InputError(f"ephemeris period must be positive, got {self.period}")
        check_kind(self.kind, "ephemeris kind")

    def time_of(self, cycle: Any) -> np.ndarray | float:
        """BJD_TDB of cycle ``E`` (any real E; half-integers are secondary minima)."""
        e = np.asarray(cycle, dtype=float)
        out = self.epoch + self.period * e + self.quadratic * e * e
        return float(out) if out.ndim == 0 else out

    def cycle_of(self, bjd_tdb: Any) -> np.ndarray | float:
        """Real-valued cycle number E with ``time_of(E) = bjd_tdb``.

        For ``Q != 0`` the root of ``Q E**2 + P E - (t - T0) = 0`` that continues
        the linear ephemeris (E -> (t - T0)/P as Q -> 0) is returned, written as
        ``2 (t - T0) / (P + sqrt(P**2 + 4 Q (t - T0)))`` to avoid cancellation.
        Beyond the turning point of a decreasing period (no real root) the result
        is NaN.
        """
        d = np.asarray(bjd_tdb, dtype=float) - self.epoch
        with np.errstate(invalid="ignore"):
            disc = self.period**2 + 4.0 * self.quadratic * d
            out = np.where(disc >= 0.0, 2.0 * d / (self.period + np.sqrt(np.maximum(disc, 0.0))), np.nan)
        return float(out) if out.ndim == 0 else out

    def period_at(self, cycle: Any) -> np.ndarray | float:
        """Instantaneous period ``P + 2 Q E`` (days) at cycle E."""
        e = np.asarray(cycle, dtype=float)
        out = self.period + 2.0 * self.quadratic * e
        return float(out) if out.ndim == 0 else out

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict (unknown errors become None).

        Written out on purpose: the JSON form also names the time system
        (``"time_system": "BJD_TDB"``, always), which is not a field.
        """
        out = to_dict(self)
        return {**{k: out.pop(k) for k in ("epoch", "period", "quadratic", "kind")}, "time_system": "BJD_TDB", **out}


def _number(table: Mapping, key: str, where: str, *, required: bool) -> float | None:
    v = table.get(key)
    if v is None:
        if required:
            raise InputError(f"{where}.{key} is missing: give it as a number")
        return None
    from ..inputs import finite_number  # the one numeric check (huge integers included)

    return finite_number(v, f"{where}.{key}")


def ephemeris_from_table(table: Mapping, where: str) -> Ephemeris:
    """Validate an ``[ephemeris]`` TOML table and return the :class:`Ephemeris`.

    Parameters
    ----------
    table
        Keys ``epoch`` (BJD_TDB) and ``period`` (days) required; optional
        ``quadratic`` (days, default 0), ``kind`` (``"minimum"`` by default or
        ``"maximum"``), ``time_system`` (only ``"BJD_TDB"``), and
        ``epoch_err``, ``period_err``, ``quadratic_err`` (non-negative).
    where
        How to name the table in messages, e.g. ``"star.toml: [ephemeris]"``;
        keys are appended as ``{where}.{key}``.

    Raises
    ------
    InputError
        Naming ``where`` and the key, and saying what to do: unknown keys, a
        non-positive or non-finite period, an epoch that looks like an MJD or a
        reduced JD (with what to add), an epoch outside the plausible BJD
        range, a time system other than BJD_TDB, an unknown ``kind``.
    """
    if not isinstance(table, Mapping):
        raise InputError(f"{where} must be a table with epoch and period")
    unknown = sorted(set(table) - set(_EPHEMERIS_KEYS))
    if unknown:
        raise InputError(f"{where}: unknown key(s) {', '.join(unknown)}; known keys are {', '.join(_EPHEMERIS_KEYS)}")
    ts = table.get("time_system", "BJD_TDB")
    if not isinstance(ts, str) or ts.strip().upper() != "BJD_TDB":
        raise InputError(
            f"{where}.time_system is {ts!r}: only BJD_TDB is accepted; convert the epoch to BJD_TDB "
            "(HJD and JD(UTC) differ from it by up to minutes) and set time_system = \"BJD_TDB\" or leave it out"
        )
    period = _number(table, "period", where, required=True)
    if period <= 0:
        raise InputError(f"{where}.period must be positive (days), got {period:g}")
    epoch = _number(table, "epoch", where, required=True)
    if 0.0 < epoch < 100_000.0:
        raise InputError(
            f"{where}.epoch = {epoch:g} looks like a shortened date, not a full BJD_TDB: an MJD (JD - 2400000.5) needs "
            "2400000.5 added, a reduced JD (JD - 2400000) needs 2400000 added (and a date given as JD - 2450000 "
            "needs 2450000 added); give the full BJD_TDB, e.g. 2460123.4567"
        )
    if not (BJD_PLAUSIBLE[0] <= epoch <= BJD_PLAUSIBLE[1]):
        raise InputError(
            f"{where}.epoch = {epoch:g} is outside the plausible BJD_TDB range "
            f"{BJD_PLAUSIBLE[0]:.0f}-{BJD_PLAUSIBLE[1]:.0f} (years 1585-2406); give the full BJD_TDB of a minimum or maximum"
        )
    quadratic = _number(table, "quadratic", where, required=False) or 0.0
    kind = table.get("kind", "minimum")
    if kind not in KINDS:
        raise InputError(f"{where}.kind must be \"minimum\" or \"maximum\", got {kind!r}")
    errs = {}
    for key in ("epoch_err", "period_err", "quadratic_err"):
        v = _number(table, key, where, required=False)
        if v is not None and v < 0:
            raise InputError(f"{where}.{key} must not be negative, got {v:g}")
        errs[key] = math.nan if v is None else v
    return Ephemeris(epoch=epoch, period=period, quadratic=quadratic, kind=kind, **errs)


def predict_extrema(
    ephemeris: Ephemeris, start_bjd: float, end_bjd: float, *, secondary: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Cycles and BJD_TDB of the predicted extrema in ``[start_bjd, end_bjd]``.

    Parameters
    ----------
    ephemeris
        The ephemeris.
    start_bjd, end_bjd
        The interval (BJD_TDB).
    secondary
        Also return the secondary minima (half-integer cycles).  Only for an
        ephemeris of minima.

    Returns
    -------
    (cycles, bjd_tdb)
        Float arrays in time order; cycles are integers (or half-integers).
    """
    if not (math.isfinite(start_bjd) and math.isfinite(end_bjd)) or end_bjd < start_bjd:
        raise InputError(f"predict_extrema: give a finite interval with start <= end, got {start_bjd}, {end_bjd}")
    if secondary and ephemeris.kind != "minimum":
        raise InputError("secondary extrema exist only for an ephemeris of minima (kind = \"minimum\")")
    e0, e1 = ephemeris.cycle_of(start_bjd), ephemeris.cycle_of(end_bjd)
    if not (math.isfinite(e0) and math.isfinite(e1)):
        raise InputError(
            f"the quadratic ephemeris has no cycle at BJD_TDB {start_bjd:.5f}-{end_bjd:.5f}: its period "
            "P + 2QE reaches zero there; the ephemeris cannot be extrapolated so far"
        )
    step = 0.5 if secondary else 1.0
    lo = math.floor(min(e0, e1) / step) - 1
    hi = math.ceil(max(e0, e1) / step) + 1
    cycles = np.arange(lo, hi + 1, dtype=float) * step
    times = np.asarray(ephemeris.time_of(cycles), dtype=float)
    keep = (times >= start_bjd) & (times <= end_bjd)
    order = np.argsort(times[keep], kind="stable")
    return cycles[keep][order], times[keep][order]


def o_minus_c(
    times: Any, ephemeris: Ephemeris, *, secondary_allowed: bool = True
) -> tuple[np.ndarray, np.ndarray]:
    """Cycle numbers and O - C (days) of observed times against an ephemeris.

    Each time gets the nearest integer cycle, or, for an ephemeris of minima with
    ``secondary_allowed``, the nearest half-integer.  A primary minimum observed
    more than P/4 from its prediction is therefore taken for a secondary:
    decide the type from the light curve when O - C can be that large.

    Returns
    -------
    (cycles, o_minus_c)
        Float arrays of the input's shape.
    """
    t = np.asarray(times, dtype=float)
    if not np.all(np.isfinite(t)):
        raise InputError("o_minus_c: every time must be a finite BJD_TDB")
    e = np.asarray(ephemeris.cycle_of(t), dtype=float)
    if not np.all(np.isfinite(e)):
        raise InputError("o_minus_c: some times lie beyond the turning point of the quadratic ephemeris")
    half = secondary_allowed and ephemeris.kind == "minimum"
    cycles = np.round(2.0 * e) / 2.0 if half else np.round(e)
    return cycles, t - np.asarray(ephemeris.time_of(cycles), dtype=float)


# --------------------------------------------------------------------------- fits


@dataclass(frozen=True)
class PolynomialEphemeris(Result):
    """One weighted least-squares fit ``T = T0 + P E (+ Q E^2)``.

    Attributes
    ----------
    coefficients
        (T0, P) or (T0, P, Q), days.
    errors
        Their standard errors (covariance scaled, see :func:`fit_ephemeris`).
    covariance
        Scaled covariance matrix.
    chi2, dof
        Weighted chi-square and degrees of freedom.
    error_scale
        ``sqrt(max(1, chi2/dof))``, the factor applied to the formal errors.
    """

    coefficients: tuple[float, ...]
    errors: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    chi2: float
    dof: int
    error_scale: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict.

        Written out on purpose: the coefficients and their errors appear under
        the ephemeris' names (``epoch``, ``epoch_err``, ``period``, ...), as in
        :meth:`Ephemeris.to_dict`, not as two lists.
        """
        out = to_dict(self)
        names = ("epoch", "period", "quadratic")[: len(self.coefficients)]
        named: dict[str, Any] = {}
        for name, c, e in zip(names, out.pop("coefficients"), out.pop("errors")):
            named[name] = c
            named[f"{name}_err"] = e
        return {**named, **out}


@dataclass(frozen=True)
class EphemerisFit(Result):
    """Linear and quadratic ephemerides fitted to timings, and the chosen one.

    Attributes
    ----------
    model
        ``"linear"`` or ``"quadratic"``: the one the top-level numbers describe.
    epoch, period, quadratic, epoch_err, period_err, quadratic_err
        Of the chosen model (quadratic 0 and its error NaN for the linear one).
    chi2, dof
        Of the chosen model.
    linear, quadratic_fit
        Both fits (``quadratic_fit`` None with fewer than 3 timings).
    f_statistic, f_pvalue
        F-test of the quadratic term, ``F = (chi2_lin - chi2_quad) / (chi2_quad / (N - 3))``
        against F(1, N - 3) (NaN with fewer than 4 timings).
    alpha
        Significance level of the test.
    quadratic_significant
        ``f_pvalue < alpha``.
    dp_de, dp_de_err
        ``2 Q`` from the quadratic fit (days per cycle).
    dp_dt, dp_dt_err
        ``2 Q / P`` (dimensionless, days per day).
    dp_dt_s_per_yr, dp_dt_s_per_yr_err
        The same in seconds per Julian year.
    note
        Says when the quadratic term is not significant (the period change is
        then not established) or could not be tested.
    kind
        Kind of the timings (minimum or maximum).
    n_timings
        Number of timings.
    residuals
        O - C of each timing against the chosen model (days).
    """

    model: str
    epoch: float
    period: float
    quadratic: float
    epoch_err: float
    period_err: float
    quadratic_err: float
    chi2: float
    dof: int
    linear: PolynomialEphemeris
    quadratic_fit: PolynomialEphemeris | None
    f_statistic: float
    f_pvalue: float
    alpha: float
    quadratic_significant: bool
    dp_de: float
    dp_de_err: float
    dp_dt: float
    dp_dt_err: float
    dp_dt_s_per_yr: float
    dp_dt_s_per_yr_err: float
    note: str
    kind: str
    n_timings: int
    residuals: tuple[float, ...] = field(default=())

    def to_ephemeris(self) -> Ephemeris:
        """The chosen ephemeris, with its errors."""
        return Ephemeris(
            epoch=self.epoch,
            period=self.period,
            quadratic=self.quadratic,
            kind=self.kind,
            epoch_err=self.epoch_err,
            period_err=self.period_err,
            quadratic_err=self.quadratic_err,
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict.

        Written out on purpose: the two nested fits keep their own JSON form
        (:meth:`PolynomialEphemeris.to_dict`, named coefficients), which the
        generic walk of the fields would replace by lists.
        """
        out = to_dict(self)
        out["linear"] = self.linear.to_dict()
        out["quadratic_fit"] = None if self.quadratic_fit is None else self.quadratic_fit.to_dict()
        return {**{k: out.pop(k) for k in ("model", "kind", "n_timings")}, **out}  # what the fit is, first


def _wls(e: np.ndarray, t: np.ndarray, w: np.ndarray, degree: int) -> tuple[PolynomialEphemeris, np.ndarray]:
    """Weighted polynomial least squares in E; returns the fit and the model times.

    Solved in scaled, shifted variables (E / max|E|, t - t_ref) for conditioning
    and transformed back exactly.  Covariance ``(X^T W X)^-1`` times
    ``max(1, chi2/dof)``: errors are inflated when the scatter exceeds the
    stated errors but never shrunk below them (with few timings chi2/dof
    fluctuates a lot, and a lucky small value should not promise more than the
    timings' own errors give).  With dof = 0 the formal errors are kept.
    """
    t_ref = float(np.average(t, weights=w))
    s = float(max(np.max(np.abs(e)), 1.0))
    x = np.stack([(e / s) ** k for k in range(degree + 1)], axis=1)
    sw = np.sqrt(w)
    coef_s, *_ = np.linalg.lstsq(x * sw[:, None], (t - t_ref) * sw, rcond=None)
    resid = (t - t_ref) - x @ coef_s
    chi2 = float(np.sum(w * resid**2))
    dof = int(t.size - (degree + 1))
    cov_s = np.linalg.inv((x * w[:, None]).T @ x)
    factor = max(1.0, chi2 / dof) if dof > 0 else 1.0
    scale = np.array([s**-k for k in range(degree + 1)])
    coef = coef_s * scale
    coef[0] += t_ref
    cov = cov_s * np.outer(scale, scale) * factor
    fit = PolynomialEphemeris(
        coefficients=tuple(float(c) for c in coef),
        errors=tuple(sd(cov[i, i]) for i in range(degree + 1)),
        covariance=tuple(tuple(float(v) for v in row) for row in cov),
        chi2=chi2,
        dof=dof,
        error_scale=math.sqrt(factor),
    )
    return fit, t_ref + x @ coef_s


def _timing_arrays(cycles: Any, times: Any, errs: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cycles, times and errors of timings as finite 1-D float arrays of one length (errors positive)."""
    e = np.asarray(cycles, dtype=float)
    t = np.asarray(times, dtype=float)
    s = np.asarray(errs, dtype=float)
    if e.ndim != 1 or e.shape != t.shape or e.shape != s.shape:
        raise InputError("fit_ephemeris: cycles, times and errors must be 1-D arrays of one length")
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(t)) and np.all(np.isfinite(s))):
        raise InputError("fit_ephemeris: cycles, times and errors must all be finite")
    if np.any(s <= 0):
        raise InputError("fit_ephemeris: every timing error must be positive")
    return e, t, s


def _quadratic_test(
    lin: PolynomialEphemeris, quad: PolynomialEphemeris | None, alpha: float
) -> tuple[float, float, bool]:
    """F-test of the quadratic term: ``(F, p-value, p < alpha)``.

    ``F = (chi2_lin - chi2_quad) / (chi2_quad / dof_quad)`` against F(1,
    dof_quad); NaN (and not significant) without a quadratic fit or with no
    degree of freedom left.  A quadratic through every timing exactly (chi2 0)
    gives F = inf, p = 0.
    """
    if quad is None or quad.dof < 1:
        return math.nan, math.nan, False
    from scipy.stats import f as f_dist

    if quad.chi2 > 0:
        f_stat = (lin.chi2 - quad.chi2) / (quad.chi2 / quad.dof)
        p_val = float(f_dist.sf(f_stat, 1, quad.dof))
    else:
        f_stat, p_val = math.inf, 0.0
    return f_stat, p_val, bool(p_val < alpha)


def _period_change(quad: PolynomialEphemeris | None) -> tuple[float, float, float, float]:
    """``(dP/dE, its error, dP/dt, its error)`` from the quadratic fit; NaN without one.

    dP/dE = 2Q and dP/dt = 2Q/P (REFERENCES.md "Timings").
    """
    if quad is None:
        return math.nan, math.nan, math.nan, math.nan
    q, q_err, p0 = quad.coefficients[2], quad.errors[2], quad.coefficients[1]
    p_err = quad.errors[1]
    cov_pq = quad.covariance[1][2]
    dp_de, dp_de_err = 2.0 * q, 2.0 * q_err
    dp_dt = 2.0 * q / p0
    # Linear propagation of (P, Q) with their covariance.
    grad = np.array([-2.0 * q / p0**2, 2.0 / p0])
    cpq = np.array([[p_err**2, cov_pq], [cov_pq, q_err**2]])
    dp_dt_err = float(math.sqrt(max(grad @ cpq @ grad, 0.0)))
    return dp_de, dp_de_err, dp_dt, dp_dt_err


def fit_ephemeris(
    cycles: Any,
    times: Any,
    errs: Any,
    *,
    quadratic: bool | Literal["auto"] = "auto",
    kind: str = "minimum",
    alpha: float = 0.01,
) -> EphemerisFit:
    """Fit a linear and a quadratic ephemeris to timings by weighted least squares.

    ``T(E) = T0 + P E + Q E^2`` (REFERENCES.md "Timings"): dP/dE = 2Q and
    dP/dt = 2Q/P.  Weights are ``1/err^2``; the covariance is scaled by the
    reduced chi-square when it exceeds 1 (see :func:`_wls`).

    Parameters
    ----------
    cycles
        E of each timing (integers, or half-integers for secondaries).
    times, errs
        BJD_TDB and standard errors (days, positive).
    quadratic
        True: report the quadratic ephemeris; False: the linear one; ``"auto"``:
        the quadratic one only when its term is significant by the F-test.
    kind
        Kind of the timings, carried into :meth:`EphemerisFit.to_ephemeris`.
    alpha
        Significance level of the F-test (default 0.01: a period change is a
        claim worth a strict test).

    Raises
    ------
    InputError
        Fewer than 2 timings (3 for ``quadratic=True``) or too few distinct
        cycles, bad values.
    """
    check_kind(kind)
    if quadratic not in (True, False, "auto"):
        raise InputError(f"fit_ephemeris: quadratic must be True, False or 'auto', got {quadratic!r}")
    if not 0.0 < alpha < 1.0:
        raise InputError(f"fit_ephemeris: alpha must be between 0 and 1, got {alpha}")
    e, t, s = _timing_arrays(cycles, times, errs)
    n = e.size
    n_distinct = np.unique(e).size
    need = 3 if quadratic is True else 2
    if n < need or n_distinct < need:
        raise InputError(
            f"fit_ephemeris: {n} timings at {n_distinct} distinct cycles; a "
            f"{'quadratic' if quadratic is True else 'linear'} ephemeris needs at least {need} at {need} distinct cycles"
        )
    w = 1.0 / s**2
    lin, lin_model = _wls(e, t, w, 1)
    quad, quad_model = (None, None)
    if n_distinct >= 3:
        quad, quad_model = _wls(e, t, w, 2)
    f_stat, p_val, significant = _quadratic_test(lin, quad, alpha)
    use_quad = quad is not None and (quadratic is True or (quadratic == "auto" and significant))
    dp_de, dp_de_err, dp_dt, dp_dt_err = _period_change(quad)
    per_yr = SECONDS_PER_DAY * DAYS_PER_YEAR
    if quad is None:
        note = "only two distinct cycles: no quadratic term can be fitted"
    elif math.isnan(p_val):
        note = "three timings fix a quadratic exactly: its significance cannot be tested; observe more"
    elif not significant:
        note = (
            f"the quadratic term is not significant (F-test p = {p_val:.3g} >= {alpha:g}): no period change is "
            "established; dP/dE and dP/dt are given for reference only"
        )
    else:
        note = ""
    chosen, model = (quad, quad_model) if use_quad else (lin, lin_model)
    c = chosen.coefficients
    return EphemerisFit(
        model="quadratic" if use_quad else "linear",
        epoch=c[0],
        period=c[1],
        quadratic=c[2] if use_quad else 0.0,
        epoch_err=chosen.errors[0],
        period_err=chosen.errors[1],
        quadratic_err=chosen.errors[2] if use_quad else math.nan,
        chi2=chosen.chi2,
        dof=chosen.dof,
        linear=lin,
        quadratic_fit=quad,
        f_statistic=float(f_stat),
        f_pvalue=float(p_val),
        alpha=float(alpha),
        quadratic_significant=significant,
        dp_de=float(dp_de),
        dp_de_err=float(dp_de_err),
        dp_dt=float(dp_dt),
        dp_dt_err=float(dp_dt_err),
        dp_dt_s_per_yr=float(dp_dt * per_yr),
        dp_dt_s_per_yr_err=float(dp_dt_err * per_yr),
        note=note,
        kind=kind,
        n_timings=int(n),
        residuals=tuple(float(r) for r in (t - model)),
    )
