"""Tests of the transformation to the standard system (varstar.transform).

Outside references:

* the transformation equations of Hardie (1962, in Astronomical Techniques, ed.
  Hiltner) and Henden & Kaitchuck (1982, Astronomical Photometry):
  ``V - v = eps (B - V) + zeta_v``, ``(B - V) = mu (b - v) + zeta_bv``, and
  differentially ``Delta(B - V) = mu Delta(b - v)``, ``Delta V = Delta v + eps
  Delta(B - V)``, with the second-order extinction term ``k'' X c``;
* the Ballesteros (2012, EPL 97, 34008) colour-temperature relation, the solar
  effective temperature 5772 K (IAU 2015 Resolution B3) and the solar B - V =
  0.653 +- 0.003 (Ramirez et al. 2012, ApJ 752, 5);
* York et al. (2004, Am. J. Phys. 72, 367; reference from memory): the straight line with errors in
  both variables minimises sum (y - a - b x)^2 / var(y - b x);
* simulated data with known truth (invented standard fields and an invented
  red pulsating target, fixed seeds), judged by pull distributions.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

import numpy as np
import pytest

from varstar.errors import InputError
from varstar.transform import (
    Coefficients,
    CoefficientFit,
    NightReference,
    ballesteros_temperature,
    fit_coefficients,
    interpolate_series,
    night_reference,
    transform_target,
)

ONE_SIGMA = 0.6826894921370859  # P(|z| < 1) of a normal distribution


def coverage_tolerance(n: int) -> float:
    """Three binomial standard deviations of a 68.27% coverage measured from n pulls."""
    return 3.0 * math.sqrt(ONE_SIGMA * (1.0 - ONE_SIGMA) / n)


# =========================================================================== worked examples


def _constant_night(v_cal: float, b_cal: float, airmass: float = 1.0, n: int = 12):
    """Interleaved constant series: interpolation is then exact."""
    t_v = np.arange(n) * 0.004
    t_b = t_v + 0.002
    one = np.ones(n)
    return t_v, v_cal * one, 0.01 * one, airmass * one, t_b, b_cal * one, 0.012 * one, airmass * one


def test_worked_example_without_colour_extinction():
    # Hardie (1962) / Henden & Kaitchuck (1982), differential form, by hand:
    # eps = 0.05, mu = 1.08; the comparison ensemble has standard colour 0.60 and
    # calibrated instrumental colour 0.45; the target has b~ = 13.20, v~ = 12.00, so
    #   Delta(b - v) = (13.20 - 12.00) - 0.45 = 0.75
    #   B - V = 0.60 + 1.08 * 0.75 = 0.60 + 0.81 = 1.41
    #   Delta(B - V) = 1.41 - 0.60 = 0.81
    #   V = 12.00 + 0.05 * 0.81 = 12.0405 ;  B = V + (B - V) = 13.4505
    co = Coefficients(epsilon_v=0.05, mu_bv=1.08, source="worked example")
    ref = NightReference(tie_colour_v=0.60, ref_colour_std=0.60, ref_colour_std_err=0.0,
                         ref_colour_inst=0.45, ref_colour_inst_err=0.0)
    res = transform_target(*_constant_night(12.00, 13.20), ref, co, max_gap_d=0.003)
    assert res.V.ok.all() and res.B.ok.all()
    np.testing.assert_allclose(res.V.bv, 1.41, atol=1e-12, rtol=0)
    np.testing.assert_allclose(res.V.mag, 12.0405, atol=1e-12, rtol=0)
    np.testing.assert_allclose(res.B.bv, 1.41, atol=1e-12, rtol=0)
    np.testing.assert_allclose(res.B.mag, 13.4505, atol=1e-12, rtol=0)


def test_worked_example_with_colour_extinction_by_fixed_point_iteration():
    # The published form with the second-order term on both bands (Henden & Kaitchuck
    # 1982): c = c_ref + mu [(b~ - kb X (c - cref_b)) - (v~ - kv X (c - cref_v)) - r_inst],
    # solved here by plain fixed-point iteration (independent of the module's closed form).
    eps, mu, kb, kv, X = -0.04, 0.95, -0.035, -0.008, 1.73
    c_ref, r_inst, c_tie, crb, crv = 0.55, 0.41, 0.58, 0.52, 0.57
    v_cal, b_cal = 11.20, 12.65
    c = 1.0
    for _ in range(200):
        c = c_ref + mu * ((b_cal - kb * X * (c - crb)) - (v_cal - kv * X * (c - crv)) - r_inst)
    V = (v_cal - kv * X * (c - crv)) + eps * (c - c_tie)
    co = Coefficients(eps, mu)
    ref = NightReference(tie_colour_v=c_tie, ref_colour_std=c_ref, ref_colour_std_err=0.0,
                         ref_colour_inst=r_inst, ref_colour_inst_err=0.0,
                         kappa_b=kb, kappa_v=kv, cref_b=crb, cref_v=crv)
    res = transform_target(*_constant_night(v_cal, b_cal, airmass=X), ref, co, max_gap_d=0.003)
    np.testing.assert_allclose(res.V.bv, c, atol=1e-12, rtol=0)
    np.testing.assert_allclose(res.V.mag, V, atol=1e-12, rtol=0)
    np.testing.assert_allclose(res.B.mag, V + c, atol=1e-12, rtol=0)
    # the colour term really acted: without kappa the colour differs by several hundredths
    assert abs(c - (c_ref + mu * (b_cal - v_cal - r_inst))) > 0.01


def _numeric_errors(eps, mu, kb, kv, X, ref_kw, v_cal, b_cal, s_v, s_b, errs):
    """Errors by numerical differentiation of the published equations (fixed point)."""

    def solve(p):
        c = 1.0
        for _ in range(300):
            c = p["c_ref"] + p["mu"] * ((p["b"] - p["kb"] * X * (c - p["crb"]))
                                        - (p["v"] - p["kv"] * X * (c - p["crv"])) - p["r"])
        V = p["v"] - p["kv"] * X * (c - p["crv"]) + p["eps"] * (c - p["c_tie"])
        return np.array([V, V + c, c])

    p0 = dict(eps=eps, mu=mu, kb=kb, kv=kv, b=b_cal, v=v_cal, **ref_kw)
    base = solve(p0)
    grads = {}
    for k in p0:
        h = 1e-6
        p1 = dict(p0)
        p1[k] += h
        grads[k] = (solve(p1) - base) / h
    rand_v_at_v = math.hypot(grads["v"][0] * s_v, grads["b"][0] * s_b)
    rand_b_at_b = math.hypot(grads["v"][1] * s_v, grads["b"][1] * s_b)
    rand_c = math.hypot(grads["v"][2] * s_v, grads["b"][2] * s_b)
    sysv = [(grads[k] * e) for k, e in errs.items()]
    sys_all = np.sqrt(np.sum(np.square(sysv), axis=0))
    return base, rand_v_at_v, rand_b_at_b, rand_c, sys_all, grads


def test_error_propagation_matches_numerical_derivatives():
    # First-order propagation checked against numerical derivatives of the same
    # published equations (fixed-point solution), component by component.
    eps, mu, kb, kv, X = 0.06, 1.07, -0.03, -0.006, 1.5
    ref_kw = dict(c_ref=0.52, r=0.47, c_tie=0.52, crb=0.5, crv=0.5)
    v_cal, b_cal = 12.0, 13.3
    s_v, s_b = 0.01, 0.012  # constant series: the interpolated other band keeps its own error
    errs = dict(eps=0.011, mu=0.023, kb=0.012, kv=0.004, c_ref=0.009, r=0.002)
    co = Coefficients(eps, mu, epsilon_v_err=errs["eps"], mu_bv_err=errs["mu"])
    ref = NightReference(tie_colour_v=ref_kw["c_tie"], ref_colour_std=ref_kw["c_ref"], ref_colour_std_err=errs["c_ref"],
                         ref_colour_inst=ref_kw["r"], ref_colour_inst_err=errs["r"], kappa_b=kb, kappa_b_err=errs["kb"],
                         kappa_v=kv, kappa_v_err=errs["kv"], cref_b=ref_kw["crb"], cref_v=ref_kw["crv"],
                         cal_err_b=0.007, cal_err_v=0.005)
    n = 9
    t_v = np.arange(n) * 0.004
    t_b = t_v  # simultaneous samples: the other band is taken exactly, with its own error
    res = transform_target(t_v, np.full(n, v_cal), np.full(n, s_v), np.full(n, X),
                           t_b, np.full(n, b_cal), np.full(n, s_b), np.full(n, X), ref, co, max_gap_d=0.001)
    base, rv, rb, rc, _, g = _numeric_errors(eps, mu, kb, kv, X, ref_kw, v_cal, b_cal, s_v, s_b, errs)
    assert np.all(res.V.interp_err == 0.0)
    np.testing.assert_allclose(res.V.mag, base[0], atol=1e-12)
    np.testing.assert_allclose(res.V.mag_err, rv, rtol=1e-5)
    np.testing.assert_allclose(res.B.mag_err, rb, rtol=1e-5)
    np.testing.assert_allclose(res.V.bv_err, rc, rtol=1e-5)
    # systematic: colour exactly the numerical propagation of all its inputs
    sys_c = math.sqrt(sum((g[k][2] * e) ** 2 for k, e in errs.items()))
    np.testing.assert_allclose(res.V.bv_sys_err, sys_c, rtol=1e-5)
    # V: its inputs plus the V calibration; the catalogue reference colour enters through
    # eps - kv X (the partial cancellation against the tie colour is ignored: conservative)
    sys_v = math.sqrt(sum((g[k][0] * e) ** 2 for k, e in errs.items()) + 0.005**2)
    np.testing.assert_allclose(res.V.cal_err, sys_v, rtol=1e-5)
    # B = V + c: the catalogue enters through the comparison stars' B (cal_err_b), not the
    # reference colour's catalogue error or the V tie (their V parts cancel)
    sys_b = math.sqrt(sum((g[k][1] * e) ** 2 for k, e in errs.items() if k != "c_ref") + 0.007**2)
    np.testing.assert_allclose(res.B.cal_err, sys_b, rtol=1e-5)


# =========================================================================== Ballesteros


def _ballesteros(c):
    # Ballesteros (2012, EPL 97, 34008), written out independently of the module
    return 4600.0 * (1.0 / (0.92 * c + 1.7) + 1.0 / (0.92 * c + 0.62))


def test_ballesteros_sun():
    # Ballesteros (2012): B - V = 0.65 gives about 5780 K; the Sun: 5772 K (IAU 2015 B3)
    T, _ = ballesteros_temperature(0.65)
    assert abs(T - 5780.0) < 15.0
    assert abs(T - 5772.0) < 15.0
    assert T == pytest.approx(_ballesteros(0.65), abs=1e-9)
    # the solar B - V = 0.653 +- 0.003 (Ramirez et al. 2012) within ~20 K of 5772 K
    T_sun, T_sun_err = ballesteros_temperature(0.653, 0.003)
    assert abs(T_sun - 5772.0) < 20.0
    assert 5.0 < T_sun_err < 20.0


def test_ballesteros_dereddening_and_error_propagation():
    # dereddening (c = (B - V) - E(B - V)) makes the star bluer, hence hotter
    T0, _ = ballesteros_temperature(0.9)
    T1, _ = ballesteros_temperature(0.9, ebv=0.2)
    assert T1 > T0
    assert T1 == pytest.approx(_ballesteros(0.7), abs=1e-9)
    # error by propagation vs a numerical derivative of the published relation
    for c in (-0.2, 0.3, 0.65, 1.2, 1.8):
        h = 1e-6
        dTdc = (_ballesteros(c + h) - _ballesteros(c - h)) / (2 * h)
        _, err = ballesteros_temperature(c, 0.02, ebv=0.0, ebv_err=0.015)
        assert err == pytest.approx(abs(dTdc) * math.hypot(0.02, 0.015), rel=1e-6)
    # arrays; NaN outside the documented range -0.4 .. 2.0
    T, E = ballesteros_temperature(np.array([-0.5, 0.0, 1.0, 2.1]), np.array([0.01] * 4))
    assert np.isnan(T[0]) and np.isnan(T[3]) and np.isnan(E[0])
    np.testing.assert_allclose(T[1:3], _ballesteros(np.array([0.0, 1.0])))
    with pytest.raises(InputError):
        ballesteros_temperature(0.5, -0.01)


# =========================================================================== coefficients


def test_coefficients_validation():
    Coefficients(0.05, 1.08)
    with pytest.raises(InputError, match="epsilon_v"):
        Coefficients(0.7, 1.0)
    with pytest.raises(InputError, match="mu_bv"):
        Coefficients(0.0, 1.6)
    with pytest.raises(InputError, match="mu_bv"):
        Coefficients(0.0, 0.45)
    with pytest.raises(InputError, match="finite"):
        Coefficients(float("nan"), 1.0)
    with pytest.raises(InputError, match="mu_bv_err"):
        Coefficients(0.0, 1.0, mu_bv_err=-0.1)
    with pytest.raises(InputError, match="number"):
        Coefficients("abc", 1.0)  # type: ignore[arg-type]
    # usual ranges (common practice: eps within +-0.1, mu within 0.9-1.15) only warn
    assert Coefficients(0.05, 1.05).warnings == ()
    assert len(Coefficients(0.2, 1.3).warnings) == 2
    d = Coefficients(0.05, 1.08, epsilon_v_err=0.01, source="field X").to_dict()
    assert d["epsilon_v"] == 0.05 and d["source"] == "field X"
    json.dumps(d, allow_nan=False)


def _standard_field(rng, n, *, eps=0.05, mu=1.08, span=(0.0, 1.6), extra=0.0, inst=0.005):
    """An invented standard field: true V, B - V; catalogue values with quoted errors
    (plus ``extra`` unquoted scatter); instrumental magnitudes from the Hardie (1962)
    equations with arbitrary zero points."""
    c = rng.uniform(*span, n)
    V = rng.uniform(9.0, 13.0, n)
    B = V + c
    sV = rng.uniform(0.005, 0.02, n)
    sB = rng.uniform(0.005, 0.02, n)
    V_cat = V + rng.normal(0, 1, n) * np.sqrt(sV**2 + extra**2)
    B_cat = B + rng.normal(0, 1, n) * np.sqrt(sB**2 + extra**2)
    sv = np.full(n, inst)
    sb = np.full(n, inst)
    v0 = V - eps * c - 0.31  # V - v = eps (B - V) + zeta_v
    b0 = v0 + (c - (-0.12)) / mu  # B - V = mu (b - v) + zeta_bv
    v = v0 + rng.normal(0, 1, n) * sv
    b = b0 + rng.normal(0, 1, n) * sb
    ids = [f"std{i:02d}" for i in range(n)]
    return ids, V_cat, sV, B_cat, sB, v, sv, b, sb


def test_fit_recovers_exact_coefficients_without_noise():
    # noise-free data on the Hardie (1962) relations: the fit must return them exactly
    rng = np.random.default_rng(3)
    ids = [f"s{i}" for i in range(10)]
    c = rng.uniform(0, 1.6, 10)
    V = rng.uniform(9, 13, 10)
    B = V + c
    v = V - (-0.03) * c - 0.2  # V - v = eps (B - V) + zeta_v with eps = -0.03, zeta_v = 0.2
    b = v + (c - 0.1) / 0.97  # B - V = mu (b - v) + zeta_bv with mu = 0.97, zeta_bv = 0.1
    e = np.full(10, 0.01)
    f = fit_coefficients(ids, V, e, B, e, v, e, b, e)
    assert f.epsilon_v == pytest.approx(-0.03, abs=1e-10)
    assert f.mu_bv == pytest.approx(0.97, abs=1e-10)
    assert f.zeta_v == pytest.approx(0.2, abs=1e-10)
    assert f.zeta_bv == pytest.approx(0.1, abs=1e-10)
    assert f.intrinsic_v == 0.0 and f.intrinsic_bv == 0.0
    assert f.n_stars == 10 and f.rejected == () and f.warnings == ()
    np.testing.assert_allclose(f.resid_v, 0.0, atol=1e-10)


def test_fit_minimises_the_york_objective():
    # York et al. (2004): the best line minimises S(a, b) = sum (y - a - b x)^2 / var_i(b),
    # with var_i(b) = var(y - b x) including the x-y correlation (here with the fitted
    # catalogue excess s^2 added to sV^2 and sB^2); compare with a direct numerical
    # minimisation (scipy; the intercept is eliminated analytically for each slope).
    from scipy.optimize import minimize_scalar

    for seed in (8, 9):
        rng = np.random.default_rng(seed)
        ids, V, sV, B, sB, v, sv, b, sb = _standard_field(rng, 12, extra=0.03 if seed == 9 else 0.0)
        f = fit_coefficients(ids, V, sV, B, sB, v, sv, b, sb)
        s1, s2 = f.intrinsic_v**2, f.intrinsic_bv**2
        if seed == 9:
            assert s1 > 0 and s2 > 0  # the excess is part of this check

        def best_line(x, y, var_of):
            def S(e):
                w = 1.0 / var_of(e)
                a = np.sum(w * (y - e * x)) / np.sum(w)
                return np.sum(w * (y - a - e * x) ** 2)

            e = minimize_scalar(S, bounds=(-1.0, 2.0), method="bounded", options={"xatol": 1e-12}).x
            w = 1.0 / var_of(e)
            return e, np.sum(w * (y - e * x)) / np.sum(w)

        e1, a1 = best_line(B - V, V - v, lambda e: (1 + e) ** 2 * (sV**2 + s1) + e**2 * (sB**2 + s1) + sv**2)
        assert f.epsilon_v == pytest.approx(e1, abs=1e-7)
        assert f.zeta_v == pytest.approx(a1, abs=1e-7)
        m2, a2 = best_line(b - v, B - V, lambda m: sB**2 + sV**2 + 2 * s2 + m**2 * (sb**2 + sv**2))
        assert f.mu_bv == pytest.approx(m2, abs=1e-7)
        assert f.zeta_bv == pytest.approx(a2, abs=1e-7)
        # and the excess makes the reduced chi-square one when it is not zero
        if s1 > 0:
            var = (1 + e1) ** 2 * (sV**2 + s1) + e1**2 * (sB**2 + s1) + sv**2
            assert np.sum((V - v - a1 - e1 * (B - V)) ** 2 / var) == pytest.approx(12 - 2, rel=1e-6)


@pytest.mark.parametrize("extra", [0.0, 0.02])
def test_fitted_coefficients_have_honest_errors(extra):
    # Simulated truth: 8-15 standard stars spanning B - V 0..1.6, known eps and mu.
    # extra = 0: quoted errors are right; extra = 0.02: catalogue values scatter 0.02 mag
    # beyond their quoted errors and the fitted excess must make the errors honest.
    # Measured on 4000 fields (eps / mu): extra = 0: pull std 0.92 / 0.92, coverage
    # 0.738 / 0.735, i.e. about 8% conservative: a chance excess fitted to clean data (43%
    # of the fields) widens the errors; with the excess switched off, York's errors alone
    # give std 1.00.  extra = 0.02: std 1.09 / 1.07 (Student-t-like tails), coverage
    # 0.677 / 0.682.
    rng = np.random.default_rng(20240 + int(extra * 1000))
    n_real = 500
    pe, pm = np.empty(n_real), np.empty(n_real)
    for k in range(n_real):
        n = int(rng.integers(8, 16))
        f = fit_coefficients(*_standard_field(rng, n, eps=0.05, mu=1.08, extra=extra))
        pe[k] = (f.epsilon_v - 0.05) / f.epsilon_v_err
        pm[k] = (f.mu_bv - 1.08) / f.mu_bv_err
    tol = coverage_tolerance(n_real)
    for p in (pe, pm):
        assert abs(p.mean()) < 3.5 / math.sqrt(n_real)
        cover = np.mean(np.abs(p) < 1.0)
        if extra == 0:
            assert 0.8 < p.std() < 1.06
            assert ONE_SIGMA - tol < cover < ONE_SIGMA + tol + 0.05
        else:
            assert 0.9 < p.std() < 1.3
            assert ONE_SIGMA - tol - 0.01 < cover < ONE_SIGMA + tol


def test_narrow_colour_range_warns():
    rng = np.random.default_rng(12)
    f = fit_coefficients(*_standard_field(rng, 10, span=(0.4, 0.9)))
    assert f.colour_range < 0.6  # true span < 0.5, plus catalogue errors
    assert any("too narrow to constrain the slope" in w for w in f.warnings)
    f2 = fit_coefficients(*_standard_field(rng, 10, span=(0.0, 1.6)))
    if f2.colour_range >= 1.0:
        assert not any("too narrow" in w for w in f2.warnings)
    # the narrow field's slope errors are correspondingly larger (same errors, smaller lever)
    assert f.epsilon_v_err > f2.epsilon_v_err


def test_outlier_star_is_rejected():
    rng = np.random.default_rng(31)
    ids, V, sV, B, sB, v, sv, b, sb = _standard_field(rng, 11)
    clean = fit_coefficients(ids, V, sV, B, sB, v, sv, b, sb)
    V_bad = V.copy()
    V_bad[4] += 0.30  # a wrong catalogue V (or a variable standard)
    f = fit_coefficients(ids, V_bad, sV, B, sB, v, sv, b, sb)
    assert [s for s, _ in f.rejected] == ["std04"]
    assert "sigma" in f.rejected[0][1]
    assert not f.used[4] and f.used.sum() == 10
    assert f.n_stars == 10
    # the result equals the fit without that star
    keep = np.arange(11) != 4
    ref = fit_coefficients([i for i, k in zip(ids, keep) if k], V[keep], sV[keep], B[keep], sB[keep],
                           v[keep], sv[keep], b[keep], sb[keep])
    assert f.epsilon_v == pytest.approx(ref.epsilon_v, abs=1e-12)
    assert f.mu_bv == pytest.approx(ref.mu_bv, abs=1e-12)
    assert abs(f.epsilon_v - clean.epsilon_v) < 2 * clean.epsilon_v_err
    # never below min_stars: with min_stars equal to the star count nothing is rejected
    g = fit_coefficients(ids, V_bad, sV, B, sB, v, sv, b, sb, min_stars=11)
    assert g.rejected == () and g.n_stars == 11
    assert g.intrinsic_v > 0.03  # the outlier is absorbed into the excess instead


def test_too_few_stars_and_bad_input():
    rng = np.random.default_rng(5)
    ids, V, sV, B, sB, v, sv, b, sb = _standard_field(rng, 5)
    V = V.copy()
    V[[0, 1]] = np.nan
    with pytest.raises(InputError, match="needs at least 4 stars with B, V and both instrumental magnitudes; found 3"):
        fit_coefficients(ids, V, sV, B, sB, v, sv, b, sb)
    with pytest.raises(InputError, match="V_err has 4 values"):
        fit_coefficients(ids, V, sV[:4], B, sB, v, sv, b, sb)
    sB2 = sB.copy()
    sB2[2] = -0.01
    with pytest.raises(InputError, match="B_err of standard star std02 is negative"):
        fit_coefficients(ids, V, sV, B, sB2, v, sv, b, sb)


def test_fit_result_dict_and_coefficients():
    rng = np.random.default_rng(9)
    ids, V, sV, B, sB, v, sv, b, sb = _standard_field(rng, 9)
    V = V.copy()
    V[8] = np.nan  # unusable star: listed, not fitted
    f = fit_coefficients(ids, V, sV, B, sB, v, sv, b, sb)
    assert isinstance(f, CoefficientFit)
    assert f.n_stars == 8 and ("std08", "no V") in f.rejected
    d = f.to_dict()
    for key in ("epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "n_stars"):
        assert key in d
    assert d["n_stars"] == 8 and len(d["stars"]) == 9
    json.dumps(d, allow_nan=False)
    co = f.coefficients("invented field, night 1")
    assert co.epsilon_v == f.epsilon_v and co.mu_bv_err == f.mu_bv_err and co.source == "invented field, night 1"
    # residual arrays are consistent with the fitted lines
    u = f.used
    np.testing.assert_allclose(f.resid_v[u], f.y_v[u] - f.zeta_v - f.epsilon_v * f.x_v[u], atol=1e-12)
    np.testing.assert_allclose(f.resid_bv[u], f.y_bv[u] - f.zeta_bv - f.mu_bv * f.x_bv[u], atol=1e-12)


# =========================================================================== interpolation


def test_interpolation_exact_for_a_straight_line():
    t = np.array([0.0, 0.01, 0.02, 0.03, 0.045, 0.05])
    y = 12.0 + 3.0 * t
    e = np.full(t.size, 0.0)
    tq = np.array([0.005, 0.0125, 0.03, 0.049, 0.052, -0.003])
    r = interpolate_series(tq, t, y, e, max_gap_d=0.012)
    assert r.ok.all()
    np.testing.assert_allclose(r.value, 12.0 + 3.0 * tq, atol=1e-12)
    # inside: no curvature, no error; at the ends: the slope was applied exactly and the
    # error is |slope| x gap (one-sided data cannot tell whether the trend continues)
    assert np.all(r.err[:4] < 1e-6)  # zero errors are floored at 1 micromag in the weights
    assert r.one_sided.tolist() == [False, False, False, False, True, True]
    np.testing.assert_allclose(r.err[4:], 3.0 * np.array([0.002, 0.003]), rtol=1e-9)
    np.testing.assert_allclose(r.gap_d[4:], [0.002, 0.003], atol=1e-15)
    # measurement errors: (1 - w)^2 s1^2 + w^2 s2^2 between two samples (straight line: no curvature)
    e2 = np.array([0.01, 0.02, 0.01, 0.02, 0.01, 0.02])
    r2 = interpolate_series([0.0125], t, y, e2, max_gap_d=0.012)
    w = 0.25
    assert r2.meas_err[0] == pytest.approx(math.sqrt((1 - w) ** 2 * 0.02**2 + w**2 * 0.01**2))


def test_interpolation_of_a_parabola_has_the_curvature_error():
    # y = t^2 / 2 * A: linear interpolation error is exactly A/2 (t - t1)(t2 - t)
    A = 400.0
    t = np.arange(0.0, 0.1, 0.01)
    y = 0.5 * A * t**2
    tq = np.array([0.035, 0.052])
    r = interpolate_series(tq, t, y, np.full(t.size, 1e-7), max_gap_d=0.02)
    truth = 0.5 * A * tq**2
    actual = np.abs(r.value - truth)
    np.testing.assert_allclose(r.interp_err, actual, rtol=1e-3)


def test_interpolation_unsorted_nans_and_limits():
    rng = np.random.default_rng(4)
    t = np.sort(rng.uniform(0, 0.2, 40))
    y = 13 + 0.3 * np.sin(t * 40)
    e = np.full(40, 0.005)
    tq = rng.uniform(-0.01, 0.21, 30)
    base = interpolate_series(tq, t, y, e, max_gap_d=0.01)
    perm = rng.permutation(40)
    shuffled = interpolate_series(tq, t[perm], y[perm], e[perm], max_gap_d=0.01)
    np.testing.assert_array_equal(base.value, shuffled.value)
    np.testing.assert_array_equal(base.err, shuffled.err)
    # NaN samples are skipped: same as leaving them out
    y_nan = y.copy()
    y_nan[[5, 17]] = np.nan
    keep = np.ones(40, bool)
    keep[[5, 17]] = False
    a = interpolate_series(tq, t, y_nan, e, max_gap_d=0.01)
    b = interpolate_series(tq, t[keep], y[keep], e[keep], max_gap_d=0.01)
    np.testing.assert_array_equal(a.value, b.value)
    np.testing.assert_array_equal(a.ok, b.ok)
    # a NaN query time is refused
    r = interpolate_series([np.nan, 0.1], t, y, e, max_gap_d=0.01)
    assert r.ok.tolist() == [False, True] and np.isnan(r.value[0])
    with pytest.raises(InputError, match="max_gap_d"):
        interpolate_series(tq, t, y, e, max_gap_d=0)
    with pytest.raises(InputError, match="y has 3 values"):
        interpolate_series(tq, t, y[:3], e, max_gap_d=0.01)
    json.dumps(r.to_dict(), allow_nan=False)


def test_interpolation_refuses_beyond_max_gap_and_edge_cases():
    t = np.array([0.0, 0.01, 0.02, 0.06, 0.07, 0.08])
    y = np.array([1.0, 1.1, 1.2, 1.6, 1.7, 1.8])
    e = np.full(6, 0.01)
    tq = np.array([0.025, 0.04, 0.055, 0.2, -0.5])
    r = interpolate_series(tq, t, y, e, max_gap_d=0.008)
    assert r.ok.tolist() == [True, False, True, False, False]
    assert r.one_sided.tolist() == [True, False, True, False, False]
    assert r.gap_d[1] == pytest.approx(0.02) and r.gap_d[3] == pytest.approx(0.12)
    assert np.isnan(r.value[1]) and np.isnan(r.err[1])
    # non-overlapping series: nothing can be paired
    far = interpolate_series(np.array([1.0, 1.1]), t, y, e, max_gap_d=0.01)
    assert not far.ok.any() and np.all(np.isnan(far.value))
    # an empty series (all NaN)
    empty = interpolate_series(np.array([0.0]), t, np.full(6, np.nan), e, max_gap_d=0.01)
    assert not empty.ok.any() and np.isinf(empty.gap_d[0])
    # a single usable sample: taken with its own error within max_gap_d, refused beyond
    one = interpolate_series(np.array([0.003, -0.002, 0.02]), [0.0], [5.0], [0.02], max_gap_d=0.005)
    assert one.ok.tolist() == [True, True, False]
    np.testing.assert_allclose(one.value[:2], 5.0)
    np.testing.assert_allclose(one.err[:2], 0.02)
    assert one.one_sided[:2].all()


# =========================================================================== simulated nights


def lightcurve(t, period=0.37, v0=13.0, amp=0.8, c0=1.30, dcdv=0.25, nharm=16, taper=8.0):
    """An invented red pulsator: smoothed sawtooth (slow fading, fast rise) in V,
    redder when fainter.  ``t`` in days from an epoch of the rise."""
    ph = (t / period) % 1.0
    n = np.arange(1, nharm + 1)
    w = np.exp(-((n / taper) ** 2)) / n
    g = -(np.sin(2 * np.pi * np.outer(ph, n)) * w).sum(axis=1) / np.pi
    V = v0 + amp * g
    return V, c0 + dcdv * (V - v0)


@dataclass
class SimNight:
    t_v: np.ndarray
    v: np.ndarray
    v_err: np.ndarray
    X_v: np.ndarray
    t_b: np.ndarray
    b: np.ndarray
    b_err: np.ndarray
    X_b: np.ndarray
    V_at_v: np.ndarray
    c_at_v: np.ndarray
    V_at_b: np.ndarray
    c_at_b: np.ndarray
    rising_v: np.ndarray
    ref: NightReference
    c_tie: float

    def transform(self, co: Coefficients, max_gap_d: float = 0.006, drop_b: np.ndarray | None = None):
        keep = np.ones(self.t_b.size, bool) if drop_b is None else ~drop_b
        return transform_target(self.t_v, self.v, self.v_err, self.X_v, self.t_b[keep], self.b[keep],
                                 self.b_err[keep], self.X_b[keep], self.ref, co, max_gap_d=max_gap_d)


def simulate_night(rng, *, eps=0.05, mu=1.08, kb=-0.03, kv=-0.005, n_comp=5, cat_err=0.0, sig_t=0.004,
                   sig_c=0.003, cadence=0.0056, duration=0.30, period=0.37, coeffs_used=None,
                   kappa_err=(0.0, 0.0)) -> SimNight:
    """One invented night: interleaved V and B exposures of a red target (B - V ~ 1.3) and
    blue comparison stars (B - V ~ 0.5), instrumental magnitudes from the Hardie (1962)
    equations with first- and second-order extinction (Henden & Kaitchuck 1982) and a
    transparency wobble, then the ensemble step emulated exactly as described in
    varstar.ensemble: zero points from the comparison stars after removing
    kappa X (c - cref), tied to the catalogue with tie weights summing to one."""
    n_cyc = int(duration / cadence)
    t_epoch = rng.uniform(0, period)
    t_v = np.arange(n_cyc) * cadence + rng.normal(0, 0.0002, n_cyc)
    t_b = t_v + 0.5 * cadence + rng.normal(0, 0.0002, n_cyc)
    tm = duration / 2

    def airmass(t):
        return 1.15 + 2.4 * ((t - tm) / duration) ** 2 + 0.3 * (t - tm) / duration

    Xv, Xb = airmass(t_v), airmass(t_b)
    cc = rng.uniform(0.40, 0.62, n_comp)
    Vc = rng.uniform(10.5, 12.5, n_comp)
    Bc = Vc + cc
    catV = Vc + (rng.normal(0, cat_err, n_comp) if cat_err > 0 else 0.0)
    catB = Bc + (rng.normal(0, cat_err, n_comp) if cat_err > 0 else 0.0)
    zeta_v, zeta_bv, k1v, k1b = 0.31, -0.12, 0.18, 0.30
    cloud = rng.normal(0, 0.02, n_cyc)
    zp_v = 20.9 + cloud
    zp_b = 20.6 + cloud + rng.normal(0, 0.005, n_cyc)

    def inst_v(V, c, X, zp):  # V - v = eps c + zeta_v; extinction k1 X + kv X c
        return V - eps * c - zeta_v + k1v * X + kv * X * c - zp

    def inst_b(V, c, X, zp):  # b - v = (c - zeta_bv) / mu; extinction k1 X + kb X c
        return V - eps * c - zeta_v + (c - zeta_bv) / mu + k1b * X + kb * X * c - zp

    mv = inst_v(Vc, cc, Xv[:, None], zp_v[:, None]) + rng.normal(0, sig_c, (n_cyc, n_comp))
    mb = inst_b(Vc, cc, Xb[:, None], zp_b[:, None]) + rng.normal(0, sig_c, (n_cyc, n_comp))
    kb_hat = kb + (rng.normal(0, kappa_err[0]) if kappa_err[0] > 0 else 0.0)
    kv_hat = kv + (rng.normal(0, kappa_err[1]) if kappa_err[1] > 0 else 0.0)
    cat_c = catB - catV

    def ensemble(m, X, kappa, cat):
        cref = float(cat_c.mean())
        y = m - kappa * X[:, None] * (cat_c - cref)
        var_M = sig_c**2 / y.shape[0]
        u = np.full(n_comp, 1.0 / (cat_err**2 + var_M))
        u /= u.sum()
        M = y.mean(axis=0)
        M = M - np.sum(u * (M - cat))  # the tie: sum u (M - catalogue) = 0
        z = (y - M).mean(axis=1)  # equal weights, complete data
        return M, np.full(n_comp, math.sqrt(var_M)), z, np.full(z.size, sig_c / math.sqrt(n_comp)), u, cref, \
            math.sqrt(float(np.sum(u**2)) * cat_err**2)

    Mv, Mv_e, zv, zv_e, uv, crv, calv = ensemble(mv, Xv, kv_hat, catV)
    Mb, Mb_e, zb, zb_e, ub, crb, calb = ensemble(mb, Xb, kb_hat, catB)
    V_v, c_v = lightcurve(t_v - t_epoch, period)
    V_b, c_b = lightcurve(t_b - t_epoch, period)
    h = 1e-4
    rising = (lightcurve(t_v - t_epoch + h, period)[0] - lightcurve(t_v - t_epoch - h, period)[0]) / (2 * h) < -3.0
    vT = inst_v(V_v, c_v, Xv, zp_v) + rng.normal(0, sig_t, n_cyc)
    bT = inst_b(V_b, c_b, Xb, zp_b) + rng.normal(0, sig_t, n_cyc)
    co = coeffs_used or Coefficients(eps, mu)
    cat_e = np.full(n_comp, cat_err)
    ref = night_reference(catB, cat_e, catV, cat_e, Mb, Mb_e, Mv, Mv_e, uv, co,
                          kappa_b=kb_hat, kappa_b_err=kappa_err[0], kappa_v=kv_hat, kappa_v_err=kappa_err[1],
                          cref_b=crb, cref_v=crv, cal_err_b=calb, cal_err_v=calv)
    return SimNight(t_v, vT - zv, np.sqrt(sig_t**2 + zv_e**2), Xv, t_b, bT - zb, np.sqrt(sig_t**2 + zb_e**2), Xb,
                    V_v, c_v, V_b, c_b, rising, ref, float(uv @ (Bc - Vc)))


def test_untransformed_is_off_and_transformed_matches_truth():
    rng = np.random.default_rng(77)
    eps, mu = 0.05, 1.08
    s = simulate_night(rng, eps=eps, mu=mu)
    # the problem: calibrated but untransformed V of a red target against blue comparisons
    # is off by about -eps Delta(B - V) = -0.05 * 0.8 (Hardie 1962), here also the small
    # second-order term kv X (c - cref) ~ -0.006
    off_untransformed = float(np.mean(s.v - s.V_at_v))
    assert abs(off_untransformed - (-eps * 0.8)) < 0.012
    assert abs(off_untransformed) > 0.03
    res = s.transform(Coefficients(eps, mu))
    ok = res.V.ok
    assert ok.sum() >= res.V.ok.size - 2
    assert abs(np.mean((res.V.mag - s.V_at_v)[ok])) < 0.005
    assert abs(np.mean((res.V.bv - s.c_at_v)[ok])) < 0.005
    okb = res.B.ok
    assert abs(np.mean((res.B.mag - s.V_at_b - s.c_at_b)[okb])) < 0.005
    # the colour really varied with phase and the target is red
    assert np.ptp(s.c_at_v) > 0.1 and 1.1 < np.mean(res.V.bv[ok]) < 1.5
    json.dumps(res.to_dict(), allow_nan=False)
    frame = res.to_frame()
    assert set(frame["band"]) == {"V", "B"} and len(frame) == res.V.ok.size + res.B.ok.size


def test_random_errors_have_unit_pulls_including_the_fast_rise():
    # Simulated truth, 40 nights: pulls of V, B and B - V against their random errors; in
    # the fast rise (dV/dt < -3 mag/d) the interpolation error of the other band must
    # cover the truth too, while the measurement error alone would not.
    rng = np.random.default_rng(2024)
    co = Coefficients(0.05, 1.08)
    pv, pb, pc, rise, rise_meas_only = [], [], [], [], []
    for _ in range(40):
        s = simulate_night(rng)
        r = s.transform(co)
        ok, okb = r.V.ok, r.B.ok
        pv.append(((r.V.mag - s.V_at_v) / r.V.mag_err)[ok])
        pc.append(((r.V.bv - s.c_at_v) / r.V.bv_err)[ok])
        pb.append(((r.B.mag - s.V_at_b - s.c_at_b) / r.B.mag_err)[okb])
        sel = ok & s.rising_v & ~r.V.one_sided
        rise.append(((r.V.bv - s.c_at_v) / r.V.bv_err)[sel])
        meas_only = r.V.bv_err**2 - (1.08 * r.V.interp_err) ** 2
        rise_meas_only.append(((r.V.bv - s.c_at_v) / np.sqrt(meas_only))[sel])
    for p in (pv, pb, pc):
        p = np.concatenate(p)
        assert abs(p.mean()) < 0.1
        assert 0.93 < p.std() < 1.07
        assert abs(np.mean(np.abs(p) < 1) - ONE_SIGMA) < coverage_tolerance(p.size)
    rise = np.concatenate(rise)
    assert rise.size > 150
    assert abs(rise.mean()) < 0.2
    assert 0.85 < rise.std() < 1.2
    # without the interpolation error the rise pulls would be far too wide (measured ~1.5)
    assert np.concatenate(rise_meas_only).std() > 1.3


def test_interpolation_pulls_at_the_fast_rise():
    # interpolate_series alone on the invented light curve: truth known at every time
    rng = np.random.default_rng(99)
    pulls_rise, pulls_all = [], []
    for _ in range(100):
        t0 = rng.uniform(0, 0.37)
        t = np.arange(54) * 0.0056 + rng.normal(0, 0.0002, 54)
        tq = t + 0.0028 + rng.normal(0, 0.0002, 54)
        y = lightcurve(t - t0)[0] + rng.normal(0, 0.004, t.size)
        truth = lightcurve(tq - t0)[0]
        r = interpolate_series(tq, t, y, np.full(t.size, 0.004), max_gap_d=0.006)
        inner = r.ok & ~r.one_sided
        pulls_all.append(((r.value - truth) / r.err)[inner])
        big = inner & (r.interp_err > r.meas_err)
        pulls_rise.append(((r.value - truth) / r.err)[big])
    p_all, p_rise = np.concatenate(pulls_all), np.concatenate(pulls_rise)
    assert 0.93 < p_all.std() < 1.07 and abs(p_all.mean()) < 0.1
    assert p_rise.size > 300
    assert 0.85 < p_rise.std() < 1.2 and abs(p_rise.mean()) < 0.2


def test_systematic_errors_cover_the_night_offsets():
    # Simulated truth, 300 nights: catalogue errors 0.01 mag, coefficients and colour
    # extinction drawn from their quoted errors; the night-mean offset of V, B and B - V
    # from the truth against the quoted systematic error.
    rng = np.random.default_rng(555)
    n_nights = 300
    pv, pb, pc = np.empty(n_nights), np.empty(n_nights), np.empty(n_nights)
    for k in range(n_nights):
        co = Coefficients(0.05 + rng.normal(0, 0.01), 1.08 + rng.normal(0, 0.02), epsilon_v_err=0.01, mu_bv_err=0.02)
        s = simulate_night(rng, cat_err=0.01, coeffs_used=co, kappa_err=(0.01, 0.005),
                           n_comp=int(rng.integers(3, 8)))
        r = s.transform(co)
        ok, okb = r.V.ok, r.B.ok
        pv[k] = np.mean((r.V.mag - s.V_at_v)[ok]) / np.sqrt(np.mean(r.V.cal_err[ok] ** 2))
        pc[k] = np.mean((r.V.bv - s.c_at_v)[ok]) / np.sqrt(np.mean(r.V.bv_sys_err[ok] ** 2))
        pb[k] = np.mean((r.B.mag - s.V_at_b - s.c_at_b)[okb]) / np.sqrt(np.mean(r.B.cal_err[okb] ** 2))
    for p in (pv, pb, pc):
        assert abs(p.mean()) < 0.2
        assert 0.85 < p.std() < 1.15
        assert abs(np.mean(np.abs(p) < 1) - ONE_SIGMA) < coverage_tolerance(n_nights)


def test_pairs_beyond_max_gap_are_refused():
    rng = np.random.default_rng(13)
    s = simulate_night(rng)
    hole = (s.t_b > 0.10) & (s.t_b < 0.14)  # seven B exposures lost
    max_gap = 0.006
    r = s.transform(Coefficients(0.05, 1.08), max_gap_d=max_gap, drop_b=hole)
    tb = s.t_b[~hole]
    d = np.abs(s.t_v[:, None] - tb[None, :])
    nearest = d.min(axis=1)
    np.testing.assert_array_equal(r.V.ok, nearest <= max_gap)
    assert (~r.V.ok).sum() >= 4
    assert np.all(np.isnan(r.V.mag[~r.V.ok])) and np.all(r.V.gap_d[~r.V.ok] > max_gap)
    before = (tb[None, :] <= s.t_v[:, None]) & (d <= max_gap)
    after = (tb[None, :] > s.t_v[:, None]) & (d <= max_gap)
    np.testing.assert_array_equal(r.V.one_sided, r.V.ok & (before.any(axis=1) != after.any(axis=1)))
    assert any("not transformed" in w for w in r.warnings)
    assert r.to_dict()["bands"]["V"]["n_refused"] == int((~r.V.ok).sum())
    # the V magnitudes next to the hole (one-sided) still cover the truth
    side = r.V.one_sided
    assert np.all(np.abs((r.V.mag - s.V_at_v)[side] / r.V.mag_err[side]) < 4)


def test_transform_edge_cases():
    co = Coefficients(0.05, 1.08)
    ref = NightReference(0.6, 0.6, 0.01, 0.45, 0.001)
    t = np.arange(5) * 0.01
    one = np.ones(5)
    # non-overlapping series: nothing transformed, all NaN
    r = transform_target(t, 12 * one, 0.01 * one, one, t + 1.0, 13 * one, 0.01 * one, one, ref, co, max_gap_d=0.01)
    assert not r.V.ok.any() and not r.B.ok.any()
    assert np.all(np.isnan(r.V.mag)) and np.all(np.isnan(r.B.bv))
    # single B sample: used (with its own error) for V exposures within max_gap_d only
    r = transform_target(t, 12 * one, 0.01 * one, one, [0.012], [13.2], [0.01], [1.0], ref, co, max_gap_d=0.015)
    assert r.V.ok.tolist() == [True, True, True, False, False]
    np.testing.assert_allclose(r.V.bv[:3], 0.6 + 1.08 * (13.2 - 12.0 - 0.45))
    assert r.B.ok.tolist() == [True]
    # NaNs in the own band are refused, NaNs in the other band skipped
    v = 12 * one
    v[2] = np.nan
    r = transform_target(t, v, 0.01 * one, one, t + 0.005, 13.2 * one, 0.01 * one, one, ref, co, max_gap_d=0.008)
    assert r.V.ok.tolist() == [True, True, False, True, True]
    assert r.B.ok.all()
    np.testing.assert_allclose(r.B.mag, 12.0405 + 1.41, atol=1e-12)
    # airmass NaN is fine without colour extinction, refused with it
    r = transform_target(t, 12 * one, 0.01 * one, np.nan * one, t, 13.2 * one, 0.01 * one, np.nan * one, ref, co,
                         max_gap_d=0.008)
    assert r.V.ok.all()
    ref_k = NightReference(0.6, 0.6, 0.01, 0.45, 0.001, kappa_b=-0.03, cref_b=0.6)
    r = transform_target(t, 12 * one, 0.01 * one, np.nan * one, t, 13.2 * one, 0.01 * one, np.nan * one, ref_k, co,
                         max_gap_d=0.008)
    assert not r.V.ok.any()
    with pytest.raises(InputError, match="v_err has 4 values"):
        transform_target(t, 12 * one, 0.01 * one[:4], one, t, 13 * one, 0.01 * one, one, ref, co, max_gap_d=0.01)
    with pytest.raises(InputError, match="NightReference"):
        transform_target(t, 12 * one, 0.01 * one, one, t, 13 * one, 0.01 * one, one, {}, co, max_gap_d=0.01)


def test_night_reference_weights_fallbacks_and_validation():
    co = Coefficients(0.05, 1.08, k2_bv=-0.03, k2_bv_err=0.01)
    cat_V = np.array([11.0, 11.5, 12.0, 12.2])
    cat_B = np.array([11.5, 12.1, np.nan, 12.6])  # star 2 has no catalogue B
    v_mean = np.array([10.7, 11.2, 11.9, 11.9])
    # calibrated instrumental colours consistent with (B - V) = 1.08 (b - v) + 0.1
    r = (np.array([0.5, 0.6, 0.3, 0.4]) - 0.1) / 1.08
    b_mean = v_mean + r
    u_v = np.array([0.4, 0.3, 0.2, 0.1])
    e = np.full(4, 0.01)
    ref = night_reference(cat_B, e, cat_V, e, b_mean, e * 0.1, v_mean, e * 0.1, u_v, co, cal_err_b=0.004,
                          cal_err_v=0.003)
    # documented weights: V tie weights restricted to stars 0, 1, 3 and renormalised
    u = np.array([0.4, 0.3, 0.1]) / 0.8
    c = np.array([0.5, 0.6, 0.4])
    assert ref.ref_colour_std == pytest.approx(u @ c)
    assert ref.tie_colour_v == pytest.approx(u @ c)
    assert ref.ref_colour_inst == pytest.approx(u @ r[[0, 1, 3]])
    assert ref.ref_colour_inst_err == pytest.approx(math.sqrt(np.sum(u**2 * 2 * 0.001**2)))
    # consistent stars: catalogue errors only, sum u^2 (sB^2 + sV^2)
    assert ref.ref_colour_std_err == pytest.approx(math.sqrt(np.sum(u**2 * 2 * 0.01**2)))
    # no colour extinction fitted: k2_bv goes to b, none to v, zero points refer to the reference colour
    assert ref.kappa_b == -0.03 and ref.kappa_b_err == 0.01 and ref.kappa_v == 0.0
    assert ref.cref_b == pytest.approx(ref.ref_colour_std)
    assert ref.cal_err_b == 0.004 and ref.cal_err_v == 0.003
    json.dumps(ref.to_dict(), allow_nan=False)
    # given kappas are kept
    ref2 = night_reference(cat_B, e, cat_V, e, b_mean, e, v_mean, e, u_v, co, kappa_b=-0.02, kappa_b_err=0.003,
                           kappa_v=-0.004, kappa_v_err=0.002, cref_b=0.55, cref_v=0.56)
    assert (ref2.kappa_b, ref2.kappa_v, ref2.cref_b, ref2.cref_v) == (-0.02, -0.004, 0.55, 0.56)
    # catalogue colours scattering beyond their errors widen the reference colour error
    noisy_B = cat_B + np.array([0.08, -0.07, 0.0, 0.09])
    ref3 = night_reference(noisy_B, e, cat_V, e, b_mean, e * 0.1, v_mean, e * 0.1, u_v, co)
    assert ref3.ref_colour_std_err > 2 * ref.ref_colour_std_err
    with pytest.raises(InputError, match="catalogue B and V"):
        night_reference(np.full(4, np.nan), e, cat_V, e, b_mean, e, v_mean, e, u_v, co)
    with pytest.raises(InputError, match="cref_b must be finite"):
        NightReference(0.6, 0.6, 0.01, 0.45, 0.001, kappa_b=-0.03)
    with pytest.raises(InputError, match="ref_colour_std_err must be >= 0"):
        NightReference(0.6, 0.6, -0.01, 0.45, 0.001)
