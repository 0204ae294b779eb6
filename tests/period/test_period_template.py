"""Tests of the spline-template period fit (varstar.period.template).

Outside references, named beside each check:

* simulated data with known truth (invented stars, fixed seeds), judged by pull
  distributions ``(fitted - true) / error`` over many realisations: for honest
  errors their standard deviation is 1 and their mean 0;
* the generalised least-squares normal matrix ``B^T C^-1 B`` with the dense
  covariance ``C = diag(dy^2) + c^2 11^T`` per night, inverted by numpy, and the
  whitener of varstar.period.nightly applied to the dense design;
* ``sigma_f^2 = 2 / (d^2 chi2 / df^2)`` of the profile chi-square (the curvature
  rule for one parameter of a chi-square fit), the second derivative taken by
  finite differences;
* varstar.period.refine.fit_harmonics, the Fourier-series fit the template is
  meant to replace for detached binaries, on the same data.

The invented eclipse shape is ``d (1 - (dphi/w)^2)^1.5``: smooth at the bottom
and growing as ``(distance from first contact)^1.5`` at the contacts, the law of
the light lost by two uniform disks near first contact (common practice).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from varstar.errors import InputError, ReductionError
from varstar.period import template_fit as tpl
from varstar.period.nightly import nightly_whitener
from varstar.period.refine import fit_harmonics
from varstar.period.template import TemplateFit, fit_template_period

T_START = 2460100.0  # invented BJD_TDB origin of every scenario
PERIOD = 2.7134  # invented orbital period (days)
T0 = T_START + 0.9  # invented epoch of primary minimum
N_REAL = 60  # realisations per pull distribution (white noise)
N_REAL_OFFSETS = 60  # realisations with nightly offsets (two fits each)


# --------------------------------------------------------------------------- scenarios


def nightly(rng, nights, *, hours=5.5, cadence_min=5.0, spread=1.7, jitter_d=0.05, start=T_START):
    """Single-site sampling: ``nights`` clear nights among ``spread * nights``, one run each.

    Returns the times and the night index of every point.
    """
    chosen = np.sort(rng.choice(np.arange(int(spread * nights)), nights, replace=False))
    starts = start + chosen + 0.30 + jitter_d * rng.standard_normal(nights)
    per = np.arange(0.0, hours / 24.0, cadence_min / 1440.0)
    t = (starts[:, None] + per[None, :]).ravel()
    night = np.repeat(np.arange(nights), per.size)
    return t + rng.normal(0.0, 0.0005, t.size), night


def detached_eb(t, period=PERIOD, t0=T0, half_width=0.025, d1=0.6, d2=0.25):
    """Flat light curve with two narrow eclipses of different depth (phases 0 and 0.5)."""
    ph = ((t - t0) / period) % 1.0
    x1 = np.minimum(ph, 1.0 - ph) / half_width
    x2 = np.abs(ph - 0.5) / half_width
    shape = lambda x: np.clip(1.0 - x**2, 0.0, None) ** 1.5  # noqa: E731
    return 11.0 + d1 * shape(x1) + d2 * shape(x2)


def eb_realisation(seed, *, sigma=0.01, calib=0.0, nights=35):
    """One invented data set: times, magnitudes, errors, night labels, start frequency."""
    rng = np.random.default_rng(seed)
    t, night = nightly(rng, nights)
    y = detached_eb(t) + rng.normal(0.0, sigma, t.size)
    if calib:
        y = y + rng.normal(0.0, calib, nights)[night]
    span = t.max() - t.min()
    f0 = 1.0 / PERIOD + rng.uniform(-0.5, 0.5) / span  # a periodogram's peak, off by up to 0.5/T
    return t, y, np.full(t.size, sigma), night, f0


def epoch_pull(fit: TemplateFit) -> tuple[float, bool]:
    """Pull of the reported minimum time against the true minimum nearest it; is that the primary?

    True minima fall at ``T0 + n P / 2`` (primary for even ``n``).
    """
    n = round((fit.epoch_min_light - T0) / (PERIOD / 2))
    return (fit.epoch_min_light - (T0 + n * PERIOD / 2)) / fit.epoch_min_light_err, n % 2 == 0


def pull_stats(p):
    p = np.asarray(p, dtype=float)
    return float(np.std(p, ddof=1)), float(np.mean(p))


# --------------------------------------------------------------------------- pull distributions


@pytest.fixture(scope="module")
def eb_runs():
    """Template and 10-harmonic fits of N_REAL white-noise realisations of the detached binary."""
    period_pulls, epoch_pulls, primary, harmonic_pulls = [], [], [], []
    for seed in range(N_REAL):
        t, y, dy, _, f0 = eb_realisation(1000 + seed)
        fit = fit_template_period(t, y, dy, f0)
        period_pulls.append((fit.period - PERIOD) / fit.period_err)
        if math.isfinite(fit.epoch_min_light):
            pull, is_primary = epoch_pull(fit)
            epoch_pulls.append(pull)
            primary.append(is_primary)
        h = fit_harmonics(t, y, dy, 1.0 / PERIOD, nterms=10)
        harmonic_pulls.append((h.period - PERIOD) / h.period_err)
    return dict(period=period_pulls, epoch=epoch_pulls, primary=primary, harmonic=harmonic_pulls)


@pytest.mark.slow
def test_eb_period_pulls_are_unit_normal(eb_runs):
    # simulated data with known truth: pulls of honest errors have std 1 and mean 0
    # (measured: std 1.02, mean -0.06 on these 60; std 1.07, mean +0.07 on 200 other seeds)
    std, mean = pull_stats(eb_runs["period"])
    assert 0.8 <= std <= 1.3, std
    assert abs(mean) <= 0.35, mean


@pytest.mark.slow
def test_eb_epoch_of_minimum_pulls_are_unit_normal(eb_runs):
    # simulated data with known truth: epoch pulls against the true minimum time
    pulls = eb_runs["epoch"]
    assert len(pulls) >= 0.9 * N_REAL  # a minimum with a gap in the data is NaN; rarely here
    assert np.mean(eb_runs["primary"]) >= 0.95  # the deepest minimum is the true primary
    std, mean = pull_stats(pulls)
    assert 0.8 <= std <= 1.3, std
    assert abs(mean) <= 0.35, mean


@pytest.mark.slow
def test_ten_harmonic_fit_is_overconfident_on_the_same_data(eb_runs):
    # refine.fit_harmonics on the same simulated data: the series cannot follow the
    # eclipses, so its covariance error is far too small (measured pull std 5.3 here,
    # 7.3 on 200 other seeds)
    std_h, _ = pull_stats(eb_runs["harmonic"])
    std_t, _ = pull_stats(eb_runs["period"])
    assert std_h > 2.0, std_h
    assert std_h > 2.0 * std_t


@pytest.fixture(scope="module")
def offset_runs():
    """Fits of realisations with a random calibration offset per night, with and without group errors."""
    calib = 0.015
    with_groups, without = [], []
    for seed in range(N_REAL_OFFSETS):
        t, y, dy, night, f0 = eb_realisation(5000 + seed, calib=calib)
        fit = fit_template_period(t, y, dy, f0, group=night, group_err=np.full(night.max() + 1, calib))
        with_groups.append((fit.period - PERIOD) / fit.period_err)
        naive = fit_template_period(t, y, dy, f0)
        without.append((naive.period - PERIOD) / naive.period_err)
        assert fit.n_nights == night.max() + 1 and naive.n_nights == 0
    return with_groups, without


@pytest.mark.slow
def test_nightly_offsets_are_covered_by_the_group_covariance(offset_runs):
    # simulated data with known truth (offsets N(0, 0.015) per night, points 0.01 mag)
    with_groups, _ = offset_runs
    std, mean = pull_stats(with_groups)
    assert 0.8 <= std <= 1.3, std
    assert abs(mean) <= 0.35, mean


@pytest.mark.slow
def test_without_group_errors_the_offsets_make_the_pulls_too_wide(offset_runs):
    # same simulated data, offsets ignored: the errors no longer cover the truth
    # (measured pull std 1.7 here, 2.2 on 200 other seeds)
    _, without = offset_runs
    std, _ = pull_stats(without)
    assert std > 1.3, std


@pytest.mark.slow
def test_sharp_contacts_are_covered_by_the_sandwich_error():
    # simulated eclipses d sqrt(1 - x^2), with an infinite slope at the contacts that no
    # cubic spline follows: errors from the model covariance alone give pulls too wide
    # (measured std 1.43 here), the reported errors (sandwich, Huber 1967 / White 1980,
    # when larger) cover the truth (measured std 0.92 here; 0.99 over 150 realisations
    # at a 4-min cadence)
    def sharp(t, w=0.025):
        ph = ((t - T0) / PERIOD) % 1.0
        x1, x2 = np.minimum(ph, 1.0 - ph) / w, np.abs(ph - 0.5) / w
        return 11.0 + 0.6 * np.sqrt(np.clip(1 - x1**2, 0, None)) + 0.25 * np.sqrt(np.clip(1 - x2**2, 0, None))

    reported, model_only = [], []
    for seed in range(40):
        rng = np.random.default_rng(7000 + seed)
        t, _ = nightly(rng, 35)
        y = sharp(t) + rng.normal(0.0, 0.01, t.size)
        f0 = 1.0 / PERIOD + rng.uniform(-0.5, 0.5) / (t.max() - t.min())
        fit = fit_template_period(t, y, np.full(t.size, 0.01), f0)
        reported.append((fit.frequency - 1.0 / PERIOD) / fit.frequency_err)
        model_only.append((fit.frequency - 1.0 / PERIOD) / math.sqrt(fit.covariance[-1, -1]))
    std, mean = pull_stats(reported)
    assert 0.8 <= std <= 1.3, std
    assert abs(mean) <= 0.4, mean
    assert pull_stats(model_only)[0] > std


def test_smooth_sinusoid_gets_the_right_period():
    # simulated sinusoid with known truth; the same data through refine.fit_harmonics
    # (one harmonic, the exact model here) give the reference error
    f_true = 1.0 / 0.61234
    pulls, ratios, knots = [], [], []
    for seed in range(30):
        rng = np.random.default_rng(9000 + seed)
        t, _ = nightly(rng, 30, cadence_min=6.0)
        y = 12.0 + 0.3 * np.cos(2 * math.pi * f_true * (t - T_START)) + rng.normal(0.0, 0.02, t.size)
        dy = np.full(t.size, 0.02)
        f0 = f_true + rng.uniform(-0.5, 0.5) / (t.max() - t.min())
        fit = fit_template_period(t, y, dy, f0)
        ref = fit_harmonics(t, y, dy, f_true, nterms=1)
        pulls.append((fit.frequency - f_true) / fit.frequency_err)
        ratios.append(fit.frequency_err / ref.frequency_err)
        knots.append(fit.n_knots)
        assert math.isnan(fit.secondary_depth)  # one minimum per cycle
    assert np.median(knots) <= 16  # a smooth curve needs few knots
    std, mean = pull_stats(pulls)
    assert 0.7 <= std <= 1.3, std
    assert abs(mean) <= 0.45, mean
    # a template reduced to a smooth curve is as precise as the exact sinusoid
    assert 0.9 <= float(np.median(ratios)) <= 1.2, np.median(ratios)


# --------------------------------------------------------------------------- pieces of the method


def test_gls_normal_matrix_matches_dense_covariance_and_whitener():
    # reference: B^T C^-1 B with the dense C = diag(dy^2) + c_g^2 11^T inverted by numpy,
    # and (L B)^T (L B) with varstar.period.nightly's whitener on the dense design
    rng = np.random.default_rng(4)
    n = 300
    t = np.sort(rng.uniform(0.0, 20.0, n))
    night = np.floor(t).astype(int)
    dy = rng.uniform(0.005, 0.03, n)
    labels, codes = np.unique(night, return_inverse=True)
    c = rng.uniform(0.0, 0.03, labels.size)
    knots = np.sort(rng.uniform(0.0, 1.0, 12))
    b = tpl._design(rng.uniform(0.0, 1.0, n), knots)
    v = rng.normal(size=n)
    gls = tpl._Gls(v, dy, night, c)

    cov = np.diag(dy**2) + (c[codes][:, None] * c[codes][None, :]) * (codes[:, None] == codes[None, :])
    cinv = np.linalg.inv(cov)
    bd = b.toarray()
    np.testing.assert_allclose(gls.normal(b), bd.T @ cinv @ bd, rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(gls.bt_cinv(b, v), bd.T @ cinv @ v, rtol=1e-9, atol=1e-6)
    lw = nightly_whitener(dy, night, c)
    lb = lw(bd)
    np.testing.assert_allclose(gls.normal(b), lb.T @ lb, rtol=1e-9, atol=1e-6)
    assert gls.chi2(v) == pytest.approx(float(v @ cinv @ v), rel=1e-10)
    # the design is a partition of unity with 4 non-zeros per row (cubic B-splines)
    np.testing.assert_allclose(bd.sum(axis=1), 1.0, atol=1e-12)
    assert b.cols.shape == (n, 4)
    np.testing.assert_allclose(b @ v[:12], bd @ v[:12], rtol=1e-12)


def test_frequency_error_is_the_profile_curvature():
    # sigma_f^2 = 2 / (d^2 chi2/df^2) of the profile chi-square (curvature rule), the
    # second derivative by finite differences, times chi2/dof; the Gauss-Newton form in
    # the covariance is its expectation and agrees within a few per cent
    t, y, dy, _, f0 = eb_realisation(77)
    fit = fit_template_period(t, y, dy, f0)
    gls = tpl._Gls(y, dy, None, None)
    tau = t - fit.t_ref
    knots = np.asarray(fit.knots)
    h = 3.0 * fit.frequency_err
    chi = [tpl._profile(gls, tau, fit.frequency + s * h, knots).chi2 for s in (-1, 0, 1)]
    assert chi[1] == pytest.approx(fit.chi2, rel=1e-12)
    assert chi[1] < chi[0] and chi[1] < chi[2]  # the fit sits at the profile's minimum
    curvature = (chi[0] - 2 * chi[1] + chi[2]) / h**2
    sigma_curv = math.sqrt(2.0 / curvature * fit.reduced_chi2)
    model_sigma = math.sqrt(fit.covariance[-1, -1])
    assert model_sigma == pytest.approx(sigma_curv, rel=0.1)
    # the reported error is the largest of these and the sandwich estimate
    assert fit.frequency_err >= max(model_sigma, sigma_curv) * (1 - 1e-3)
    assert fit.frequency_err <= 1.5 * max(model_sigma, sigma_curv)
    # a parabola through the profile: chi2 rises by chi2/dof at one sigma (within 10 %)
    one = tpl._profile(gls, tau, fit.frequency + fit.frequency_err, knots).chi2 - fit.chi2
    assert 0.6 * fit.reduced_chi2 <= one <= 1.1 * fit.reduced_chi2


def test_results_do_not_depend_on_the_overall_error_scale():
    # errors stated 3x too large: the covariance is scaled by chi2/dof, the knot choice
    # uses a scale-free AIC, so every result must be the same (follows from the equations)
    t, y, dy, night, f0 = eb_realisation(31, calib=0.01)
    a = fit_template_period(t, y, dy, f0, group=night, group_err=np.full(35, 0.01))
    b = fit_template_period(t, y, 3.0 * dy, f0, group=night, group_err=np.full(35, 0.03))
    assert b.n_knots == a.n_knots
    assert b.frequency == pytest.approx(a.frequency, rel=1e-12)
    assert b.frequency_err == pytest.approx(a.frequency_err, rel=1e-6)
    assert b.epoch_min_light_err == pytest.approx(a.epoch_min_light_err, rel=1e-6)
    assert b.reduced_chi2 == pytest.approx(a.reduced_chi2 / 9.0, rel=1e-9)


def test_depths_phase_model_and_dict_of_one_fit():
    # simulated data with known truth (depths 0.6 and 0.25 mag, secondary at phase 0.5)
    t, y, dy, _, f0 = eb_realisation(12, sigma=0.005)
    fit = fit_template_period(t, y, dy, f0)
    assert fit.period_err == pytest.approx(fit.frequency_err / fit.frequency**2, rel=1e-12)
    assert fit.period == pytest.approx(1.0 / fit.frequency, rel=1e-15)
    assert abs(fit.period - PERIOD) < 5 * fit.period_err
    assert abs(fit.primary_depth - 0.6) < 5 * fit.primary_depth_err + 0.01
    assert abs(fit.secondary_depth - 0.25) < 5 * fit.secondary_depth_err + 0.01
    assert abs(fit.secondary_phase - 0.5) < 5 * fit.secondary_phase_err
    assert fit.ptp_amplitude == fit.primary_depth
    assert fit.n_parameters == fit.n_knots + 1 and fit.dof == fit.n_points - fit.n_parameters
    assert fit.reduced_chi2 == pytest.approx(1.0, abs=0.15)  # noise 0.005 as stated
    model = fit.model(t)
    assert model.shape == t.shape
    assert float(np.sqrt(np.mean((y - model) ** 2))) == pytest.approx(fit.rms, rel=1e-9)
    assert fit.model(t.reshape(5, -1)).shape == (5, t.size // 5)
    # the template follows the true curve (noise 0.005; knots cannot be exact)
    assert float(np.sqrt(np.mean((model - detached_eb(t)) ** 2))) < 0.004
    d = fit.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert json.loads(text)["n_knots"] == fit.n_knots
    assert "B-spline" in d["method"] and "AIC" in d["method"]
    assert all(isinstance(v, (int, float, str, bool, list, type(None))) for v in d.values())


def test_a_minimum_seen_on_one_side_only_is_not_timed():
    # simulated data: every point of the primary's ingress and bottom removed; only its
    # egress is left, so its time and depth are not determined by the data
    t, y, dy, _, f0 = eb_realisation(3, sigma=0.005)
    ph = ((t - T0) / PERIOD + 0.5) % 1.0 - 0.5
    keep = ~((ph > -0.03) & (ph < 0.008))
    fit = fit_template_period(t[keep], y[keep], dy[keep], f0)
    assert math.isnan(fit.epoch_min_light) and math.isnan(fit.primary_depth)
    assert any("gap in the deepest minimum" in w for w in fit.warnings)
    assert abs(fit.period - PERIOD) < 5 * fit.period_err  # the period does not need it
    d = fit.to_dict()
    assert d["epoch_min_light"] is None and d["epoch_min_light_err"] is None
    json.dumps(d, allow_nan=False)


def test_long_series_with_nightly_errors():
    # N = 5,000 and 50,000 points with nightly errors (the time is measured by the benchmark, not here)
    rng = np.random.default_rng(8)
    for n in (5_000, 50_000):
        cadence = 5.5 * 60 / (n / 40)
        t, night = nightly(rng, 40, cadence_min=cadence)
        y = detached_eb(t) + rng.normal(0, 0.01, t.size) + rng.normal(0, 0.01, 40)[night]
        dy = np.full(t.size, 0.01)
        fit = fit_template_period(t, y, dy, 1.0 / PERIOD, group=night, group_err=np.full(40, 0.01))
        assert abs(fit.period - PERIOD) < 5 * fit.period_err


# --------------------------------------------------------------------------- bad input


def _points(a, sl):
    """Keep the points ``sl`` of the series in the argument dict ``a``."""
    a.update(t=a["t"][sl], y=a["y"][sl], dy=a["dy"][sl])


@pytest.mark.parametrize(
    "change, error, words",
    [
        (lambda a: a.update(y=np.r_[a["y"][:-1], np.nan]), InputError, "non-finite"),
        (lambda a: a.update(dy=np.r_[a["dy"][:-1], 0.0]), InputError, "positive"),
        (lambda a: a.update(frequency=0.0), InputError, "positive"),
        (lambda a: a.update(frequency=-0.3), InputError, "positive"),
        (lambda a: a.update(frequency="fast"), InputError, "number"),
        (lambda a: a.update(y=a["y"][:-1]), InputError, "same length"),
        (lambda a: _points(a, slice(None, 10)), InputError, "at least"),
        (lambda a: _points(a, slice(None, None, 160)), ReductionError, "cannot constrain"),
        (lambda a: a.update(y=np.full(a["t"].size, 11.0)), ReductionError, "all equal"),
        (lambda a: a.update(group_err=np.full(35, 0.01)), InputError, "needs group"),
        (lambda a: a.update(group=a["night"][:-1], group_err=np.full(35, 0.01)), InputError, "labels"),
        (lambda a: a.update(group=a["night"], group_err=np.full(34, 0.01)), InputError, "shared errors"),
    ],
)
def test_bad_input_is_refused(change, error, words):
    t, y, dy, night, f0 = eb_realisation(2)
    args = dict(t=t, y=y, dy=dy, frequency=f0, group=None, group_err=None, night=night)
    change(args)
    with pytest.raises(error, match=words):
        fit_template_period(
            args["t"], args["y"], args["dy"], args["frequency"], group=args["group"], group_err=args["group_err"]
        )


def test_data_shorter_than_one_cycle_are_refused():
    t, y, dy, night, _ = eb_realisation(2)
    first = night == 0
    with pytest.raises(ReductionError, match="one cycle"):
        fit_template_period(t[first], y[first], dy[first], 1.0 / PERIOD)
