"""Tests of the phased model and the phased light curve (varstar.period.phased).

Outside references, named beside each check:

* simulated data with known truth (invented stars, fixed seeds): a two-band
  sinusoid of known amplitudes and epoch of maximum light, and a double-mode star
  whose second mode is known, so the phased model and the points with the further
  frequency removed can be compared with the curves that made them;
* linear propagation of the fit's covariance to the model value at a time,
  ``sigma^2 = g^T C g`` with ``g`` the model's derivatives in the parameters,
  written out here for the Fourier series (common practice);
* the phase of a time, ``(t - epoch) / P`` modulo 1, computed point by point with
  the standard library (common practice: the definition of a phased light curve).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from varstar.period import analyse, fold_phase, phased_data, phased_model

T_START = 2460200.0  # invented BJD_TDB origin
PERIOD = 0.6173  # invented period of the sinusoid (days)
EPOCH = T_START + 0.31  # invented epoch of maximum light (smallest magnitude)
AMPLITUDE = {"B": 0.32, "V": 0.25}  # invented semi-amplitudes (mag)
MEAN = {"B": 13.6, "V": 13.1}  # invented mean magnitudes
SIGMA = 0.01  # noise and stated error of every point (mag)


def nightly(rng, nights, *, hours=6.0, cadence_min=6.0, spread=1.5, start=T_START):
    """Single-site sampling: ``nights`` clear nights among ``spread * nights``, one run each."""
    chosen = np.sort(rng.choice(np.arange(int(spread * nights)), nights, replace=False))
    starts = start + chosen + 0.30 + 0.05 * rng.standard_normal(nights)
    per = np.arange(0.0, hours / 24.0, cadence_min / 1440.0)
    return (starts[:, None] + per[None, :]).ravel()


def sinusoid(t, band):
    """The invented truth: maximum light (smallest magnitude) at EPOCH."""
    return MEAN[band] - AMPLITUDE[band] * np.cos(2.0 * math.pi * (t - EPOCH) / PERIOD)


@pytest.fixture(scope="module")
def two_band():
    rng = np.random.default_rng(20240611)
    t = nightly(rng, 30)
    band = np.where(np.arange(t.size) % 3 == 0, "B", "V")  # V the reference band (more points)
    truth = np.where(band == "B", sinusoid(t, "B"), sinusoid(t, "V"))
    mag = truth + rng.normal(0.0, SIGMA, t.size)
    lc = pd.DataFrame({"bjd_tdb": t, "mag": mag, "mag_err": np.full(t.size, SIGMA), "band": band})
    res = analyse(t, mag, np.full(t.size, SIGMA), band)
    return lc, res


def model_sigma(fit, times):
    """1-sigma error of a harmonic fit's model at ``times``: g^T C g with g written out.

    Model ``m + sum_k a_k cos(k x) + b_k sin(k x)``, ``x = 2 pi f (t - t_ref)``;
    parameters ``[m, f, a_1, b_1, ...]`` as in ``HarmonicFit.params``.
    """
    p, cov = fit.params, fit.covariance
    tau = times - fit.t_ref
    a, b = p[2::2], p[3::2]
    g = np.zeros((times.size, p.size))
    g[:, 0] = 1.0
    for k in range(1, a.size + 1):
        x = 2.0 * math.pi * k * p[1] * tau
        g[:, 2 * k] = np.cos(x)
        g[:, 2 * k + 1] = np.sin(x)
        g[:, 1] += 2.0 * math.pi * k * tau * (b[k - 1] * np.cos(x) - a[k - 1] * np.sin(x))
    return np.sqrt(np.einsum("ij,jk,ik->i", g, cov, g))


def test_phased_model_reproduces_the_sinusoid_within_the_fit_error(two_band):
    _, res = two_band
    assert res.period == pytest.approx(PERIOD, abs=5 * res.period_err)
    curves = phased_model(res, n=400)
    assert set(curves) == {"B", "V"}
    for b, (phase, model) in curves.items():
        assert phase.shape == model.shape == (400,)
        np.testing.assert_allclose(phase, np.arange(400) / 400, atol=1e-15)
        times = res.epoch + phase * res.period
        # reference: the invented curve at the same times, judged by the propagated error
        pulls = (model - sinusoid(times, b)) / model_sigma(res.fits[b], times)
        assert np.all(np.isfinite(pulls))
        assert np.max(np.abs(pulls)) < 4.0, (b, np.max(np.abs(pulls)))
        # the peak-to-peak range of one cycle is twice the semi-amplitude (simulated truth)
        ptp = model.max() - model.min()
        assert ptp == pytest.approx(2 * AMPLITUDE[b], abs=4 * res.fits[b].ptp_amplitude_err + 1e-4)
        # phase 0 is the epoch of maximum light: the smallest magnitude of the cycle
        # (within a grid step: the band's own maximum differs from the reference band's by noise)
        assert int(np.argmin(model)) in (0, 1, 399)


def test_phased_data_phases_by_hand_and_residuals_are_the_noise(two_band):
    lc, res = two_band
    before = lc.copy()
    main, resid = phased_data(res, lc)
    pd.testing.assert_frame_equal(lc, before)  # the caller's table is not changed
    assert len(main) == len(lc) and resid.shape == (len(lc),)
    phase = main["phase"].to_numpy()
    assert np.all((phase >= 0.0) & (phase < 1.0))
    # reference: (t - epoch) / P modulo 1, point by point with the standard library
    by_hand = np.array([(x - res.epoch) / res.period - math.floor((x - res.epoch) / res.period)
                        for x in lc["bjd_tdb"]])
    diff = np.abs(phase - by_hand)
    assert np.all(np.minimum(diff, 1.0 - diff) < 1e-9)
    # a single-period star: nothing is removed before folding
    np.testing.assert_array_equal(main["mag"].to_numpy(), lc["mag"].to_numpy())
    for b in ("B", "V"):
        m = (lc["band"] == b).to_numpy()
        # simulated truth: the residuals from the adopted model are the noise put in
        assert np.std(resid[m]) == pytest.approx(SIGMA, rel=0.1)
        assert abs(np.mean(resid[m])) < 4 * SIGMA / math.sqrt(m.sum())


def test_phased_data_removes_the_second_mode_before_folding():
    # an invented double-mode star: the second mode removed, the points fold onto the first
    rng = np.random.default_rng(77)
    t = nightly(rng, 40)
    p2 = PERIOD / 0.745  # a longer second period, at an invented ratio
    first = MEAN["V"] - 0.20 * np.cos(2.0 * math.pi * (t - EPOCH) / PERIOD)
    second = 0.08 * np.cos(2.0 * math.pi * (t - T_START) / p2 + 1.1)
    mag = first + second + rng.normal(0.0, SIGMA, t.size)
    lc = pd.DataFrame({"bjd_tdb": t, "mag": mag, "mag_err": np.full(t.size, SIGMA), "band": "V"})
    res = analyse(t, mag, np.full(t.size, SIGMA), np.full(t.size, "V"))
    assert res.multiperiodic
    main, resid = phased_data(res, lc)
    # simulated truth: what is left after removing the further frequency is the first mode plus noise
    left = main["mag"].to_numpy() - first
    assert np.std(left) == pytest.approx(SIGMA, rel=0.15)
    assert np.std(mag - first) > 3 * SIGMA  # (without the removal the second mode would remain)
    assert np.std(resid) == pytest.approx(SIGMA, rel=0.1)


def test_fold_phase_stays_below_one():
    # a time a hair before the epoch: numpy's modulo rounds -1e-20 to exactly 1.0 (IEEE double
    # rounding, common practice); the phase must still lie in [0, 1)
    assert np.mod(-1e-20, 1.0) == 1.0
    assert fold_phase(np.array([-1e-20]), 1.0, 0.0)[0] == 0.0
    t = np.array([0.0, 0.25, 1.0, 2.75, -0.25])
    np.testing.assert_allclose(fold_phase(t, 1.0, 0.0), [0.0, 0.25, 0.0, 0.75, 0.75])
    np.testing.assert_allclose(fold_phase(t * 2.0, 2.0, 0.5), [0.75, 0.0, 0.75, 0.5, 0.5])
