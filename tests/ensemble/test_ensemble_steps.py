"""One step of the ensemble solution at a time (varstar.ensemble's modules).

tests/ensemble/test_ensemble.py judges the whole solution on simulated nights; here each
step function is checked on its own, on small hand-built arrays or on simulated
data with fixed seeds and a known truth.  The source of every expected value is
named beside the check: numpy.linalg.lstsq on the same weighted system, scipy's
chi-square distribution, a defining equation, hand arithmetic or the simulation's
own truth (judged with binomial or standard-error tolerances).
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy import stats

from varstar.ensemble import EnsembleSettings, EnsembleSolution, paule_mandel, solve_ensemble
from varstar.ensemble.inputs import (
    NOT_LINKED,
    ComparisonGrid,
    StarVerdicts,
    check_inputs,
    comparison_grid,
    largest_linked_group,
    select_comparisons,
    usable_comparisons,
)
from varstar.ensemble.iteration import (
    ClipStep,
    IterationResult,
    apply_clips,
    choose_rejection,
    excess_change,
    final_fit,
    find_outliers,
    iterate_ensemble,
    rejection_reason,
    update_excess,
    variability_test,
)
from varstar.ensemble.linear import (
    AIRMASS_MIN_SPAN,
    COLOUR_MIN_SPAN,
    ColourTerm,
    colour_regressor,
    colour_step,
    solve_weighted,
    zero_point_variance,
)
from varstar.ensemble.solve import calibrate_measurements, star_diagnostics
from varstar.ensemble.tie import CatalogTie, calibrate, select_tie
from varstar.ensemble.vetting import (
    MAD_TO_SIGMA,
    chi2_logsf,
    column_median,
    components,
    robust_scale_extra,
    solve_excess,
    solve_excess_grouped,
    star_vs_others,
    trend_jumps,
    vet_exposures,
)
from varstar.errors import ReductionError


def binomial_band(p: float, n: int, k: float = 3.0) -> float:
    """k-sigma half width of a binomial fraction p from n trials."""
    return k * math.sqrt(p * (1.0 - p) / n)


def ensemble_data(seed: int, n_exp: int = 60, k: int = 6, missing: float = 0.0):
    """Honeycutt's model Y_ji = M_i + z_j + noise with known errors (invented values).

    Returns W (1/sigma^2, 0 where missing), U, Y (0 where missing), S2 (1 where missing).
    """
    rng = np.random.default_rng(seed)
    s = rng.uniform(0.005, 0.02, (n_exp, k))
    U = rng.random((n_exp, k)) >= missing
    U[:, 0] = True  # keeps the ensemble linked
    Y = rng.uniform(11.0, 14.0, k)[None, :] + rng.normal(0.0, 0.3, n_exp)[:, None] + rng.normal(0, 1, (n_exp, k)) * s
    W = np.where(U, 1.0 / s**2, 0.0)
    return W, U, np.where(U, Y, 0.0), np.where(U, s**2, 1.0)


def dense_design(jj: np.ndarray, ii: np.ndarray, n_exp: int, k: int) -> np.ndarray:
    """Full design matrix of m_ij = M_i + z_j: columns M_0..M_{k-1}, z_0..z_{n_exp-1}."""
    A = np.zeros((jj.size, k + n_exp))
    A[np.arange(jj.size), ii] = 1.0
    A[np.arange(jj.size), k + jj] = 1.0
    return A


def night_inputs(n_exp: int = 30, n_star: int = 5, seed: int = 0) -> dict:
    """Arguments of solve_ensemble / check_inputs for a small invented night (stars 0..3 comparisons)."""
    rng = np.random.default_rng(seed)
    ee, ss = (a.ravel() for a in np.meshgrid(np.arange(n_exp), np.arange(n_star), indexing="ij"))
    true = rng.uniform(11.0, 13.0, n_star)
    zp = 0.2 * np.linspace(1.0, 1.5, n_exp)
    err = np.full(ee.size, 0.01)
    mag = true[ss] + zp[ee] + rng.normal(0.0, 0.01, ee.size)
    is_comp = np.arange(n_star) < n_star - 1
    cat = np.where(is_comp, true, np.nan)
    return dict(
        exposure=ee, star=ss, mag=mag, mag_err=err, n_exposures=n_exp, is_comparison=is_comp,
        catalog_mag=cat, catalog_err=np.full(n_star, 0.01), time=np.linspace(0.0, 0.2, n_exp),
        airmass=np.linspace(1.0, 1.5, n_exp),
    )


def _checked(**kw):
    args = night_inputs()
    args.update(kw)
    e, s, m, me = (args.pop(n) for n in ("exposure", "star", "mag", "mag_err"))
    return check_inputs(e, s, m, me, **args)


# =========================================================================== inputs


def test_check_inputs_normalises_and_labels():
    # hand arithmetic: integral float indices are accepted, NaN catalogue errors count as 0
    # and negative ones by their size; default labels are "star <index>"
    args = night_inputs()
    cat_err = np.array([0.01, np.nan, -0.02, 0.0, 0.01])
    inp = _checked(exposure=args["exposure"].astype(float), catalog_err=cat_err)
    assert inp.exposure.dtype == np.intp and np.array_equal(inp.exposure, args["exposure"])
    assert np.array_equal(inp.cat_err, [0.01, 0.0, 0.02, 0.0, 0.01])
    assert np.array_equal(inp.has_cat, [True, True, True, True, False])
    assert inp.labels == ("star 0", "star 1", "star 2", "star 3", "star 4")
    assert inp.good.all() and inp.n_exp == 30
    named = _checked(star_names=["A", "B", "C", "D", "T"])
    assert named.labels == ("A", "B", "C", "D", "T")


def test_check_inputs_refuses_bad_arrays_with_readable_messages():
    args = night_inputs()
    with pytest.raises(ReductionError, match="star_names has 2 names"):
        _checked(star_names=["A", "B"])
    with pytest.raises(ReductionError, match="n_exposures must be a positive integer"):
        _checked(n_exposures=True)
    with pytest.raises(ReductionError, match="airmass must have one value per exposure"):
        _checked(airmass=args["airmass"][:-1])
    with pytest.raises(ReductionError, match="good must have one flag per measurement"):
        _checked(good=np.ones(3, dtype=bool))
    with pytest.raises(ReductionError, match="exposure index 30 is out of range 0..29"):
        bad = args["exposure"].copy()
        bad[4] = 30
        _checked(exposure=bad)
    with pytest.raises(ReductionError, match="no comparison star has a catalogue magnitude"):
        _checked(catalog_mag=np.full(5, np.nan))


def test_usable_comparisons_leaves_out_bad_numbers_of_good_comparisons_only():
    # hand-built: two good comparison points with a NaN magnitude / zero error are counted;
    # a bad number on an upstream-bad point or on the target is not a comparison problem
    args = night_inputs()
    mag, err, good = args["mag"].copy(), args["mag_err"].copy(), np.ones(args["mag"].size, dtype=bool)
    star = args["star"]
    comp_pts = np.flatnonzero(star == 1)
    mag[comp_pts[0]] = np.nan
    err[comp_pts[1]] = 0.0
    err[comp_pts[2]] = -1.0
    good[comp_pts[2]] = False
    mag[np.flatnonzero(star == 4)[0]] = np.nan  # the target
    inp = _checked(mag=mag, mag_err=err, good=good)
    candidate, warning = usable_comparisons(inp)
    assert not candidate[comp_pts[:3]].any() and candidate[comp_pts[3:]].all()
    assert not candidate[star == 4].any()
    assert np.count_nonzero(candidate) == np.count_nonzero(star < 4) - 3
    assert warning.startswith("2 comparison measurement(s) marked good")
    assert usable_comparisons(_checked())[1] == ""


def test_comparison_grid_lays_out_cells_and_refuses_duplicates():
    # hand-built: every comparison measurement lands in its (exposure, column) cell
    args = night_inputs(n_exp=4)
    inp = _checked(**{k: args[k] for k in ("exposure", "star", "mag", "mag_err", "n_exposures", "time", "airmass")})
    candidate, _ = usable_comparisons(inp)
    candidate[5] = False  # exposure 1, star 0
    grid = comparison_grid(inp, candidate)
    assert np.array_equal(grid.comp_idx, [0, 1, 2, 3])
    assert grid.avail.sum() == 15 and not grid.avail[1, 0]
    assert grid.MI[1, 0] == -1 and grid.S2[1, 0] == 1.0 and grid.Y[1, 0] == 0.0
    for m in np.flatnonzero(candidate):
        j, c = inp.exposure[m], inp.star[m]
        assert grid.MI[j, c] == m and grid.Y[j, c] == inp.mag[m] and grid.S2[j, c] == inp.mag_err[m] ** 2
    dup = _checked(
        exposure=np.r_[args["exposure"], 2], star=np.r_[args["star"], 3], mag=np.r_[args["mag"], 12.0],
        mag_err=np.r_[args["mag_err"], 0.01], n_exposures=4, time=args["time"], airmass=args["airmass"],
        star_names=["A", "B", "C", "D", "T"],
    )
    with pytest.raises(ReductionError, match="D is measured more than once in exposure 2"):
        comparison_grid(dup, usable_comparisons(dup)[0])


def test_components_and_largest_linked_group():
    # hand-built link pattern: {0, 1} share exposure 0, {2, 3} exposure 1, star 4 is alone
    present = np.zeros((3, 5), dtype=bool)
    present[0, [0, 1]] = True
    present[1, [2, 3]] = True
    present[2, 4] = True
    assert np.array_equal(components(present), [0, 0, 1, 1, 2])
    present[2, 1] = True  # star 1 and 4 now share exposure 2
    assert np.array_equal(components(present), [0, 0, 1, 1, 0])
    # two groups, {0, 1, 4} (4 measurements) and {2, 3} (6): the group with a catalogue star
    # wins even when the other has more measurements
    present = np.zeros((4, 5), dtype=bool)
    present[0, [0, 1, 4]] = True
    present[1:, [2, 3]] = True
    infit = np.ones(5, dtype=bool)
    has_cat = np.array([False, False, False, False, True])
    assert np.array_equal(largest_linked_group(present, infit, has_cat), [2, 3])
    # without catalogue stars the group with more measurements wins
    assert np.array_equal(largest_linked_group(present, infit, np.zeros(5, dtype=bool)), [0, 1, 4])
    # only the columns in the fit count
    assert largest_linked_group(present, np.array([1, 1, 0, 0, 1], dtype=bool), has_cat).size == 0


def test_select_comparisons_sets_aside_sparse_and_unlinked_stars():
    # hand-built: star 2 has no usable point, star 3 is only measured when nobody else is
    args = night_inputs(n_exp=10, n_star=5)
    good = ~(args["star"] == 2)
    good &= ~((args["star"] == 3) & (args["exposure"] < 9))
    good &= ~((args["star"] < 3) & (args["exposure"] == 9))
    inp = _checked(
        **{k: args[k] for k in ("exposure", "star", "mag", "mag_err", "n_exposures", "time", "airmass")}, good=good
    )
    grid = comparison_grid(inp, usable_comparisons(inp)[0])
    sv = select_comparisons(grid, inp.is_comp, inp.has_cat, min_star_points=1)
    assert sv.status == ("kept", "kept", "too_few_points", "too_few_points", "not_comparison")
    assert sv.reason[2] == "only 0 usable measurement(s); at least 1 needed"
    assert sv.reason[3] == NOT_LINKED
    assert np.array_equal(sv.infit, [True, True, False, False])
    with pytest.raises(ReductionError, match="fewer than 2 comparison stars have usable data"):
        select_comparisons(grid, inp.is_comp, inp.has_cat, min_star_points=20)
    cat = np.array([False, False, True, False, False])  # only the star without points has one
    with pytest.raises(ReductionError, match="none of the comparison stars with a catalogue magnitude"):
        select_comparisons(grid, inp.is_comp, cat, min_star_points=1)


def test_star_verdicts_apply_without_touching_the_original():
    # hand-built bookkeeping: a verdict sets status and reason and (unless told otherwise)
    # takes the column out of the fit, in a copy
    sv = StarVerdicts(status=("kept",) * 3 + ("not_comparison",), reason=("",) * 4, infit=np.ones(3, dtype=bool))
    comp = np.array([0, 1, 2])
    out = sv.with_verdicts(comp, [(1, "variable", "why")])
    assert out.status == ("kept", "variable", "kept", "not_comparison") and out.reason[1] == "why"
    assert np.array_equal(out.infit, [True, False, True]) and sv.infit.all() and sv.status[1] == "kept"
    kept_in = out.with_verdicts(comp, [(2, "catalog_offset", "far")], leave_fit=False)
    assert kept_in.status[2] == "catalog_offset" and kept_in.infit[2]


# =========================================================================== linear


def test_solve_weighted_equals_lstsq_on_the_weighted_system():
    # reference: numpy.linalg.lstsq on the dense weighted design of Honeycutt's model, moved
    # to the gauge sum(M) = 0; the covariance from the pseudo-inverse of the normal matrix
    W, U, Y, _ = ensemble_data(3, n_exp=25, k=5, missing=0.3)
    fit = solve_weighted(W, Y)
    jj, ii = np.nonzero(U)
    A = dense_design(jj, ii, 25, 5)
    sw = np.sqrt(W[jj, ii])
    p = np.linalg.lstsq(A * sw[:, None], Y[jj, ii] * sw, rcond=None)[0]
    cov = np.linalg.pinv((A * W[jj, ii][:, None]).T @ A)
    T = np.eye(30)
    T[:5, :5] -= 0.2
    T[5:, :5] += 0.2
    p, cov = T @ p, T @ cov @ T.T
    assert fit.M.sum() == pytest.approx(0.0, abs=1e-12)
    assert np.allclose(fit.M, p[:5], atol=1e-9, rtol=0)
    assert np.allclose(fit.z, p[5:], atol=1e-9, rtol=0)
    assert np.allclose(fit.CM, cov[:5, :5], rtol=1e-7, atol=1e-14)
    assert np.allclose(fit.Wj, W.sum(axis=1)) and np.allclose(fit.P.sum(axis=1), 1.0)


def test_solve_weighted_errors_match_the_scatter_of_simulated_solutions():
    # simulated truth: 400 noise draws of the same night; the empirical variance of each zero
    # point (gauge sum M = 0) matches Var(z_j) from the fit within the chi-square sampling
    # tolerance 4 sqrt(2/n) of a variance from n draws
    W, U, truth, S2 = ensemble_data(4, n_exp=12, k=4, missing=0.2)
    var_z = zero_point_variance(solve_weighted(W, truth), solve_weighted(W, truth).CM)
    rng = np.random.default_rng(5)
    draws = np.array([
        solve_weighted(W, np.where(U, truth + rng.normal(0, 1, truth.shape) * np.sqrt(S2), 0.0)).z for _ in range(400)
    ])
    ratio = draws.var(axis=0) / var_z
    assert np.all(np.abs(ratio - 1.0) < 4 * math.sqrt(2 / 400))


def test_zero_point_variance_in_another_gauge_equals_the_dense_covariance():
    # reference: the dense covariance (pinv of the normal matrix) moved to the gauge
    # sum(u M) = 0 with unequal weights u; Var(z_j) is its diagonal in the z block
    W, U, Y, _ = ensemble_data(6, n_exp=15, k=4, missing=0.25)
    fit = solve_weighted(W, Y)
    u = np.array([0.1, 0.4, 0.3, 0.2])
    T4 = np.eye(4) - np.outer(np.ones(4), u)
    var_z = zero_point_variance(fit, T4 @ fit.CM @ T4.T)
    jj, ii = np.nonzero(U)
    A = dense_design(jj, ii, 15, 4)
    cov = np.linalg.pinv((A * W[jj, ii][:, None]).T @ A)
    T = np.eye(19)
    T[:4, :4] -= np.outer(np.ones(4), u)
    T[4:, :4] += np.outer(np.ones(15), u)
    assert np.allclose(var_z, np.diag(T @ cov @ T.T)[4:], rtol=1e-7, atol=0)


def test_colour_step_recovers_a_noiseless_coefficient_in_one_step():
    # exact data m = M + z + k'' D with k'' = -0.04 (a typical B-band value, common practice):
    # one Frisch-Waugh-Lovell step from zero gives k'' to rounding
    W, U, _, _ = ensemble_data(8, n_exp=40, k=5, missing=0.1)
    rng = np.random.default_rng(8)
    X = np.linspace(1.0, 2.0, 40)
    D = X[:, None] * rng.uniform(-0.6, 0.6, 5)[None, :]
    Y = np.where(U, rng.normal(0, 1, 5)[None, :] + rng.normal(0, 0.3, 40)[:, None] - 0.04 * D, 0.0)
    fit = solve_weighted(W, Y)
    R = np.where(U, Y - fit.M - fit.z[:, None], 0.0)
    step, err = colour_step(W, U, D, R)
    assert step == pytest.approx(-0.04, abs=1e-10)
    assert err > 0 and math.isfinite(err)


def test_colour_regressor_only_when_colours_and_airmass_span_enough():
    # the thresholds COLOUR_MIN_SPAN and AIRMASS_MIN_SPAN (common practice), hand-built cases
    airmass = np.linspace(1.1, 1.1 + 2 * AIRMASS_MIN_SPAN, 5)
    comp = np.array([0, 1, 2, 3])
    colour = np.array([0.2, 0.2 + COLOUR_MIN_SPAN, np.nan, 0.5, 9.9])  # star 4 is not a comparison
    term = colour_regressor(colour, airmass, comp)
    assert term.fitted
    c_ref = (0.2 + 0.2 + COLOUR_MIN_SPAN + 0.5) / 3
    assert term.reference == pytest.approx(c_ref, rel=1e-15)
    expected = airmass[:, None] * np.array([0.2 - c_ref, 0.2 + COLOUR_MIN_SPAN - c_ref, 0.0, 0.5 - c_ref])[None, :]
    assert np.allclose(term.D, expected, rtol=1e-14, atol=1e-15)
    for reason in (
        dict(colour=np.array([0.2, 0.2 + 0.9 * COLOUR_MIN_SPAN, 0.3, 0.25, 9.9])),  # colours too close
        dict(colour=np.array([0.2, 1.5, np.nan, np.nan, 9.9])),  # two colours only
        dict(airmass=np.full(5, 1.3)),  # airmass constant
        dict(colour=None),
    ):
        args = dict(colour=colour, airmass=airmass, comp_idx=comp)
        args.update(reason)
        off = colour_regressor(**args)
        assert not off.fitted and math.isnan(off.reference) and not off.D.any() and off.D.shape == (5, 4)


# =========================================================================== vetting statistics


def test_chi2_logsf_matches_scipy_and_stays_finite_in_the_far_tail():
    # reference: scipy.stats.chi2.logsf where the survival function is representable; in the
    # far tail the asymptotic series Q(a, y) ~ y^(a-1) e^-y / Gamma(a) (1 + (a-1)/y + (a-1)(a-2)/y^2)
    # (Abramowitz & Stegun 6.5.32) with two more terms than the code uses
    x = np.array([0.5, 5.0, 30.0, 200.0, 900.0])
    dof = np.array([1.0, 4.0, 20.0, 150.0, 500.0])
    assert np.allclose(chi2_logsf(x, dof), stats.chi2.logsf(x, dof), rtol=1e-10, atol=1e-12)
    a, y = 5.0, 1500.0
    series = (a - 1) * math.log(y) - y - math.lgamma(a) + math.log1p((a - 1) / y + (a - 1) * (a - 2) / y**2)
    got = float(chi2_logsf(np.array([2 * y]), np.array([2 * a]))[0])
    assert math.isfinite(got)
    assert got == pytest.approx(series, rel=1e-5)


def test_solve_excess_recovers_a_known_extra_scatter():
    # simulated truth: 500 columns of 200 residuals with variance s2 + x, x = 0.015^2; the
    # estimates average to x within four standard errors, and each solves its defining
    # equation sum r2 / (s2 + x) = dof
    rng = np.random.default_rng(1)
    n, k = 200, 500
    s2 = rng.uniform(0.01, 0.02, (n, k)) ** 2
    x_true = 0.015**2
    r2 = (rng.normal(0, 1, (n, k)) * np.sqrt(s2 + x_true)) ** 2
    x = solve_excess(r2, s2, np.full(k, float(n)))
    assert abs(x.mean() - x_true) < 4 * x.std() / math.sqrt(k)
    pos = x > 0
    assert np.allclose((r2[:, pos] / (s2[:, pos] + x[pos])).sum(axis=0), n, rtol=1e-7)
    # no extra scatter: about half the columns are already consistent (x = 0), none is large
    r2_0 = (rng.normal(0, 1, (n, k)) * np.sqrt(s2)) ** 2
    x0 = solve_excess(r2_0, s2, np.full(k, float(n)))
    assert abs(np.mean(x0 == 0) - 0.5) < binomial_band(0.5, k, 4)
    assert np.all(x0 < x_true)


def test_solve_excess_grouped_equals_the_column_version():
    # the same equation solved over bincount groups: equal to solve_excess column by column
    rng = np.random.default_rng(2)
    n, k = 80, 6
    s2 = rng.uniform(0.01, 0.03, (n, k)) ** 2
    r2 = (rng.normal(0, 1, (n, k)) * np.sqrt(s2 + rng.uniform(0, 0.02, k) ** 2)) ** 2
    dof = np.full(k, n - 1.0)
    dof[3] = 0.0  # a group without degrees of freedom gets no excess
    ref = solve_excess(r2, s2, dof)
    group = np.repeat(np.arange(k)[None, :], n, axis=0).ravel()
    got = solve_excess_grouped(r2.ravel(), s2.ravel(), group, k, dof)
    assert got[3] == 0.0
    assert np.allclose(got, ref, rtol=1e-8, atol=1e-14)


def test_column_median_equals_numpy_median_of_the_masked_entries():
    # reference: numpy.median of each column's masked values (odd and even counts), NaN if none
    rng = np.random.default_rng(3)
    values = rng.normal(0, 1, (9, 5))
    mask = rng.random((9, 5)) < 0.6
    mask[:, 4] = False
    mask[:4, 3] = True
    mask[4:, 3] = False
    med = column_median(values, mask)
    for c in range(4):
        assert med[c] == pytest.approx(np.median(values[mask[:, c], c]), abs=0)
    assert math.isnan(med[4])


def test_robust_scale_extra_recovers_a_known_scatter():
    # simulated truth: residuals with variance err^2 + s^2, s = 0.02; the normal-consistency
    # factor of the MAD, 1.4826 (from memory: 1 / Phi^-1(3/4)), makes the estimate unbiased
    assert MAD_TO_SIGMA == pytest.approx(1.0 / stats.norm.ppf(0.75), rel=1e-12)
    rng = np.random.default_rng(4)
    err = rng.uniform(0.005, 0.015, 20000)
    r = rng.normal(0, 1, err.size) * np.sqrt(err**2 + 0.02**2)
    assert robust_scale_extra(r, err) == pytest.approx(0.02, rel=0.03)
    r0 = rng.normal(0, 1, err.size) * err  # no extra scatter
    assert robust_scale_extra(r0, err) < 0.002
    assert robust_scale_extra(np.zeros(0), np.zeros(0)) == 0.0


def test_star_vs_others_is_an_explicit_leave_one_out_chi_square():
    # reference: for each star, zero points recomputed from the other stars alone by hand
    # (weighted means of Y - M) and the chi-square of the star's differences about their
    # weighted mean, with variance mag_err^2 + 1 / sum(other weights)
    W, U, Y, S2 = ensemble_data(9, n_exp=30, k=4, missing=0.2)
    fit = solve_weighted(W, Y)
    st = star_vs_others(W, U, Y, S2, fit)
    for i in range(4):
        oth = [c for c in range(4) if c != i]
        w_o = W[:, oth].sum(axis=1)
        rows = U[:, i] & (w_o > 0)
        z_o = (W[:, oth] * (Y[:, oth] - fit.M[oth])).sum(axis=1)[rows] / w_o[rows]
        d = Y[rows, i] - fit.M[i] - z_o
        v = S2[rows, i] + 1.0 / w_o[rows]
        mean = np.sum(d / v) / np.sum(1 / v)
        assert st.chi2[i] == pytest.approx(np.sum((d - mean) ** 2 / v), rel=1e-9)
        assert st.dof[i] == rows.sum() - 1
        assert np.array_equal(st.mask[:, i], rows)


def test_trend_jumps_flag_a_cloud_and_nothing_on_a_clear_night():
    # simulated truth: zero points = extinction 0.2 X + drift + noise; ten exposures dimmed by
    # 0.4 mag (a passing cloud) are exactly the flagged ones
    rng = np.random.default_rng(10)
    n = 120
    time = np.linspace(0.0, 0.3, n)
    airmass = 1.05 + 1.5 * (time / 0.3 - 0.3) ** 2
    err = np.full(n, 0.005)
    zp = -24.0 + 0.2 * airmass + 0.03 * time + rng.normal(0, 1, n) * err
    settings = EnsembleSettings()
    jump, note = trend_jumps(zp, err, time, airmass, settings)
    assert note == "" and not jump.any()
    cloudy = zp.copy()
    cloudy[60:70] += 0.4
    jump, _ = trend_jumps(cloudy, err, time, airmass, settings)
    assert np.array_equal(np.flatnonzero(jump), np.arange(60, 70))
    jump, note = trend_jumps(zp[:5], err[:5], time[:5], airmass[:5], settings)
    assert not jump.any() and "jump test needs at least 6" in note


def test_vet_exposures_flags_each_code():
    # hand-built: exposure 0 has one comparison, exposure 1 a zero-point error 10x the median,
    # exposures 40-44 a 0.5 mag jump; codes joined in the order of EXPOSURE_FLAGS
    n = 60
    U = np.ones((n, 3), dtype=bool)
    U[0, 1:] = False
    time = np.linspace(0.0, 0.25, n)
    airmass = np.linspace(1.0, 1.6, n)
    zp = 0.2 * airmass + 1e-3 * np.sin(np.arange(n))
    err = np.full(n, 0.004)
    err[1] = 0.04
    zp[40:45] += 0.5
    n_comp, flags, note = vet_exposures(U, zp, err, time, airmass, EnsembleSettings())
    assert n_comp.tolist() == [1] + [3] * (n - 1) and note == ""
    assert flags[0] == "too_few_comparisons"
    assert flags[1].startswith("zero_point_error")
    assert all(flags[j] == "zero_point_jump" for j in range(40, 45))
    assert sum(1 for f in flags if f) == 7


# =========================================================================== iteration


def _fit_state(W, U, Y, S2):
    fit = solve_weighted(W, Y)
    R = np.where(U, Y - fit.M - fit.z[:, None], 0.0)
    return fit, R


def test_find_outliers_clips_one_wild_point_and_both_of_a_disagreeing_pair():
    # simulated: a 1 mag error in one cell of a five-star night, and an exposure with only two
    # comparisons of which one is 1 mag off; every other residual is Gaussian
    W, U, Y, S2 = ensemble_data(11, n_exp=50, k=5)
    Y = Y.copy()
    Y[20, 3] += 1.0
    U = U.copy()
    U[30, 2:] = False
    W = np.where(U, W, 0.0)
    Y[30, 1] += 1.0
    fit, R = _fit_state(W, U, Y, S2)
    step = find_outliers(fit, W, U, Y, R, S2, np.zeros_like(U), np.zeros(5), clip_sigma=5.0)
    assert np.array_equal(np.argwhere(step.new_clip), [[20, 3], [30, 0], [30, 1]])
    assert np.flatnonzero(step.pair_rows).tolist() == [30]
    assert not step.restore.any() and step.n_changes == 3
    assert np.all((step.one_minus_h >= 0) & (step.one_minus_h <= 1))


def test_find_outliers_restores_a_clip_that_agrees_with_the_solution():
    # a measurement clipped earlier but consistent with the current fit comes back; a wild one stays
    W, U, Y, S2 = ensemble_data(12, n_exp=40, k=5)
    Y = Y.copy()
    Y[5, 2] += 1.0
    old = np.zeros_like(U)
    old[[5, 9], 2] = True
    Uf = U & ~old
    Wf = np.where(Uf, W, 0.0)
    fit, R = _fit_state(Wf, Uf, np.where(Uf, Y, 0.0), S2)
    step = find_outliers(fit, Wf, Uf, Y, R, S2, old, np.zeros(5), clip_sigma=5.0)
    assert np.argwhere(step.restore).tolist() == [[9, 2]]
    assert not step.new_clip.any()


def test_update_excess_finds_the_star_with_extra_scatter():
    # simulated truth: star 2 has 0.03 mag extra scatter, the others none.  Refitting with the
    # new weights a few times (as the iteration does), its excess is within 25% of 0.03 (about
    # 100 points) and every other star's below a third of it
    W, U, Y, S2 = ensemble_data(13, n_exp=100, k=5)
    Y = Y + np.where(np.arange(5) == 2, 1.0, 0.0)[None, :] * np.random.default_rng(1).normal(0, 0.03, (100, 1))
    ex2 = np.zeros(5)
    for _ in range(6):
        Wr = np.where(U, 1.0 / (S2 + ex2), 0.0)
        fit, R = _fit_state(Wr, U, Y, S2)
        step = find_outliers(fit, Wr, U, Y, R, S2, np.zeros_like(U), ex2, clip_sigma=50.0)
        ex2 = update_excess(R, U, S2, step, ex2)
    assert math.sqrt(ex2[2]) == pytest.approx(0.03, rel=0.25)
    assert np.all(np.sqrt(ex2[[0, 1, 3, 4]]) < 0.01)
    # a star with less than one degree of freedom keeps its previous excess
    few = ClipStep(step.new_clip, step.restore, step.pair_rows, np.where(np.arange(5) == 4, 0.0, step.one_minus_h),
                   step.informative)
    assert update_excess(R, U, S2, few, np.full(5, 7e-6))[4] == 7e-6


def test_excess_change_and_apply_clips_by_hand():
    # hand arithmetic: typical variance 1e-4, excess 0 -> 3e-4 doubles the effective error
    U = np.ones((4, 2), dtype=bool)
    S2 = np.full((4, 2), 1e-4)
    assert excess_change(U, S2, np.zeros(2), np.array([3e-4, 0.0])) == pytest.approx(1.0, rel=1e-12)
    clipped = np.zeros((3, 4), dtype=bool)
    clipped[0, 3] = True  # column 3 is in the fit, restored below
    clipped[2, 0] = True  # column 0 is not in the fit: untouched
    pair = np.zeros_like(clipped)
    cols = np.array([1, 3])
    new = np.zeros((3, 2), dtype=bool)
    new[1] = True  # exposure 1: both comparisons of a disagreeing pair
    restore = np.zeros((3, 2), dtype=bool)
    restore[0, 1] = True
    step = ClipStep(new, restore, np.array([False, True, False]), np.ones((3, 2)), np.ones((3, 2), dtype=bool))
    c2, p2 = apply_clips(clipped, pair, cols, step, np.ones((3, 2), dtype=bool))
    assert np.argwhere(c2).tolist() == [[1, 1], [1, 3], [2, 0]]
    assert np.argwhere(p2).tolist() == [[1, 1], [1, 3]]
    assert clipped[0, 3] and not pair.any()  # inputs unchanged


def test_variability_test_false_alarm_rate_of_a_constant_pair():
    # reference: for two constant stars each is tested against the other; the statistic is
    # chi-square with n - 1 degrees of freedom (Gaussian errors, known variances), and the
    # error scale is one, so p < 0.05 happens in 5% of nights (binomial band, 1000 nights)
    settings = EnsembleSettings(variable_p_value=0.05, variable_min_excess=0.0)
    flagged = 0
    n = 1000
    for seed in range(n):
        W, U, Y, S2 = ensemble_data(20000 + seed, n_exp=40, k=2)
        fit = solve_weighted(W, Y)
        vt = variability_test(W, U, Y, S2, fit, np.zeros_like(U), U, settings)
        assert vt.error_scale == 1.0 and vt.chi_bad[0] == vt.chi_bad[1]
        flagged += bool(vt.chi_bad[0])
    assert abs(flagged / n - 0.05) < binomial_band(0.05, n)


def test_variability_test_flags_a_trend_and_not_the_constant_stars():
    # simulated truth: star 0 brightens by 0.1 mag over the night (errors 0.005-0.02 mag), the
    # other five are constant.  The trend is found every night; constant stars are flagged at
    # most at the stated rate 0.05 (binomial band): the common error scale (median chi2/dof,
    # never below one) can only make the test more lenient
    settings = EnsembleSettings(variable_p_value=0.05, variable_min_excess=0.0)
    false, total = 0, 0
    for seed in range(100):
        W, U, Y, S2 = ensemble_data(30000 + seed, n_exp=60, k=6)
        Y = Y.copy()
        Y[:, 0] += np.linspace(-0.05, 0.05, 60)
        fit = solve_weighted(W, Y)
        vt = variability_test(W, U, Y, S2, fit, np.zeros_like(U), U, settings)
        assert vt.chi_bad[0] and vt.any_variable and int(np.argmax(vt.score)) == 0
        assert vt.error_scale >= 1.0
        false += int(vt.chi_bad[1:].sum())
        total += 5
    assert false / total < 0.05 + binomial_band(0.05, total)


def test_variability_test_counts_runs_of_clips():
    # hand-built: 6 of 60 points clipped (more than 5 and than 3%) make a star suspect even
    # with a clean chi-square; pair clips are left out by the caller
    W, U, Y, S2 = ensemble_data(14, n_exp=60, k=4)
    fit = solve_weighted(W, Y)
    own = np.zeros_like(U)
    own[10:16, 1] = True
    vt = variability_test(W, U, Y, S2, fit, own, U, EnsembleSettings())
    assert vt.clip_bad.tolist() == [False, True, False, False]
    assert vt.n_clips[1] == 6 and vt.n_points[1] == 60
    assert int(np.argmax(vt.score)) == 1 and vt.score[1] == pytest.approx(14.0 * 6)
    reason = rejection_reason(vt, 1, 5.0)
    assert reason == "6 of 60 measurements are outliers beyond 5 sigma (an eclipse or flare looks like this)"


def test_rejection_reason_reports_the_scatter():
    # the quoted rms is sqrt(mean r2) and the expected one sqrt(mean V * scale) (hand arithmetic)
    W, U, Y, S2 = ensemble_data(15, n_exp=60, k=5)
    Y = Y.copy()
    Y[:, 3] += 0.05 * np.sin(np.arange(60) / 4.0)
    fit = solve_weighted(W, Y)
    vt = variability_test(W, U, Y, S2, fit, np.zeros_like(U), U, EnsembleSettings())
    assert vt.chi_bad[3]
    st = vt.star_test
    rms = math.sqrt(st.r2[:, 3].sum() / st.mask[:, 3].sum())
    text = rejection_reason(vt, 3, 5.0)
    assert text.startswith(f"scatter about the ensemble {vt.red[3] / vt.error_scale:.1f} times what its errors allow")
    assert f"rms {rms:.3f} mag" in text
    assert "ensemble error scale" in text and ("p<1e-30" in text or "p=" in text)


def test_choose_rejection_picks_the_worst_star_unless_it_cannot_go():
    # simulated: fitted star 2 of four varies by 0.1 mag; the fitted columns are comparison
    # columns 0, 1, 3, 4 (column 2 left the fit earlier), so the verdict names column 3
    W, U, Y, S2 = ensemble_data(23, n_exp=60, k=4)
    Y = Y + (np.arange(4) == 2)[None, :] * 0.1 * np.sin(np.arange(60) / 5.0)[:, None]
    vt = variability_test(W, U, Y, S2, solve_weighted(W, Y), np.zeros_like(U), U, EnsembleSettings())
    assert vt.any_variable
    cols = np.array([0, 1, 3, 4])
    labels = [f"C{i}" for i in range(5)]
    verdict, why_not = choose_rejection(vt, cols, np.ones(5, dtype=bool), labels, 5.0)
    assert verdict == (3, "variable", rejection_reason(vt, 2, 5.0)) and why_not == ""
    only_cat = np.array([False, False, True, True, False])  # column 2 is out of the fit
    verdict, why_not = choose_rejection(vt, cols, only_cat, labels, 5.0)
    assert verdict is None and why_not.startswith("C3 looks variable but is the last comparison star")
    W2, U2, Y2, S22 = ensemble_data(24, n_exp=60, k=2)
    Y2 = Y2 + np.array([0.0, 0.1])[None, :] * np.sin(np.arange(60) / 5.0)[:, None]
    vt2 = variability_test(W2, U2, Y2, S22, solve_weighted(W2, Y2), np.zeros_like(U2), U2, EnsembleSettings())
    verdict, why_not = choose_rejection(vt2, np.array([1, 4]), np.ones(5, dtype=bool), labels, 5.0)
    assert verdict is None and why_not.startswith("only two comparison stars (C1 and C4)")
    assert f"(chi2/dof {np.max(vt2.red):.1f})" in why_not


def _grid(W, U, Y, S2):
    return ComparisonGrid(comp_idx=np.arange(U.shape[1]), Y=Y, S2=S2, MI=np.full(U.shape, -1), avail=U)


def test_iterate_ensemble_rejects_a_variable_star_and_keeps_the_others():
    # simulated truth: star 4 of six varies by 0.1 mag (sine), the rest are constant; the
    # error scale of honest errors lies near one
    W, U, Y, S2 = ensemble_data(16, n_exp=120, k=6, missing=0.05)
    Y = np.where(U, Y + (np.arange(6) == 4)[None, :] * 0.1 * np.sin(np.arange(120) / 7.0)[:, None], 0.0)
    grid = _grid(W, U, Y, S2)
    none = ColourTerm(D=np.zeros_like(Y), reference=float("nan"), fitted=False)
    labels = [f"C{i}" for i in range(6)]
    it = iterate_ensemble(grid, none, np.ones(6, dtype=bool), np.ones(6, dtype=bool), labels, EnsembleSettings())
    assert it.converged and it.warnings == ()
    assert [v[:2] for v in it.verdicts] == [(4, "variable")]
    assert it.infit.tolist() == [True] * 4 + [False, True]
    assert it.excess2[4] == 0.0 and not it.clipped[:, 4].any()
    assert 1.0 <= it.error_scale < 1.5 and it.iterations >= 2
    # max_iter = 1 stops early and says so
    short = iterate_ensemble(grid, none, np.ones(6, dtype=bool), np.ones(6, dtype=bool), labels,
                             EnsembleSettings(max_iter=1))
    assert not short.converged and "did not settle within max_iter=1" in short.warnings[-1]


def test_iterate_ensemble_with_two_disagreeing_stars_warns_instead_of_guessing():
    # simulated: star B varies by 0.1 mag; with two stars the differences cannot say which
    # one varies (common practice: at least three comparison stars), so nobody is rejected
    W, U, Y, S2 = ensemble_data(17, n_exp=80, k=2)
    Y = Y + np.array([0.0, 1.0])[None, :] * 0.1 * np.sin(np.arange(80) / 5.0)[:, None]
    none = ColourTerm(D=np.zeros_like(Y), reference=float("nan"), fitted=False)
    it = iterate_ensemble(_grid(W, U, Y, S2), none, np.ones(2, dtype=bool), np.ones(2, dtype=bool), ["A", "B"],
                          EnsembleSettings())
    assert it.converged and it.infit.all() and it.verdicts == ()
    assert it.warnings[-1].startswith("only two comparison stars (A and B) are in the ensemble and they disagree")


def test_final_fit_equals_lstsq_with_the_iteration_weights():
    # reference: numpy.linalg.lstsq on the weighted dense design with weights 1/(mag_err^2 + excess^2)
    # over the used cells of the stars still in the fit, colour column included
    W, U, Y, S2 = ensemble_data(18, n_exp=30, k=5, missing=0.1)
    rng = np.random.default_rng(18)
    D = np.linspace(1.0, 1.8, 30)[:, None] * rng.uniform(-0.5, 0.5, 5)[None, :]
    Y = np.where(U, Y + 0.05 * D, 0.0)
    clipped = np.zeros_like(U)
    clipped[[3, 7], [1, 2]] = True
    clipped &= U
    it = IterationResult(
        infit=np.array([True, True, True, False, True]), clipped=clipped, excess2=np.array([1e-5, 0, 4e-5, 0, 0]),
        colour_extinction=0.0, colour_extinction_err=float("nan"), error_scale=1.0, iterations=3, converged=True, verdicts=(), warnings=(),
    )
    final = final_fit(_grid(W, U, Y, S2), ColourTerm(D=D, reference=0.0, fitted=True), it)
    assert final.cols.tolist() == [0, 1, 2, 4]
    assert not final.used[:, 3].any() and not (final.used & clipped).any()
    jj, cc = np.nonzero(final.used)
    ii = np.searchsorted(final.cols, cc)
    w = 1.0 / (S2[jj, cc] + it.excess2[cc])
    A = np.column_stack([dense_design(jj, ii, 30, 4), D[jj, cc]])
    A_w = np.vstack([A * np.sqrt(w)[:, None], np.r_[np.ones(4), np.zeros(31)]])  # gauge sum M = 0
    p = np.linalg.lstsq(A_w, np.r_[Y[jj, cc] * np.sqrt(w), 0.0], rcond=None)[0]
    assert final.colour_extinction == pytest.approx(p[-1], abs=1e-9)
    assert np.allclose(final.fit.M, p[:4], atol=1e-9)
    assert np.allclose(final.fit.z, p[4:-1], atol=1e-9)


# =========================================================================== tie


def test_paule_mandel_recovers_a_known_extra_scatter():
    # simulated truth: 30 values with variances v + 0.05^2 over 400 seeds; the Paule & Mandel
    # (1982) estimate averages to 0.05^2 within four standard errors, and each positive
    # estimate solves sum (d - dbar)^2 / (v + s2) = n - 1 (its defining equation)
    est = []
    for seed in range(400):
        rng = np.random.default_rng(seed)
        v = rng.uniform(0.01, 0.03, 30) ** 2
        d = 0.1 + rng.normal(0, 1, 30) * np.sqrt(v + 0.05**2)
        s2 = paule_mandel(d, v)
        if seed < 20 and s2 > 0:
            w = 1.0 / (v + s2)
            assert np.sum(w * (d - np.sum(w * d) / np.sum(w)) ** 2) == pytest.approx(29.0, rel=1e-9)
        est.append(s2)
    est = np.array(est)
    assert abs(est.mean() - 0.05**2) < 4 * est.std() / math.sqrt(est.size)
    # values that agree within their errors: zero; a single value: zero
    assert paule_mandel(np.array([1.0, 1.001, 0.999]), np.full(3, 0.01**2)) == 0.0
    assert paule_mandel(np.array([1.0]), np.array([1e-4])) == 0.0


def test_select_tie_leaves_out_a_wrong_catalogue_value():
    # hand-built offsets: five agree within 0.01 mag, one is 0.5 mag off (a wrong catalogue value)
    offset = np.array([0.01, -0.005, 0.0, 0.5, 0.004, -0.01, np.nan])
    has_cat = np.isfinite(offset)
    labels = [f"C{i}" for i in range(7)]
    tie = select_tie(offset, np.full(7, 1e-6), has_cat, np.full(7, 0.01), labels, EnsembleSettings())
    assert tie.tie.tolist() == [True, True, True, False, True, True, False]
    assert len(tie.verdicts) == 1 and tie.verdicts[0][:2] == (3, "catalog_offset")
    assert tie.verdicts[0][2].startswith("catalogue offset +0.49")
    assert tie.warnings == () and tie.excess_var == 0.0
    two = select_tie(np.array([0.0, 0.4]), np.full(2, 1e-6), np.ones(2, dtype=bool), np.full(2, 0.01), ["A", "B"],
                     EnsembleSettings())
    assert two.tie.all() and "(A and B) disagree by 0.400 mag" in two.warnings[0]
    one = select_tie(np.array([0.0, np.nan]), np.full(2, 1e-6), np.array([True, False]), np.full(2, 0.01),
                     ["A", "B"], EnsembleSettings())
    assert "only one comparison star with a catalogue magnitude" in one.warnings[0]
    with pytest.raises(ReductionError, match="no comparison star with a catalogue magnitude is left"):
        select_tie(np.full(2, np.nan), np.full(2, 1e-6), np.zeros(2, dtype=bool), np.zeros(2), ["A", "B"],
                   EnsembleSettings())


def test_calibrate_is_the_weighted_mean_tie():
    # definition of the tie: the tie-weighted mean of (calibrated star magnitude - catalogue)
    # is zero; weights 1/(cat_err^2 + Var(M) + s_cat^2) normalised; calibration_err =
    # sqrt(sum ubar^2 (cat_err^2 + s_cat^2)) widened by Student's t quantile (scipy.stats.t)
    W, U, Y, S2 = ensemble_data(19, n_exp=20, k=4)
    fit = solve_weighted(W, Y)
    cat = fit.M + np.array([3.0, 3.02, 2.97, 5.0])
    cat_err = np.array([0.01, 0.02, 0.01, 0.01])
    tie = CatalogTie(tie=np.array([True, True, True, False]), excess_var=0.02**2, verdicts=(), warnings=())
    cal = calibrate(fit, tie, cat, cat_err)
    u = np.where(tie.tie, 1.0 / (cat_err**2 + np.diag(fit.CM) + 0.02**2), 0.0)
    assert np.allclose(cal.tie_weight, u / u.sum(), rtol=1e-12)
    assert np.sum(cal.tie_weight * (cal.star_mag - np.where(tie.tie, cat, 0.0))) == pytest.approx(0.0, abs=1e-12)
    t68 = stats.t.ppf(stats.norm.cdf(1.0), 2)
    ref = math.sqrt(np.sum(cal.tie_weight**2 * (cat_err**2 + 0.02**2) * tie.tie)) * t68
    assert cal.calibration_err == pytest.approx(ref, rel=1e-10)
    # zero points move with the star magnitudes: M + z is unchanged by the tie
    assert np.allclose(cal.star_mag[None, :] + cal.zero_point[:, None], fit.M[None, :] + fit.z[:, None], atol=1e-12)


# =========================================================================== per measurement, per star


def test_calibrate_measurements_by_hand():
    # hand arithmetic: mag - zero point, errors added in quadrature, cells mapped back to rows
    mag = np.array([12.0, 13.0, 14.0, 15.0])
    err = np.array([0.03, 0.04, 0.01, 0.02])
    exposure = np.array([0, 0, 1, 1])
    MI = np.array([[0, 1], [2, -1]])
    used = np.array([[True, False], [True, False]])
    clipped = np.array([[False, True], [False, False]])
    m = calibrate_measurements(mag, err, exposure, np.array([-20.0, -19.5]), np.array([0.04, 0.0]), MI, used, clipped)
    assert m.mag.tolist() == [32.0, 33.0, 33.5, 34.5]
    assert np.allclose(m.mag_err, [0.05, math.hypot(0.04, 0.04), 0.01, 0.02], rtol=1e-14)
    assert m.used.tolist() == [True, False, True, False]
    assert m.clipped.tolist() == [False, True, False, False]


def test_star_diagnostics_of_a_constant_star_outside_the_fit():
    # simulated truth: a constant check star with honest errors has chi2/dof ~ 1 (within
    # 4 sqrt(2/dof)), its offset is its weighted mean minus the catalogue (weighted-mean formula)
    rng = np.random.default_rng(21)
    n = 400
    err = rng.uniform(0.01, 0.03, n)
    cal = 12.3 + rng.normal(0, 1, n) * err
    star = np.full(n, 2)
    cat = np.array([11.0, 11.5, 12.25])
    W, U, Y, S2 = ensemble_data(22, n_exp=30, k=2)
    fit = solve_weighted(W, Y)
    st = star_vs_others(W, U, Y, S2, fit)
    offset, excess, chi2 = star_diagnostics(star, cal, err, np.ones(n, dtype=bool), cat, np.array([0, 1]),
                                            np.array([11.01, 11.49]), np.array([4e-6, 0.0]), st)
    w = 1 / err**2
    assert offset[2] == pytest.approx(np.sum(w * cal) / np.sum(w) - 12.25, rel=1e-12)
    assert abs(chi2[2] - 1.0) < 4 * math.sqrt(2 / (n - 1))
    assert excess[2] < 0.01
    assert offset[:2] == pytest.approx([0.01, -0.01], abs=1e-12) and excess[:2] == pytest.approx([0.002, 0.0])
    assert np.allclose(chi2[:2], st.chi2 / st.dof)
    # with injected extra scatter 0.03 mag the diagnostic excess finds it (within 15%, 400 points)
    cal2 = 12.3 + rng.normal(0, 1, n) * np.sqrt(err**2 + 0.03**2)
    _, excess2, _ = star_diagnostics(star, cal2, err, np.ones(n, dtype=bool), cat, np.array([0, 1]),
                                     np.array([11.0, 11.5]), np.zeros(2), st)
    assert excess2[2] == pytest.approx(0.03, rel=0.15)


# =========================================================================== results


def test_settings_and_solution_json():
    # the settings' generic to_dict equals their dataclass fields; the solution's summary is
    # strict JSON and counts what the arrays hold
    settings = EnsembleSettings(clip_sigma=np.float64(4.5), max_iter=np.int64(12))
    d = settings.to_dict()
    assert d == dataclasses.asdict(settings) and type(d["clip_sigma"]) is float and type(d["max_iter"]) is int
    args = night_inputs(n_exp=40, seed=3)
    sol = solve_ensemble(**args, settings=settings, star_names=["A", "B", "C", "D", "T"])
    assert isinstance(sol, EnsembleSolution)
    out = json.loads(json.dumps(sol.to_dict(), allow_nan=False))
    assert list(out)[:2] == ["method", "calibration_err"] and list(out)[-1] == "settings"
    assert out["settings"] == d
    assert out["status_counts"]["kept"] == 4 and out["status_counts"]["not_comparison"] == 1
    assert out["n_measurements_used"] == int(sol.used.sum()) == 160
    assert out["stars"][4]["offset"] is None and out["stars"][0]["tie_weight"] == pytest.approx(sol.tie_weight[0])
    assert "mag" not in out and "zero_point" not in out
