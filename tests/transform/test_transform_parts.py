"""One module of varstar.transform at a time: checks the whole-package tests
(tests/transform/test_transform.py) do not make.

Invented data only, fixed seeds.  The source of each expected value is named
beside the check.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

import numpy as np
import pytest
from scipy import optimize, stats

from varstar.errors import InputError
from varstar.transform import (
    Coefficients,
    NightReference,
    ballesteros_temperature,
    fit_coefficients,
    interpolate_series,
    night_reference,
    transform_target,
)
from varstar.transform.checks import as_1d, check_positive, finite_fields, read_only
from varstar.transform.york import york_lines

ONE_SIGMA = 0.6826894921370859  # P(|z| < 1) of a normal distribution


def binomial_tolerance(p: float, n: int) -> float:
    """Three binomial standard deviations of a fraction p measured from n trials."""
    return 3.0 * math.sqrt(p * (1.0 - p) / n)


# =========================================================================== checks


@dataclass(frozen=True)
class _Measured:
    value: float
    value_err: float = 0.0

    def __post_init__(self) -> None:
        finite_fields(self, ("value", "value_err"), "measured", " (in the test)")


def test_checks_turn_fields_into_floats_and_refuse_bad_numbers():
    # common practice: a result holds plain finite floats, an error is never negative
    m = _Measured(np.int64(3), np.float32(0.5))
    assert type(m.value) is float and type(m.value_err) is float and (m.value, m.value_err) == (3.0, 0.5)
    with pytest.raises(InputError, match=r"measured value must be a number, got 1000.*\(in the test\)"):
        _Measured(10**400)  # too large for a float: OverflowError inside, one clear message outside
    with pytest.raises(InputError, match="measured value must be finite"):
        _Measured(float("inf"))
    with pytest.raises(InputError, match="measured value_err must be >= 0"):
        _Measured(1.0, -0.1)
    with pytest.raises(InputError, match="value must be a number"):
        _Measured("twelve")
    # a scalar is one value; a table is refused with its shape; a count is enforced
    assert as_1d(2.5, "x").tolist() == [2.5]
    with pytest.raises(InputError, match=r"x must be a one-dimensional array, got shape \(2, 2\)"):
        as_1d([[1, 2], [3, 4]], "x")
    with pytest.raises(InputError, match="x has 2 values but 3 were expected"):
        as_1d([1, 2], "x", 3)
    with pytest.raises(InputError, match="x must be an array of numbers"):
        as_1d(["a", "b"], "x")
    for bad in (0, -1.0, float("nan"), float("inf"), "wide", None):
        with pytest.raises(InputError, match="gap must be a positive number"):
            check_positive(bad, "gap")
    assert check_positive("0.25", "gap") == 0.25
    # read_only copies: the caller's array stays writable and unchanged, the result cannot be written
    src = np.array([1.0, 2.0])
    ro = read_only(src)
    src[0] = 9.0
    assert ro.tolist() == [1.0, 2.0] and not ro.flags.writeable
    with pytest.raises(ValueError):
        ro[0] = 5.0


# =========================================================================== york

# Pearson's data with York's weights, the standard test of straight-line fits
# with errors in both variables (York et al. 2004, Am. J. Phys. 72, 367, Table I;
# values from memory).
PEARSON_X = np.array([0.0, 0.9, 1.8, 2.6, 3.3, 4.4, 5.2, 6.1, 6.5, 7.4])
PEARSON_Y = np.array([5.9, 5.4, 4.4, 4.6, 3.5, 3.7, 2.8, 2.8, 2.4, 1.5])
YORK_WX = np.array([1000.0, 1000.0, 500.0, 800.0, 200.0, 80.0, 60.0, 20.0, 1.8, 1.0])
YORK_WY = np.array([1.0, 1.8, 4.0, 8.0, 20.0, 20.0, 70.0, 70.0, 100.0, 500.0])


def _pearson_york(x=PEARSON_X, y=PEARSON_Y, extra=(0.0, 0.0, 0.0), mask=None):
    mask = np.ones((1, x.size), dtype=bool) if mask is None else mask
    return york_lines(x, y, 1.0 / YORK_WX, 1.0 / YORK_WY, np.zeros(x.size), extra, mask)


def test_york_line_of_the_pearson_york_data():
    # York et al. (2004), from memory: b = -0.480533407, a = 5.47991022 for these data
    fit = _pearson_york()
    assert fit["b"][0] == pytest.approx(-0.480533407, abs=2e-9)
    assert fit["a"][0] == pytest.approx(5.47991022, abs=2e-8)


def test_york_errors_are_honest_for_known_variances():
    # Simulated truth (a pull distribution): points on a known line, scattered in x and y
    # by exactly the Pearson-York variances; the quoted slope and intercept errors must
    # match the scatter of the fitted values about the truth.
    rng = np.random.default_rng(2024)
    a0, b0 = 5.48, -0.48
    pulls_a, pulls_b = [], []
    for _ in range(1000):
        x = PEARSON_X + rng.normal(0.0, 1.0 / np.sqrt(YORK_WX))
        y = a0 + b0 * PEARSON_X + rng.normal(0.0, 1.0 / np.sqrt(YORK_WY))
        fit = _pearson_york(x, y)
        pulls_a.append((fit["a"][0] - a0) / fit["a_err"][0])
        pulls_b.append((fit["b"][0] - b0) / fit["b_err"][0])
    for p in (np.array(pulls_a), np.array(pulls_b)):
        assert abs(p.mean()) < 0.2
        assert 0.92 < p.std() < 1.08
        assert abs(np.mean(np.abs(p) < 1.0) - ONE_SIGMA) < binomial_tolerance(ONE_SIGMA, p.size)


def test_york_excess_variance_makes_the_chi_square_its_degrees_of_freedom():
    # The fitted excess s2 (added to var y here) solves sum r^2 / (v + s2) = n - 2
    # (common practice: reduced chi-square of one); every row of the mask is its own fit.
    rng = np.random.default_rng(31)
    n = 14
    x = np.linspace(0.0, 2.0, n)
    sx2, sy2 = np.full(n, 0.01**2), np.full(n, 0.01**2)
    y = 0.3 + 0.05 * x + rng.normal(0.0, 0.05, n)  # five times the quoted error
    rows = np.vstack([np.ones(n, bool), np.arange(n) % 2 == 0, np.arange(n) < 9])
    fit = york_lines(x, y, sx2, sy2, np.zeros(n), (0.0, 1.0, 0.0), rows)
    for i, row in enumerate(rows):
        assert fit["s2"][i] > 0
        r = (y - fit["a"][i] - fit["b"][i] * x)[row]
        var = sy2[row] + fit["s2"][i] + fit["b"][i] ** 2 * sx2[row]
        assert np.sum(r**2 / var) == pytest.approx(row.sum() - 2, rel=1e-8)
        alone = york_lines(x[row], y[row], sx2[row], sy2[row], np.zeros(row.sum()), (0.0, 1.0, 0.0),
                           np.ones((1, row.sum()), bool))
        assert alone["b"][0] == pytest.approx(fit["b"][i], rel=1e-10)
        assert alone["s2"][0] == pytest.approx(fit["s2"][i], rel=1e-8)
    # data consistent with their errors: no excess
    calm = 0.3 + 0.05 * x + rng.normal(0.0, 0.002, n)
    assert york_lines(x, calm, sx2, sy2, np.zeros(n), (0.0, 1.0, 0.0), rows[:1])["s2"][0] == 0.0


# =========================================================================== coefficients


def _field(rng, n=12, eps=0.04, mu=1.07):
    colour = np.linspace(-0.1, 1.6, n)
    V = rng.uniform(9.0, 13.0, n)
    B = V + colour + rng.normal(0.0, 0.01, n)
    v = V - eps * (B - V) - 0.8 + rng.normal(0.0, 0.005, n)
    b = v + ((B - V) - 0.15) / mu + rng.normal(0.0, 0.005, n)
    e = np.full(n, 0.01)
    ids = [f"std{i:02d}" for i in range(n)]
    return ids, V, e, B, e, v, e * 0.5, b, e * 0.5


def test_a_common_zero_point_goes_into_zeta_only():
    # Hardie (1962): with v' = v + dv and b' = b + db the equations
    # V - v' = eps (B - V) + (zeta_v - dv) and B - V = mu (b' - v') + (zeta_bv - mu (db - dv))
    # keep the slopes: only the intercepts move, by those amounts.
    rng = np.random.default_rng(77)
    ids, V, sV, B, sB, v, sv, b, sb = _field(rng)
    dv, db = 3.217, 2.954
    f0 = fit_coefficients(ids, V, sV, B, sB, v, sv, b, sb)
    f1 = fit_coefficients(ids, V, sV, B, sB, v + dv, sv, b + db, sb)
    for name in ("epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "intrinsic_v", "intrinsic_bv", "rms_v"):
        assert getattr(f1, name) == pytest.approx(getattr(f0, name), rel=1e-7, abs=1e-12)
    assert f1.zeta_v == pytest.approx(f0.zeta_v - dv, abs=1e-9)
    assert f1.zeta_bv == pytest.approx(f0.zeta_bv - f0.mu_bv * (db - dv), abs=1e-9)
    assert f1.rejected == f0.rejected and f1.n_stars == f0.n_stars


def test_coefficients_dict_pairs_each_value_with_its_error():
    # the JSON form people read and the archive stores: value, error, value, error, ...
    co = Coefficients(0.2, 1.08, -0.03, 0.004, 0.006, 0.01, source="invented")
    d = co.to_dict()
    assert list(d) == ["epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "k2_bv", "k2_bv_err", "source",
                       "warnings"]
    assert (d["epsilon_v"], d["mu_bv_err"], d["source"]) == (0.2, 0.006, "invented")
    assert len(d["warnings"]) == 1 and "epsilon_v = 0.200" in d["warnings"][0]  # common practice: |eps| < 0.1
    json.dumps(d, allow_nan=False)


# =========================================================================== interpolate


def test_interpolated_straight_line_has_unit_pulls():
    # Simulated truth (pull distribution): straight lines sampled with known, unequal
    # noise.  Linear interpolation of a line is exact, so the measurement part of the
    # error alone must give unit pulls, between samples and extrapolated at the ends;
    # the total error (plus a curvature or slope allowance) may only be larger.
    rng = np.random.default_rng(7)
    meas_in, meas_end, tot_in, tot_end = [], [], [], []
    for _ in range(300):
        t = np.arange(30) * 0.005 + rng.normal(0.0, 0.0005, 30)
        a, slope = rng.uniform(11.0, 14.0), rng.uniform(-3.0, 3.0)
        sig = rng.uniform(0.003, 0.02, 30)
        y = a + slope * t + rng.normal(0.0, sig)
        tq = np.concatenate([t[:-1] + rng.uniform(0.05, 0.95, 29) * np.diff(t), [t[0] - 0.003, t[-1] + 0.003]])
        r = interpolate_series(tq, t, y, sig, max_gap_d=0.01)
        assert r.ok.all() and r.one_sided.tolist() == [False] * 29 + [True, True]
        d = r.value - (a + slope * tq)
        inner, end = ~r.one_sided, r.one_sided
        meas_in.append(d[inner] / r.meas_err[inner])
        meas_end.append(d[end] / r.meas_err[end])
        tot_in.append(d[inner] / r.err[inner])
        tot_end.append(d[end] / r.err[end])
    m_in, m_end = np.concatenate(meas_in), np.concatenate(meas_end)
    assert abs(m_in.mean()) < 0.05 and 0.95 < m_in.std() < 1.05
    assert abs(m_end.mean()) < 0.15 and 0.9 < m_end.std() < 1.1
    for p in (np.concatenate(tot_in), np.concatenate(tot_end)):
        assert np.mean(np.abs(p) < 1.0) > ONE_SIGMA - binomial_tolerance(ONE_SIGMA, p.size)
        assert p.std() < 1.02
    # the curvature allowance on a line is of the order of the noise, not larger
    assert np.concatenate(tot_in).std() > 0.85


# =========================================================================== reference


def test_night_reference_excess_scatter_and_student_widening():
    # Paule & Mandel (1982, from memory): s2 solves sum w (d - dbar)^2 = n - 1 with
    # w = 1 / (v + s2); the reference colour error is sqrt(sum u^2 (sB^2 + sV^2 + s2))
    # widened to the Student-t 68.27% quantile with n - 1 degrees of freedom (scipy.stats
    # as the reference library).  Solved here with a bracketing root finder.
    rng = np.random.default_rng(12)
    n = 7
    co = Coefficients(0.03, 1.06)
    cat_V = rng.uniform(10.0, 13.0, n)
    colour = rng.uniform(0.2, 1.3, n)
    cat_B = cat_V + colour + rng.normal(0.0, 0.05, n)  # catalogue colours worse than quoted
    v_mean = cat_V - 0.4
    b_mean = v_mean + (colour - 0.12) / 1.06
    eB, eV = np.full(n, 0.01), np.full(n, 0.012)
    eb, ev = np.full(n, 0.003), np.full(n, 0.002)
    u_v = rng.uniform(0.2, 1.0, n)
    ref = night_reference(cat_B, eB, cat_V, eV, b_mean, eb, v_mean, ev, u_v, co)

    d = (cat_B - cat_V) - 1.06 * (b_mean - v_mean)
    var = eB**2 + eV**2 + 1.06**2 * (eb**2 + ev**2)

    def excess(s2):
        w = 1.0 / (var + s2)
        dbar = np.sum(w * d) / np.sum(w)
        return np.sum(w * (d - dbar) ** 2) - (n - 1)

    s2 = optimize.brentq(excess, 0.0, 1.0, xtol=1e-16, rtol=1e-13)
    u = u_v / u_v.sum()
    expected = math.sqrt(np.sum(u**2 * (eB**2 + eV**2 + s2))) * stats.t.ppf(stats.norm.cdf(1.0), n - 1)
    assert s2 > 3 * np.mean(eB**2 + eV**2)  # the excess really acts
    assert ref.ref_colour_std_err == pytest.approx(expected, rel=1e-6)
    assert ref.ref_colour_inst_err == pytest.approx(math.sqrt(np.sum(u**2 * (eb**2 + ev**2))), rel=1e-12)
    # the dict is the generic one: every field, in order, NaN as null
    assert list(ref.to_dict()) == [
        "tie_colour_v", "ref_colour_std", "ref_colour_std_err", "ref_colour_inst", "ref_colour_inst_err",
        "kappa_b", "kappa_b_err", "kappa_v", "kappa_v_err", "cref_b", "cref_v", "cal_err_b", "cal_err_v",
    ]
    assert NightReference(0.6, 0.6, 0.0, 0.4, 0.0).to_dict()["cref_b"] is None


# =========================================================================== apply


def test_simultaneous_exposures_by_hand_and_in_any_order():
    # Hardie (1962), differential form, by hand for B and V taken at the same times (no
    # interpolation): c = c_ref + mu (b~ - v~ - r_inst), V = v~ + eps (c - c_tie), B = V + c;
    # random errors dV/dv~ = 1 - eps mu, dV/db~ = eps mu, dB/dv~ = 1 - (1 + eps) mu,
    # dB/db~ = (1 + eps) mu, dc/db~ = -dc/dv~ = mu.
    eps, mu, c_ref, r_inst, c_tie = 0.045, 1.09, 0.58, 0.43, 0.61
    co = Coefficients(eps, mu)
    ref = NightReference(c_tie, c_ref, 0.0, r_inst, 0.0)
    rng = np.random.default_rng(5)
    n = 9
    t = np.sort(rng.uniform(0.0, 0.1, n))
    v = 12.0 + 0.2 * np.sin(40 * t)
    b = v + 1.1 + 0.05 * np.cos(40 * t)
    sv, sb = rng.uniform(0.004, 0.01, n), rng.uniform(0.005, 0.012, n)
    one = np.ones(n)
    res = transform_target(t, v, sv, one, t, b, sb, one, ref, co, max_gap_d=0.001)
    c = c_ref + mu * (b - v - r_inst)
    V = v + eps * (c - c_tie)
    np.testing.assert_allclose(res.V.bv, c, atol=1e-12)
    np.testing.assert_allclose(res.B.bv, c, atol=1e-12)
    np.testing.assert_allclose(res.V.mag, V, atol=1e-12)
    np.testing.assert_allclose(res.B.mag, V + c, atol=1e-12)
    np.testing.assert_allclose(res.V.mag_err, np.hypot((1 - eps * mu) * sv, eps * mu * sb), rtol=1e-12)
    np.testing.assert_allclose(res.B.mag_err, np.hypot((1 - (1 + eps) * mu) * sv, (1 + eps) * mu * sb),
                               rtol=1e-12)
    np.testing.assert_allclose(res.V.bv_err, mu * np.hypot(sv, sb), rtol=1e-12)
    assert not res.V.one_sided.any() and np.all(res.V.interp_err == 0.0) and np.all(res.V.gap_d == 0.0)
    # the long table: both bands, one row per exposure, B - V from the B rows minus the V rows
    frame = res.to_frame()
    assert frame["band"].tolist() == ["V"] * n + ["B"] * n
    np.testing.assert_allclose(frame["mag"].to_numpy()[n:] - frame["mag"].to_numpy()[:n], c, atol=1e-12)
    # the exposures in any order: the same values, in the order given
    perm_v, perm_b = rng.permutation(n), rng.permutation(n)
    shuffled = transform_target(t[perm_v], v[perm_v], sv[perm_v], one, t[perm_b], b[perm_b], sb[perm_b], one,
                                ref, co, max_gap_d=0.001)
    np.testing.assert_array_equal(shuffled.V.mag, res.V.mag[perm_v])
    np.testing.assert_array_equal(shuffled.B.mag_err, res.B.mag_err[perm_b])
    np.testing.assert_array_equal(shuffled.V.time, t[perm_v])


# =========================================================================== temperature


def test_ballesteros_by_hand_and_at_the_range_limits():
    # Ballesteros (2012, EPL 97, 34008): T = 4600 K [1/(0.92 c + 1.7) + 1/(0.92 c + 0.62)], by hand:
    #   c = 0: 4600 (1/1.7 + 1/0.62) = 4600 (0.58823529 + 1.61290323) = 10125.237 K
    #   c = 1: 4600 (1/2.62 + 1/1.54) = 4600 (0.38167939 + 0.64935065) = 4742.738 K
    T, _ = ballesteros_temperature(np.array([0.0, 1.0]))
    np.testing.assert_allclose(T, [10125.237, 4742.738], atol=1e-3)
    #   dT/dc at c = 0: -4600 * 0.92 (1/1.7^2 + 1/0.62^2) = -4232 (0.34602076 + 2.60145682) = -12473.725 K/mag
    _, T_err = ballesteros_temperature(0.0, 0.01)
    assert T_err == pytest.approx(124.73725, abs=1e-4)
    # the documented range -0.4 .. 2.0 includes its ends (21,707 K and 3,169 K by the same formula)
    T_ends, _ = ballesteros_temperature(np.array([-0.4, 2.0, -0.4001, 2.0001]))
    np.testing.assert_allclose(T_ends[:2], [21707.42, 3169.35], atol=0.01)
    assert np.isnan(T_ends[2:]).all()
    # a scalar colour with an array of reddenings gives arrays; E(B - V) is subtracted
    T_red, E_red = ballesteros_temperature(1.2, 0.0, np.array([0.2, 1.2]), np.array([0.0, 0.03]))
    np.testing.assert_allclose(T_red, [4742.738, 10125.237], atol=1e-3)
    assert E_red[0] == 0.0 and E_red[1] == pytest.approx(0.03 * 12473.725, rel=1e-6)
    with pytest.raises(InputError, match="ebv_err must be >= 0"):
        ballesteros_temperature(0.5, 0.01, 0.1, -0.01)
