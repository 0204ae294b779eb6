"""Tests of varstar.period: frequency grid, generalised Lomb-Scargle, multi-band, FAP.

Outside references (each named beside its check):
* astropy (reference library): ``LombScargle`` (Zechmeister & Kuerster 2009
  generalised periodogram; multi-term chi2 form), ``LombScargleMultiband``
  (VanderPlas & Ivezic 2015), and the Baluev (2008) false-alarm probability.
* Published equations: the Fourier series of a sawtooth, the F distribution of
  nested linear models, VanderPlas (2018) grid step.
* Simulated data with known truth (invented series, fixed seeds).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from varstar.errors import InputError
from varstar.period.grid import frequency_grid
from varstar.period.gls import delta_chi2, gls_model, gls_power, resolve_method
from varstar.period.multiband import multiband_power
from varstar.period.significance import (
    fap_baluev,
    fap_bootstrap,
    fap_single,
    harmonic_bandwidth_factor,
    power_at_fap,
)


# --------------------------------------------------------------------------- invented data


def nightly_times(rng: np.random.Generator, n: int, years: float, t0: float = 2460000.3) -> np.ndarray:
    """Invented ground-based sampling: nightly windows, a seasonal gap, weather."""
    nights = np.arange(int(365.25 * years))
    nights = nights[np.sin(2 * np.pi * nights / 365.25) > -0.5]  # target behind the Sun
    nights = nights[rng.random(nights.size) < 0.6]  # clouds
    per_night = rng.multinomial(n, np.full(nights.size, 1.0 / nights.size))
    t = np.repeat(nights, per_night) + rng.uniform(-0.15, 0.15, n)  # +-3.6 h around midnight
    return t0 + np.sort(t)


@pytest.fixture(scope="module")
def small_series():
    rng = np.random.default_rng(11)
    t = nightly_times(rng, 240, 1.0)
    dy = rng.uniform(0.01, 0.04, t.size)
    f_true = 2.7183
    ph = 2 * np.pi * f_true * (t - t[0])
    y = 12.0 + 0.08 * np.sin(ph) + 0.03 * np.cos(2 * ph + 0.4) + rng.normal(0, dy)
    return t, y, dy, f_true


@pytest.fixture(scope="module")
def long_series():
    """N = 20000 over 10 years: the size where only the fast path is practical."""
    rng = np.random.default_rng(12)
    t = nightly_times(rng, 20000, 10.0)
    dy = rng.uniform(0.01, 0.05, t.size)
    y = 0.02 * np.sin(2 * np.pi * 3.21741 * t) + rng.normal(0, dy)
    return t, y, dy


# --------------------------------------------------------------------------- grid


def test_grid_step_and_limits(small_series):
    t = small_series[0]
    baseline = np.ptp(t)
    f = frequency_grid(t, min_period=0.1, max_period=50.0, oversampling=7.0)
    # VanderPlas (2018) sec. 7.1: step 1/(n0 T); uniform.
    np.testing.assert_allclose(np.diff(f), 1.0 / (7.0 * baseline), rtol=1e-9)
    assert f[0] == pytest.approx(1 / 50.0, rel=1e-15)
    assert f[-1] <= 10.0 and f[-1] > 10.0 - 1.0 / (7.0 * baseline)
    # Defaults: 0.05 d .. min(T/2, 1000 d), n0 = 10.
    g = frequency_grid(t)
    assert g[0] == pytest.approx(2.0 / baseline, rel=1e-12)
    assert 20.0 - 1.0 / (10.0 * baseline) < g[-1] <= 20.0
    assert np.diff(g)[0] == pytest.approx(1.0 / (10.0 * baseline), rel=1e-9)


def test_grid_bad_input(small_series):
    t = small_series[0]
    with pytest.raises(InputError, match="at least 12"):
        frequency_grid(t[:11])
    with pytest.raises(InputError, match="empty"):
        frequency_grid(np.array([]))
    bad = t.copy()
    bad[5] = np.nan
    with pytest.raises(InputError, match="non-finite"):
        frequency_grid(bad)
    with pytest.raises(InputError, match="cannot show a period of 1000"):
        frequency_grid(t, max_period=1000.0)
    with pytest.raises(InputError, match="shorter than max_period"):
        frequency_grid(t, min_period=5.0, max_period=2.0)
    with pytest.raises(InputError, match="max_grid"):
        frequency_grid(t, min_period=0.001, max_grid=10_000)
    with pytest.raises(InputError, match="oversampling"):
        frequency_grid(t, oversampling=0.5)
    with pytest.raises(InputError, match="too short"):
        frequency_grid(np.linspace(0.0, 0.08, 12))  # half of 0.08 d is below the 0.05 d default


# --------------------------------------------------------------------------- against astropy


def test_single_term_equals_astropy(small_series):
    from astropy.timeseries import LombScargle

    t, y, dy, _ = small_series
    f = frequency_grid(t, oversampling=5.0)[::3]
    ours = gls_power(t, y, dy, f, method="exact")
    # astropy (reference library), generalised LS with floating mean (Zechmeister & Kuerster 2009).
    ref = LombScargle(t, y, dy, fit_mean=True, center_data=True, nterms=1, normalization="standard").power(
        f, method="cython"
    )
    np.testing.assert_allclose(ours, ref, atol=1e-8, rtol=0)
    np.testing.assert_allclose(gls_power(t, y, dy, f, method="fast"), ours, atol=1e-9, rtol=0)


@pytest.mark.parametrize("nterms", [2, 3])
def test_multi_term_equals_astropy(small_series, nterms):
    from astropy.timeseries import LombScargle

    t, y, dy, _ = small_series
    full = frequency_grid(t, oversampling=5.0)
    f = full[::20]  # astropy's chi2 method loops over frequencies: keep it short
    ours = gls_power(t, y, dy, f, nterms=nterms, method="exact")
    ls = LombScargle(t, y, dy, fit_mean=True, center_data=True, nterms=nterms, normalization="standard")
    # astropy (reference library): multi-term chi2 periodogram (VanderPlas 2018 eq. for nterms > 1).
    np.testing.assert_allclose(ours, ls.power(f, method="chi2"), atol=1e-8, rtol=0)
    np.testing.assert_allclose(
        ours, ls.power(f, method="fastchi2", method_kwds={"use_fft": False}), atol=1e-8, rtol=0
    )
    np.testing.assert_allclose(gls_power(t, y, dy, f, nterms=nterms, method="fast"), ours, atol=1e-9, rtol=0)


@pytest.mark.parametrize("nterms", [1, 3])
def test_fast_equals_exact_on_long_series(long_series, nterms):
    t, y, dy = long_series
    f = frequency_grid(t)  # ~730,000 frequencies
    fast = gls_power(t, y, dy, f, nterms=nterms, method="fast")
    rng = np.random.default_rng(3)
    pick = np.sort(rng.choice(f.size, 300, replace=False))
    top = int(np.argmax(fast))
    window = np.arange(top - 30, top + 31)
    idx = np.union1d(pick, window)
    exact = gls_power(t, y, dy, f[idx], nterms=nterms, method="exact")
    np.testing.assert_allclose(fast[idx], exact, atol=1e-8, rtol=0)
    # Peak location on a fine grid (step df/50) around the grid peak, both methods,
    # refined by the vertex of a parabola through the top three points.
    df = f[1] - f[0]
    fine = f[top] + (np.arange(-100, 101) * df / 50.0)

    def vertex(p):
        i = int(np.argmax(p))
        a, b, c = p[i - 1], p[i], p[i + 1]
        return fine[i] + 0.5 * (a - c) / (a - 2 * b + c) * (fine[1] - fine[0])

    pf = gls_power(t, y, dy, fine, nterms=nterms, method="fast")
    pe = gls_power(t, y, dy, fine, nterms=nterms, method="exact")
    assert abs(vertex(pf) / vertex(pe) - 1) < 1e-7
    # Generated truth: the injected frequency 3.21741 c/d is found (within 1/T).
    assert abs(vertex(pe) - 3.21741) < 1.0 / np.ptp(t)


def test_batch_equals_one_by_one(small_series):
    t, y, dy, _ = small_series
    f = frequency_grid(t, oversampling=5.0)[::10]  # still uniform, for the fast path
    rng = np.random.default_rng(5)
    ys = y + rng.normal(0, 0.02, (4, t.size))
    dys = dy * rng.uniform(0.5, 2.0, (4, t.size))
    for method in ("exact", "fast"):
        shared = gls_power(t, ys, dy, f, nterms=2, method=method)
        own = gls_power(t, ys, dys, f, nterms=2, method=method)
        assert shared.shape == own.shape == (4, f.size)
        for i in range(4):
            np.testing.assert_allclose(shared[i], gls_power(t, ys[i], dy, f, nterms=2, method="exact"), atol=1e-9)
            np.testing.assert_allclose(own[i], gls_power(t, ys[i], dys[i], f, nterms=2, method="exact"), atol=1e-9)


def test_time_origin_does_not_matter(small_series):
    # The model has a floating mean and free phases: the power cannot depend on t0.
    t, y, dy, _ = small_series
    f = frequency_grid(t, oversampling=3.0)[::7]
    a = gls_power(t, y, dy, f, nterms=2, method="exact")
    b = gls_power(t - 2460000.0, y, dy, f, nterms=2, method="exact")
    np.testing.assert_allclose(a, b, atol=1e-9)
    # Definition: power = 1 - chi2/chi2_ref, with chi2 of a direct least-squares fit.
    i = int(np.argmax(a))
    model, coef, _ = gls_model(t, y, dy, f[i], 2)
    chi2 = np.sum(((y - model) / dy) ** 2)
    ybar = np.sum(y / dy**2) / np.sum(1 / dy**2)
    chi2_ref = np.sum(((y - ybar) / dy) ** 2)
    assert a[i] == pytest.approx(1 - chi2 / chi2_ref, abs=1e-10)
    d, ref = delta_chi2(t, y, dy, f[i : i + 1], nterms=2)
    assert ref == pytest.approx(chi2_ref, rel=1e-12)
    assert d[0] == pytest.approx(chi2_ref - chi2, rel=1e-9)


# --------------------------------------------------------------------------- generated truth


def test_sinusoid_peak_at_truth(small_series):
    t, y, dy, f_true = small_series
    f = frequency_grid(t, oversampling=10.0)
    p = gls_power(t, y, dy, f)
    df = f[1] - f[0]
    # Simulated truth: the grid peak is the grid point nearest to the injected frequency.
    assert abs(f[np.argmax(p)] - f_true) <= 0.5 * df * (1 + 1e-9)


def test_sawtooth_harmonics():
    # Sawtooth frac(phase) - 1/2 = -sum_h sin(2 pi h phase) / (pi h): variance 1/12,
    # harmonic h carries 1/(2 pi^2 h^2).  So, with densely covered phases and noise sigma
    # (relative to unit amplitude), power_K ~ sum_{h<=K} 1/(2 pi^2 h^2) / (1/12 + sigma^2).
    rng = np.random.default_rng(21)
    t = np.sort(rng.uniform(0, 40, 3000))
    f_true = 0.8731
    sigma = 0.05
    y = 0.3 * ((f_true * t) % 1.0 - 0.5) + rng.normal(0, 0.3 * sigma, t.size)
    dy = np.full(t.size, 0.3 * sigma)
    f = frequency_grid(t, min_period=0.5, max_period=20.0, oversampling=10.0)
    p1 = gls_power(t, y, dy, f, nterms=1)
    p3 = gls_power(t, y, dy, f, nterms=3)
    at = lambda p: float(gls_power(t, y, dy, np.array([f_true]), nterms=p)[0])  # noqa: E731
    expect = lambda k: sum(1 / (2 * math.pi**2 * h**2) for h in range(1, k + 1)) / (1 / 12 + sigma**2)  # noqa: E731
    assert at(1) == pytest.approx(expect(1), abs=0.01)  # 0.6025
    assert at(3) == pytest.approx(expect(3), abs=0.01)  # 0.8200
    assert at(3) > at(1) + 0.2
    df = f[1] - f[0]
    assert abs(f[np.argmax(p3)] - f_true) <= 0.5 * df * (1 + 1e-9)
    assert abs(f[np.argmax(p1)] - f_true) <= 0.5 * df * (1 + 1e-9)
    assert p3.max() > p1.max()


def test_model_coefficient_pulls():
    # Simulated truth: at the true frequency the fitted amplitudes scatter by their
    # quoted covariance (pulls of unit width).
    rng = np.random.default_rng(8)
    t = np.sort(rng.uniform(0, 30, 80))
    dy = rng.uniform(0.01, 0.03, t.size)
    truth = np.array([10.0, 0.05, -0.02, 0.01, 0.004])
    f0 = 1.234
    ph = 2 * np.pi * f0 * t
    clean = truth[0] + truth[1] * np.cos(ph) + truth[2] * np.sin(ph) + truth[3] * np.cos(2 * ph) + truth[4] * np.sin(2 * ph)
    pulls = []
    for _ in range(400):
        _, coef, cov = gls_model(t, clean + rng.normal(0, dy), dy, f0, 2)
        pulls.append((coef - truth) / np.sqrt(np.diag(cov)))
    pulls = np.array(pulls)
    assert np.all(np.abs(pulls.mean(axis=0)) < 0.2)
    assert np.all(np.abs(pulls.std(axis=0) - 1) < 0.1)


# --------------------------------------------------------------------------- multi-band


def _multiband_by_least_squares(t, y, dy, band, freq, nterms):
    """Definition: per band a weighted least-squares fit with its own mean and harmonics."""
    out = np.zeros(freq.size)
    ref_total = 0.0
    for b in np.unique(band):
        s = band == b
        tb, yb, wb = t[s], y[s], 1 / dy[s]
        ybar = np.sum(yb * wb**2) / np.sum(wb**2)
        ref = np.sum(((yb - ybar) * wb) ** 2)
        ref_total += ref
        for i, fr in enumerate(freq):
            cols = [np.ones_like(tb)]
            for h in range(1, nterms + 1):
                cols += [np.cos(2 * np.pi * h * fr * tb), np.sin(2 * np.pi * h * fr * tb)]
            x = np.column_stack(cols) * wb[:, None]
            coef, *_ = np.linalg.lstsq(x, yb * wb, rcond=None)
            out[i] += ref - np.sum((yb * wb - x @ coef) ** 2)
    return out / ref_total


@pytest.fixture(scope="module")
def three_bands():
    rng = np.random.default_rng(31)
    t = np.sort(rng.uniform(0, 60, 150))
    band = rng.choice(np.array(["B", "V", "I"]), t.size)
    amp = {"B": 0.45, "V": 0.35, "I": 0.2}
    mean = {"B": 12.9, "V": 12.2, "I": 11.4}
    y = np.array([mean[b] + amp[b] * np.sin(2 * np.pi * 0.731 * ti + 0.3) for ti, b in zip(t, band)])
    dy = rng.uniform(0.02, 0.06, t.size)
    return t, y + rng.normal(0, dy), dy, band


@pytest.mark.parametrize("nterms", [1, 2])
def test_multiband_equals_definition_and_astropy(three_bands, nterms):
    from astropy.timeseries import LombScargleMultiband

    t, y, dy, band = three_bands
    f = np.linspace(0.05, 3.0, 120)
    ours = multiband_power(t, y, dy, band, f, nterms=nterms, method="exact")
    np.testing.assert_allclose(ours, _multiband_by_least_squares(t, y, dy, band, f, nterms), atol=1e-10)
    # astropy (reference library), VanderPlas & Ivezic (2015) flexible model with no shared
    # base terms and no regularisation: each band its own mean and amplitudes.
    ls = LombScargleMultiband(t, y, band, dy, nterms_base=0, nterms_band=nterms, reg_base=None, reg_band=None)
    np.testing.assert_allclose(ours, ls.power(f, method="flexible"), atol=1e-9)
    np.testing.assert_allclose(multiband_power(t, y, dy, band, f, nterms=nterms, method="fast"), ours, atol=1e-9)
    # Simulated truth: the shared period is found.
    g = frequency_grid(t, min_period=0.3, max_period=20.0)
    assert abs(g[np.argmax(multiband_power(t, y, dy, band, g, nterms=nterms))] - 0.731) < 0.5 * (g[1] - g[0]) + 1e-4


def test_multiband_one_band_is_gls(small_series):
    t, y, dy, _ = small_series
    f = frequency_grid(t, oversampling=3.0)
    np.testing.assert_allclose(
        multiband_power(t, y, dy, np.full(t.size, "V"), f, nterms=2), gls_power(t, y, dy, f, nterms=2), atol=1e-12
    )


def test_multiband_bad_input(three_bands):
    t, y, dy, band = three_bands
    f = np.linspace(0.1, 2, 50)
    few = band.copy()
    few[:3] = "U"  # a band of 3 points cannot fit mean + cosine + sine with noise left
    with pytest.raises(InputError, match="U"):
        multiband_power(t, y, dy, few, f)
    with pytest.raises(InputError, match="one label per measurement"):
        multiband_power(t, y, dy, band[:-1], f)


# --------------------------------------------------------------------------- false-alarm probability


def test_fap_baluev_equals_astropy(small_series):
    from astropy.timeseries import LombScargle

    t, y, dy, _ = small_series
    f = frequency_grid(t, min_period=0.2, oversampling=5.0)
    ls = LombScargle(t, y, dy)
    z = np.array([0.05, 0.1, 0.15, 0.3, 0.6])
    kw = dict(method="baluev", minimum_frequency=f[0], maximum_frequency=f[-1], samples_per_peak=5)
    # astropy (reference library) implements Baluev (2008) eq. 6 with Table 1.
    ref = ls.false_alarm_probability(z, **kw)
    np.testing.assert_allclose(fap_baluev(z, f, t, dy), ref, rtol=1e-6)
    p = np.array([0.5, 0.1, 0.01, 1e-4])
    np.testing.assert_allclose(power_at_fap(p, f, t, dy), ls.false_alarm_level(p, **kw), rtol=1e-6)
    np.testing.assert_allclose(fap_baluev(power_at_fap(p, f, t, dy), f, t, dy), p, rtol=1e-9)


def test_fap_multi_term_pieces():
    # c_2 = int_0^1 sqrt(s + 4 (1 - s)) ds = 14/9 (direct integration).
    assert harmonic_bandwidth_factor(1) == 1.0
    assert harmonic_bandwidth_factor(2) == pytest.approx(14 / 9, rel=1e-12)
    # c_3 against a Monte-Carlo average over the uniform simplex.
    rng = np.random.default_rng(2)
    s = rng.dirichlet(np.ones(3), 200_000)
    assert harmonic_bandwidth_factor(3) == pytest.approx(np.sqrt(s @ [1.0, 4.0, 9.0]).mean(), rel=2e-3)
    # Single frequency: the F-test of nested linear models, z/(1-z) * N_K/(2K) ~ F(2K, N_K).
    from scipy.stats import f as f_dist

    n, k = 57, 3
    n_k = n - 1 - 2 * k
    z = np.array([0.05, 0.2, 0.4])
    np.testing.assert_allclose(fap_single(z, n, nterms=k), f_dist.sf(z / (1 - z) * n_k / (2 * k), 2 * k, n_k), rtol=1e-10)


@pytest.mark.parametrize("nterms", [1, 2, 3])
def test_fap_baluev_bounds_simulated_noise(nterms):
    # Simulated truth: pure Gaussian noise; the fraction of highest peaks above the
    # level quoted for FAP = 0.05 must not exceed 0.05 (beyond binomial scatter) and
    # the bound must not be wildly pessimistic (Baluev 2008: an upper bound, tight
    # for well-sampled series).
    rng = np.random.default_rng(40 + nterms)
    t = np.sort(rng.uniform(0, 40, 60))
    dy = rng.uniform(0.05, 0.1, t.size)
    f = frequency_grid(t, min_period=0.5, max_period=20.0, oversampling=5.0)
    nsim = 1500
    peaks = gls_power(t, rng.normal(0, 1, (nsim, t.size)) * dy, dy, f, nterms=nterms).max(axis=1)
    level = power_at_fap(0.05, f, t, dy, nterms)
    frac = float(np.mean(peaks >= level))
    assert frac <= 0.05 + 3 * math.sqrt(0.05 * 0.95 / nsim)
    assert frac >= 0.05 / 4


def test_bootstrap_uniform_on_noise_and_small_for_signal():
    from scipy.stats import kstest

    rng = np.random.default_rng(77)
    t = np.sort(rng.uniform(0, 25, 40))
    dy = rng.uniform(0.02, 0.05, t.size)
    f = frequency_grid(t, min_period=0.5, max_period=10.0, oversampling=4.0)
    faps = []
    for _ in range(40):
        y = rng.normal(0, dy)
        fap, _ = fap_bootstrap(t, y, dy, f, n_bootstrap=100, rng=rng)
        faps.append(fap)
    # Pure noise: the bootstrap p-value is roughly uniform on (0, 1].
    assert kstest(faps, "uniform").pvalue > 0.01
    y = 0.05 * np.sin(2 * np.pi * 0.61 * t) + rng.normal(0, dy)
    fap, maxp = fap_bootstrap(t, y, dy, f, n_bootstrap=100, rng=np.random.default_rng(1))
    assert fap == pytest.approx(1 / 101)
    assert np.all(np.diff(maxp) >= 0) and maxp.size == 100
    again, maxp2 = fap_bootstrap(t, y, dy, f, n_bootstrap=100, rng=np.random.default_rng(1))
    assert again == fap and np.array_equal(maxp, maxp2)


# --------------------------------------------------------------------------- bad input


def test_power_bad_input(small_series):
    t, y, dy, _ = small_series
    f = frequency_grid(t, oversampling=2.0)
    with pytest.raises(InputError, match="at least 12"):
        gls_power(t[:8], y[:8], dy[:8], f)
    with pytest.raises(InputError, match="empty"):
        gls_power([], [], [], f)
    bad = y.copy()
    bad[3] = np.nan
    with pytest.raises(InputError, match="non-finite"):
        gls_power(t, bad, dy, f)
    with pytest.raises(InputError, match="dy"):
        gls_power(t, y, -dy, f)
    with pytest.raises(InputError, match="shape"):
        gls_power(t, y[:-1], dy, f)
    with pytest.raises(InputError, match="constant"):
        gls_power(t, np.ones_like(y), dy, f)
    with pytest.raises(InputError, match="uniform"):
        gls_power(t, y, dy, np.geomspace(0.1, 5, 100), method="fast")
    with pytest.raises(InputError, match="method"):
        gls_power(t, y, dy, f, method="quick")
    with pytest.raises(InputError, match="positive"):
        gls_power(t, y, dy, np.array([0.0, 1.0]))
    with pytest.raises(InputError, match="nterms"):
        gls_power(t, y, dy, f, nterms=0)
    # auto picks fast for big uniform problems and exact otherwise.
    assert resolve_method("auto", 5000, np.linspace(1, 2, 1000))[0] == "fast"
    assert resolve_method("auto", 5000, np.geomspace(1, 2, 1000))[0] == "exact"
    assert resolve_method("auto", 50, np.linspace(1, 2, 100))[0] == "exact"


def test_near_degenerate_one_cycle_per_day():
    # Five points per night at the same clock times within 0.2 d: at 1 c/d three
    # harmonics are almost collinear.  The exact path still matches astropy (reference
    # library, direct design-matrix chi2), and the fast path keeps up with it.
    from astropy.timeseries import LombScargle

    rng = np.random.default_rng(9)
    t = np.repeat(np.arange(100.0), 5) + np.tile(np.linspace(0.0, 0.2, 5), 100)
    y = rng.normal(0, 0.02, t.size)
    dy = np.full(t.size, 0.02)
    f = np.linspace(0.999, 1.001, 401)
    exact = gls_power(t, y, dy, f, nterms=3, method="exact")
    ref = LombScargle(t, y, dy, nterms=3).power(f, method="chi2")
    np.testing.assert_allclose(exact, ref, atol=1e-8)
    np.testing.assert_allclose(gls_power(t, y, dy, f, nterms=3, method="fast"), exact, atol=1e-7)
