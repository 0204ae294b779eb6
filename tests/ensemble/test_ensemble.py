"""Tests of the inhomogeneous ensemble solution (varstar.ensemble).

Every scenario is an invented field simulated with a fixed seed and a known truth:
stars get true standard magnitudes, each exposure a true zero point (extinction
in airmass plus a slow drift), and the detector sees fluxes with Gaussian noise.
Instrumental magnitudes follow Pogson (1856, MNRAS 17, 12), m = -2.5 log10(F),
and their errors the usual sigma_m = (2.5 / ln 10) sigma_F / F.  The checks are
against that truth (pull distributions of unit width), against a direct dense
least-squares solution of Honeycutt's (1992, PASP 104, 435) model
m_ij = M_i + z_j, and against the published relations above.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass

import numpy as np
import pytest

from varstar.ensemble import EnsembleSettings, EnsembleSolution, solve_ensemble
from varstar.ensemble.linear import solve_weighted as _solve_weighted
from varstar.errors import ReductionError

POGSON = 2.5 / math.log(10.0)  # 1.0857..., sigma_m = POGSON * sigma_F / F


# --------------------------------------------------------------------------- simulator


@dataclass
class Night:
    """Inputs of solve_ensemble plus the truth they were made from."""

    exposure: np.ndarray
    star: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    is_comparison: np.ndarray
    catalog_mag: np.ndarray
    catalog_err: np.ndarray
    time: np.ndarray
    airmass: np.ndarray
    true_std: np.ndarray  # (n_meas,) true standard magnitude of each measurement
    true_zp: np.ndarray  # (n_exp,) true calibrated zero point
    true_flux: np.ndarray  # (n_meas,) noiseless detector flux
    n_exposures: int

    def solve(self, **kw) -> EnsembleSolution:
        args = dict(
            n_exposures=self.n_exposures,
            is_comparison=self.is_comparison,
            catalog_mag=self.catalog_mag,
            catalog_err=self.catalog_err,
            time=self.time,
            airmass=self.airmass,
        )
        args.update(kw)
        return solve_ensemble(self.exposure, self.star, self.mag, self.mag_err, **args)


def simulate_night(
    seed: int,
    *,
    n_exp: int = 300,
    n_comp: int = 8,
    missing: float = 0.1,
    cat_err: float = 0.01,
    cat_extra: float = 0.0,
    variable_comp: int | None = None,
    variable_amp: float = 0.08,
    bad_catalog_comp: int | None = None,
    bad_catalog_by: float = 0.5,
    cloud: slice | None = None,
    cloud_depth: tuple[float, float] = (0.3, 1.0),
    single_comp_exposures: tuple[int, ...] = (),
    bright: float = 10.5,
) -> Night:
    """An invented field: ``n_comp`` comparison stars, then a variable target and a check star.

    Detector fluxes ``F = 10**(-0.4 (m_std + zp_j))`` (Pogson) with Gaussian noise
    ``sigma_F = sqrt(F + B)`` (photon noise plus a sky/readout term ``B``).  The
    catalogue gives ``m_std + N(0, cat_err) + N(0, cat_extra)``; the second term
    mimics an untransformed colour term that the quoted ``cat_err`` does not include.
    """
    rng = np.random.default_rng(seed)
    n_star = n_comp + 2
    target, check = n_comp, n_comp + 1
    time = 2460400.30 + np.linspace(0.0, 0.30, n_exp)
    hour = (time - time[0]) / 0.30
    airmass = 1.08 + 1.3 * (hour - 0.25) ** 2  # transit a quarter into the night
    true_zp = -24.0 + 0.18 * airmass + 0.02 * hour  # extinction + drift
    std = np.empty(n_star)
    std[:n_comp] = rng.uniform(bright, bright + 2.5, n_comp)
    std[target] = bright + 1.0
    std[check] = bright + 0.8
    ee, ss = np.meshgrid(np.arange(n_exp), np.arange(n_star), indexing="ij")
    ee, ss = ee.ravel(), ss.ravel()
    keep = rng.random(ee.size) >= missing
    keep |= ss >= n_comp  # target and check always measured
    for j in single_comp_exposures:
        lone = (ee == j) & (ss < n_comp)
        keep[lone] = False
        keep[(ee == j) & (ss == 0)] = True
    ee, ss = ee[keep], ss[keep]
    true_std = std[ss].copy()
    phase = 2 * np.pi * (time[ee] - time[0]) / 0.11
    true_std[ss == target] += 0.4 * np.sin(phase[ss == target])
    if variable_comp is not None:
        sel = ss == variable_comp
        true_std[sel] += variable_amp * np.sin(2 * np.pi * (time[ee[sel]] - time[0]) / 0.09)
    zp = true_zp.copy()
    if cloud is not None:
        # grey dimming of every star (and so larger flux errors): the calibrated zero point rises
        idx = np.arange(n_exp)[cloud]
        zp[idx] += np.interp(idx, [idx[0], idx[len(idx) // 2], idx[-1]],
                             [cloud_depth[0], cloud_depth[1], cloud_depth[0]])
    flux = 10.0 ** (-0.4 * (true_std + zp[ee]))
    sky = 3.0e3
    sigma_f = np.sqrt(flux + sky)
    f_obs = flux + rng.normal(0.0, 1.0, flux.size) * sigma_f
    mag = -2.5 * np.log10(f_obs)
    mag_err = POGSON * sigma_f / f_obs
    cat = std + rng.normal(0.0, cat_err, n_star) + rng.normal(0.0, cat_extra, n_star)
    cat[target] = np.nan
    if bad_catalog_comp is not None:
        cat[bad_catalog_comp] += bad_catalog_by
    is_comp = np.zeros(n_star, dtype=bool)
    is_comp[:n_comp] = True
    return Night(
        exposure=ee,
        star=ss,
        mag=mag,
        mag_err=mag_err,
        is_comparison=is_comp,
        catalog_mag=cat,
        catalog_err=np.full(n_star, cat_err),
        time=time,
        airmass=airmass,
        true_std=true_std,
        true_zp=zp,
        true_flux=flux,
        n_exposures=n_exp,
    )


def binomial_band(p: float, n: int, k: float = 3.0) -> float:
    """k-sigma half width of a binomial fraction."""
    return k * math.sqrt(p * (1 - p) / n)


# --------------------------------------------------------------------------- exactness


def _dense_design(exp_idx, star_idx, n_exp, n_star):
    """Full design matrix of Honeycutt's model: columns M_0..M_{n-1}, z_0..z_{J-1}."""
    D = np.zeros((exp_idx.size, n_star + n_exp))
    D[np.arange(exp_idx.size), star_idx] = 1.0
    D[np.arange(exp_idx.size), n_star + exp_idx] = 1.0
    return D


def test_core_solver_equals_dense_lstsq():
    # Honeycutt (1992) model m_ij = M_i + z_j solved directly with numpy.linalg.lstsq on the
    # full weighted design matrix; gauge-invariant quantities and covariances must agree.
    rng = np.random.default_rng(11)
    n_exp, k = 17, 6
    present = rng.random((n_exp, k)) < 0.7
    present[:, 0] = True  # keeps the ensemble linked
    present[3] = False
    present[3, 2] = True  # an exposure with a single star
    present[5] = False  # an exposure with no star at all
    W = np.where(present, rng.uniform(50.0, 5000.0, (n_exp, k)), 0.0)
    Y = np.where(present, rng.normal(0, 1, k)[None, :] + rng.normal(0, 1, n_exp)[:, None]
                 + rng.normal(0, 0.03, (n_exp, k)), 0.0)
    fit = _solve_weighted(W, Y)
    jj, ii = np.nonzero(present)
    D = _dense_design(jj, ii, n_exp, k)
    sw = np.sqrt(W[jj, ii])
    p = np.linalg.lstsq(D * sw[:, None], Y[jj, ii] * sw, rcond=None)[0]
    cov = np.linalg.pinv((D * W[jj, ii][:, None]).T @ D)
    # move the minimum-norm gauge of lstsq to sum(M) = 0, exactly what the solver uses
    T = np.eye(k + n_exp)
    T[:k, :k] -= 1.0 / k
    T[k:, :k] += 1.0 / k
    p_g, cov_g = T @ p, T @ cov @ T.T
    assert np.allclose(fit.M, p_g[:k], atol=1e-10, rtol=0)
    seen = present.any(axis=1)
    assert np.allclose(fit.z[seen], p_g[k:][seen], atol=1e-10, rtol=0)
    assert np.all(np.isnan(fit.z[~seen]))
    assert np.allclose(fit.CM, cov_g[:k, :k], atol=1e-10, rtol=0)
    # variance of each prediction M_i + z_j
    for j, i in zip(jj, ii):
        a = np.zeros(k + n_exp)
        a[i] = a[k + j] = 1.0
        assert fit.var_pred[j, i] == pytest.approx(a @ cov @ a, abs=1e-10)


def test_solution_equals_dense_lstsq_with_tie():
    # The public result (zero points, their errors, the calibrated star offsets) equals a
    # dense weighted lstsq of Honeycutt's (1992) design with the solution's own weights
    # 1/(mag_err^2 + excess^2), used measurements and tie weights, to 1e-10.
    night = simulate_night(5, n_exp=24, n_comp=6, missing=0.3)
    sol = night.solve()
    comp = np.flatnonzero(night.is_comparison)
    u = sol.used
    jj, ii = night.exposure[u], night.star[u]
    n_exp, k = night.n_exposures, comp.size
    D = _dense_design(jj, ii, n_exp, k)
    w = 1.0 / (night.mag_err[u] ** 2 + sol.star_excess[ii] ** 2)
    sw = np.sqrt(w)
    p = np.linalg.lstsq(D * sw[:, None], night.mag[u] * sw, rcond=None)[0]
    cov = np.linalg.pinv((D * w[:, None]).T @ D)
    ubar = sol.tie_weight[comp]
    assert ubar.sum() == pytest.approx(1.0)
    T = np.eye(k + n_exp)  # gauge sum(ubar * M) = 0
    T[:k, :k] -= np.outer(np.ones(k), ubar)
    T[k:, :k] += np.outer(np.ones(n_exp), ubar)
    p_g, cov_g = T @ p, T @ cov @ T.T
    cat = np.where(ubar > 0, night.catalog_mag[comp], 0.0)
    zp_ref = p_g[k:] - ubar @ cat
    assert np.allclose(sol.zero_point, zp_ref, atol=1e-10, rtol=0)
    assert np.allclose(sol.zero_point_err, np.sqrt(np.diag(cov_g)[k:]), atol=1e-10, rtol=0)
    assert np.allclose(sol.star_offset[comp], p_g[:k] + ubar @ cat - night.catalog_mag[comp], atol=1e-10)
    # calibration_err from the tie weights: sqrt(sum ubar^2 (catalog_err^2 + s_cat^2))
    ref = math.sqrt(np.sum(ubar**2 * (night.catalog_err[comp] ** 2 + sol.catalog_scatter**2)))
    assert sol.calibration_err == pytest.approx(ref, rel=1e-12)


# --------------------------------------------------------------------------- truth recovery


def test_pogson_and_magnitude_errors_in_the_simulation():
    # Pogson (1856): m1 - m2 = -2.5 log10(F1/F2); five magnitudes are a flux ratio of 100.
    night = simulate_night(2, n_exp=50)
    e, s = night.exposure, night.star
    a = (e == 10) & (s == 0)
    b = (e == 10) & (s == 1)
    dm = night.true_std[a][0] - night.true_std[b][0]
    assert dm == pytest.approx(-2.5 * np.log10(night.true_flux[a][0] / night.true_flux[b][0]), abs=1e-12)
    assert 10.0 ** (0.4 * 5.0) == pytest.approx(100.0)
    # the error column follows sigma_m = 1.0857 / SNR
    snr = night.true_flux / np.sqrt(night.true_flux + 3.0e3)
    assert np.median(night.mag_err * snr) == pytest.approx(POGSON, rel=0.01)
    # the calibrated magnitudes reproduce the flux ratio of target and check star in each exposure
    sol = night.solve()
    t_idx = np.flatnonzero(s == night.is_comparison.size - 2)
    c_idx = np.flatnonzero(s == night.is_comparison.size - 1)
    order_t, order_c = np.argsort(e[t_idx]), np.argsort(e[c_idx])
    dm_obs = sol.mag[t_idx][order_t] - sol.mag[c_idx][order_c]
    dm_true = -2.5 * np.log10(night.true_flux[t_idx][order_t] / night.true_flux[c_idx][order_c])
    pull = (dm_obs - dm_true) / np.hypot(night.mag_err[t_idx][order_t], night.mag_err[c_idx][order_c])
    assert abs(pull.mean()) < 4 / math.sqrt(pull.size)
    assert 0.85 < pull.std() < 1.15


def test_zero_points_and_target_recovered_with_unit_pulls():
    # simulated data with known truth: pulls (estimate - truth) / error must have mean ~0 and
    # standard deviation ~1; the common tie offset is removed and tested separately.
    night = simulate_night(7, n_exp=400, missing=0.15)
    sol = night.solve()
    assert sol.converged
    assert set(sol.star_status[:8]) == {"kept"}
    assert sol.star_status[8:] == ("not_comparison", "not_comparison")
    dz = sol.zero_point - night.true_zp
    common = np.average(dz, weights=sol.zero_point_err**-2)
    # the common offset is the tie to the catalogue: within 4 calibration errors
    assert abs(common) < 4 * math.hypot(sol.calibration_err, 1e-3)
    pull = (dz - common) / sol.zero_point_err
    n = pull.size
    assert abs(pull.mean()) < 4 / math.sqrt(n)
    assert abs(pull.std() - 1.0) < 4 / math.sqrt(2 * n)
    # target (varies by 0.4 mag) and check star: calibrated magnitudes against the truth
    for s_idx in (8, 9):
        sel = night.star == s_idx
        p = (sol.mag[sel] - night.true_std[sel] + common) / sol.mag_err[sel]  # mag = m - zp
        assert abs(p.mean()) < 4 / math.sqrt(p.size)
        assert abs(p.std() - 1.0) < 4 / math.sqrt(2 * p.size)
    # the check star is constant: its reduced chi-square is ~1 (chi2 with ~399 dof)
    assert abs(sol.star_chi2_dof[9] - 1.0) < 4 * math.sqrt(2 / 399)
    # fitted comparison stars: reduced chi2 consistent with 1, small excesses
    assert np.all(np.abs(sol.star_chi2_dof[:8] - 1.0) < 0.25)
    assert np.all(sol.star_excess[:8] < 0.003)


def test_pulls_over_many_realisations_and_calibration_coverage():
    # Over many invented nights: (1) per-exposure zero-point pulls have unit width;
    # (2) the tie error calibration_err covers the true common offset in ~68.3% of nights
    # (binomial tolerance, 3 sigma).
    n_real = 150
    inside = 0
    tie_pulls = []
    zp_pulls = []
    for seed in range(n_real):
        night = simulate_night(1000 + seed, n_exp=40, cat_err=0.02, missing=0.2)
        sol = night.solve()
        dz = sol.zero_point - night.true_zp
        sigma_common = math.hypot(sol.calibration_err, float(np.sqrt(np.mean(sol.zero_point_err**2) / dz.size)))
        common = float(np.mean(dz))
        inside += abs(common) <= sigma_common
        tie_pulls.append(common / sigma_common)
        zp_pulls.append((dz - common) / sol.zero_point_err)
    frac = inside / n_real
    assert abs(frac - 0.6827) < binomial_band(0.6827, n_real)
    tie_pulls = np.array(tie_pulls)
    assert abs(tie_pulls.mean()) < 4 / math.sqrt(n_real)
    assert abs(tie_pulls.std() - 1.0) < 0.2
    zp_pulls = np.concatenate(zp_pulls)
    # subtracting the per-night mean removes one of 40 degrees of freedom: width sqrt(39/40).
    # The per-star excess is a positive-part estimate (zero when chi2/dof <= 1), which on
    # nights this short errs on the conservative side by a few per cent, never below.
    assert 0.92 < zp_pulls.std() < math.sqrt(39 / 40) + 0.02


@pytest.mark.parametrize("n_comp", [4, 12])
def test_calibration_err_honest_when_catalogue_disagrees_beyond_quoted_errors(n_comp):
    # Catalogue values scattered by 0.04 mag more than their quoted 0.005 mag (an untransformed
    # colour term): the fitted catalogue scatter must absorb it so calibration_err still covers
    # the truth in ~68.3% of nights (binomial tolerance), also with only 4 catalogue stars
    # (where the scatter estimate makes the tie Student-t distributed).
    n_real = 150
    inside = 0
    scat = []
    for seed in range(n_real):
        night = simulate_night(5000 + 1000 * n_comp + seed, n_exp=30, n_comp=n_comp, cat_err=0.005,
                               cat_extra=0.04, missing=0.05)
        sol = night.solve()
        common = float(np.nanmean(sol.zero_point - night.true_zp))
        inside += abs(common) <= sol.calibration_err
        scat.append(sol.catalog_scatter)
    frac = inside / n_real
    assert abs(frac - 0.6827) < binomial_band(0.6827, n_real)
    # the fitted scatter estimates the simulated 0.04 mag (median of a skewed estimator: loose)
    assert np.median(scat) == pytest.approx(0.04, abs=0.01)


def test_single_exposure_is_a_weighted_mean_of_catalogue_offsets():
    # With one exposure Honeycutt's model reduces to zp = sum(u_i (m_i - C_i)) / sum(u_i),
    # photometric variance sum(u_i^2 sigma_i^2) / sum(u_i)^2 (weighted mean, error propagation).
    night = simulate_night(4, n_exp=1, missing=0.0)
    sol = night.solve()
    comp = night.star < 8
    u = sol.tie_weight[night.star[comp]]
    resid = night.mag[comp] - night.catalog_mag[night.star[comp]]
    assert sol.zero_point[0] == pytest.approx(np.sum(u * resid), abs=1e-12)
    assert sol.zero_point_err[0] == pytest.approx(np.sqrt(np.sum(u**2 * night.mag_err[comp] ** 2)), rel=1e-9)
    assert sol.star_status[:8] == ("kept",) * 8
    assert abs(sol.zero_point[0] - night.true_zp[0]) < 4 * math.hypot(sol.zero_point_err[0], sol.calibration_err)
    assert any("jump test" in w for w in sol.warnings)


def test_comparison_without_catalogue_helps_zero_points_only():
    night = simulate_night(8, n_exp=100)
    cat = night.catalog_mag.copy()
    cat[[1, 2]] = np.nan
    kw = _base_kwargs(night)
    kw["catalog_mag"] = cat
    sol = solve_ensemble(night.exposure, night.star, night.mag, night.mag_err, **kw)
    full = night.solve()
    assert sol.star_status[:8] == ("kept",) * 8
    assert sol.tie_weight[1] == 0 and sol.tie_weight[2] == 0
    assert np.isnan(sol.star_offset[1]) and np.isnan(sol.star_offset[2])
    assert sol.used[night.star == 1].all()
    # their measurements still shape the relative zero points: same as with catalogue values
    # apart from a constant (the tie)
    d = sol.zero_point - full.zero_point
    assert np.ptp(d) < 1e-6


# --------------------------------------------------------------------------- vetting


def test_variable_comparison_and_wrong_catalogue_value_are_rejected():
    night = simulate_night(21, n_exp=300, variable_comp=3, variable_amp=0.07, bad_catalog_comp=5)
    sol = night.solve(star_names=[f"C{i}" for i in range(8)] + ["T", "K"])
    assert sol.star_status[3] == "variable"
    assert "scatter" in sol.star_reason[3] and "times what its errors allow" in sol.star_reason[3]
    assert sol.star_status[5] == "catalog_offset"
    # catalogue 0.5 mag too faint -> fitted minus catalogue is about -0.5 mag
    assert re.search(r"catalogue offset -0\.(4[6-9]|5[0-4])\d mag", sol.star_reason[5])
    others = [i for i in range(8) if i not in (3, 5)]
    assert all(sol.star_status[i] == "kept" for i in others)
    assert all(sol.star_reason[i] == "" for i in others)
    # the variable star no longer enters the fit; the catalogue-offset star still does
    assert not sol.used[night.star == 3].any()
    assert sol.used[night.star == 5].sum() > 0.8 * np.count_nonzero(night.star == 5)
    assert sol.tie_weight[5] == 0 and sol.tie_weight[3] == 0
    # the rejected star's offset shows the 0.5 mag catalogue error
    assert sol.star_offset[5] == pytest.approx(-0.5, abs=0.05)
    # zero points unaffected: pulls against the truth (common tie offset removed)
    dz = sol.zero_point - night.true_zp
    common = np.mean(dz)
    assert abs(common) < 4 * sol.calibration_err
    pull = (dz - common) / sol.zero_point_err
    assert abs(pull.std() - 1.0) < 0.15


@pytest.mark.parametrize("n_comp, n_exp, n_nights", [(8, 150, 20), (3, 40, 150)])
def test_no_false_rejections_on_clean_nights(n_comp, n_exp, n_nights):
    # p = 1e-4 per star: the expected number of false rejections is ~0.02-0.05 here; the
    # exposure false-flag rate must also be small.  Three stars is the hard case: a star that
    # gets a chance excess is down-weighted and stops pulling its own zero points, so it is
    # tested against the zero points of the other stars, not against its fit residuals.
    flagged = 0
    total = 0
    for seed in range(n_nights):
        night = simulate_night(300 + 1000 * n_comp + seed, n_exp=n_exp, n_comp=n_comp, missing=0.05)
        sol = night.solve()
        assert sol.star_status[:n_comp] == ("kept",) * n_comp
        assert not sol.clipped.any()
        # too_few_comparisons exactly where the missing data leave fewer than two comparisons
        few = np.array(["too_few_comparisons" in f for f in sol.exposure_flags])
        assert np.array_equal(few, sol.n_comparisons < 2)
        flagged += sum(1 for f in sol.exposure_flags if f.replace("too_few_comparisons", "").strip(";"))
        total += len(sol.exposure_flags)
        assert 1.0 <= sol.error_scale < 1.3
    assert flagged / total < 0.005


def test_common_error_scale_prevents_mass_rejection():
    # all errors underestimated by a factor 2: chi2/dof ~4 for every star, yet no star is
    # variable because the test divides by the ensemble's common scale.
    night = simulate_night(31, n_exp=300)
    sol = solve_ensemble(night.exposure, night.star, night.mag, night.mag_err / 2.0, **_base_kwargs(night))
    assert sol.star_status[:8] == ("kept",) * 8
    # each star is compared with the zero points of the others, whose errors include their fitted
    # excess, so the ensemble scale lies between 1 and 4; it clearly detects the underestimate
    assert 2.0 < sol.error_scale < 4.0
    # the fitted excess restores the missing variance: in expectation the residual variance is
    # (2 s)^2 for a quoted s, so e solves sum (2 s)^2 / (s^2 + e^2) = n (reduced chi-square one)
    from scipy.optimize import brentq

    ratio = []
    for i in range(8):
        half = night.mag_err[night.star == i] / 2.0
        e_ref = brentq(lambda e: np.sum(4 * half**2 / (half**2 + e**2)) - half.size, 0.0, 1.0)
        ratio.append(sol.star_excess[i] / e_ref)
    # ~270 points per star: each ratio scatters by ~7% (simulated), their mean by ~2.5%
    assert np.all(np.abs(np.array(ratio) - 1.0) < 0.3)
    assert abs(np.mean(ratio) - 1.0) < 0.08
    # the excess makes the zero-point errors honest again (pulls ~1)
    dz = sol.zero_point - night.true_zp
    pull = (dz - dz.mean()) / sol.zero_point_err
    assert abs(pull.std() - 1.0) < 0.12


def test_passing_cloud_and_lonely_exposures_are_flagged_not_dropped():
    cloud = slice(200, 245)  # 15% of the night, dimmed by 0.3..1.0 mag
    lonely = (20, 90, 150)
    night = simulate_night(41, n_exp=300, cloud=cloud, single_comp_exposures=lonely)
    sol = night.solve()
    flags = np.array(sol.exposure_flags)
    in_cloud = np.zeros(300, dtype=bool)
    in_cloud[cloud] = True
    jump = np.array(["zero_point_jump" in f for f in flags])
    # every cloud exposure (dimmed by 0.3..1 mag) is flagged as a jump, no clear one is
    assert np.all(jump[in_cloud])
    assert not np.any(jump[~in_cloud])
    for j in lonely:
        assert "too_few_comparisons" in flags[j]
        assert sol.n_comparisons[j] == 1
        assert np.isfinite(sol.zero_point[j])  # still calibrated
    clean = ~in_cloud & ~np.isin(np.arange(300), lonely)
    assert np.count_nonzero(flags[clean] != "") <= 2
    # flagged exposures keep their zero points and the cloud is in them
    assert np.all(np.isfinite(sol.zero_point[in_cloud]))
    dz = sol.zero_point - night.true_zp
    pull = (dz - np.median(dz[clean])) / sol.zero_point_err
    assert np.all(np.abs(pull[in_cloud]) < 5)
    assert np.all(sol.zero_point[in_cloud] - sol.zero_point[clean].mean() > 0.2)


def test_single_wild_measurement_is_clipped_and_does_not_move_the_zero_point():
    night = simulate_night(51, n_exp=120, missing=0.1)
    ref = night.solve()
    j = 60
    hit = np.flatnonzero((night.exposure == j) & (night.star == 2))[0]
    wild = night.mag.copy()
    wild[hit] += 1.0
    sol = solve_ensemble(night.exposure, night.star, wild, night.mag_err, **_base_kwargs(night))
    assert sol.clipped[hit] and not sol.used[hit]
    assert np.count_nonzero(sol.clipped) == 1
    assert sol.star_status[2] == "kept"
    # the same night without the wild measurement at all (upstream flag) gives the same zero point
    good = np.ones(night.mag.size, dtype=bool)
    good[hit] = False
    ref2 = night.solve(good=good)
    # (equal up to the convergence tolerance of the iterated excess weights)
    assert sol.zero_point[j] == pytest.approx(ref2.zero_point[j], abs=0.01 * ref2.zero_point_err[j])
    assert abs(sol.zero_point[j] - ref.zero_point[j]) < 2 * ref.zero_point_err[j]
    # the upstream-bad measurement still gets a calibrated magnitude
    assert not ref2.used[hit] and not ref2.clipped[hit]
    assert ref2.mag[hit] == pytest.approx(night.mag[hit] - ref2.zero_point[j])


def test_clips_caused_by_a_variable_comparison_are_undone():
    # A comparison star varying by 0.4 mag in a four-star ensemble drags the zero points before it
    # is recognised, so constant neighbours look like outliers and get clipped in the first fits
    # (simulated scenario; the early clips are checked so that the test exercises the undo).  After
    # its rejection they agree with the solution again and must all come back.
    night = simulate_night(606, n_exp=150, n_comp=4, variable_comp=1, variable_amp=0.4, missing=0.05)
    first = night.solve(settings=EnsembleSettings(max_iter=1))
    constant = np.isin(night.star, [0, 2, 3])
    assert np.any(first.clipped & constant)
    sol = night.solve()
    assert sol.converged
    assert sol.star_status[:4] == ("kept", "variable", "kept", "kept")
    assert not sol.clipped.any()
    assert np.all(sol.used[constant])
    assert np.all(np.isfinite(sol.zero_point))


def test_random_nights_keep_the_invariants():
    # many small random configurations with wild points: no crash, consistent bookkeeping
    rng = np.random.default_rng(2024)
    for seed in range(40):
        n_comp = int(rng.integers(3, 10))
        kw = dict(n_exp=int(rng.integers(3, 120)), n_comp=n_comp, missing=float(rng.uniform(0, 0.5)))
        if rng.random() < 0.5:
            kw["variable_comp"] = int(rng.integers(0, n_comp))
        night = simulate_night(9000 + seed, **kw)
        mag = night.mag.copy()
        mag[rng.integers(0, mag.size, 2)] += rng.uniform(-1.0, 1.0, 2)
        sol = solve_ensemble(night.exposure, night.star, mag, night.mag_err, **_base_kwargs(night))
        comp = night.is_comparison[night.star]
        assert not np.any(sol.used & ~comp) and not np.any(sol.clipped & sol.used)
        assert np.all(np.isfinite(sol.zero_point) == (sol.n_comparisons > 0))
        assert np.all(sol.zero_point_err[sol.n_comparisons > 0] > 0)
        assert np.isfinite(sol.calibration_err) and sol.calibration_err >= 0
        assert set(sol.star_status) <= {"kept", "variable", "catalog_offset", "too_few_points", "not_comparison"}
        for f in sol.exposure_flags:
            assert set(filter(None, f.split(";"))) <= {"too_few_comparisons", "zero_point_error", "zero_point_jump"}
        assert np.count_nonzero(np.isin(sol.star_status, ["kept", "catalog_offset"])) >= 2
        json.dumps(sol.to_dict(), allow_nan=False)


def test_eclipse_like_comparison_is_rejected():
    # a comparison star that fades by 0.3 mag for 8% of the night: a run of outliers
    night = simulate_night(61, n_exp=250)
    ecl = (night.star == 4) & (night.time[night.exposure] > night.time[100]) & (
        night.time[night.exposure] < night.time[120])
    mag = night.mag.copy()
    mag[ecl] += 0.3
    sol = solve_ensemble(night.exposure, night.star, mag, night.mag_err, **_base_kwargs(night))
    assert sol.star_status[4] == "variable"
    assert [sol.star_status[i] for i in range(8) if i != 4] == ["kept"] * 7


def test_two_comparison_stars_cannot_tell_which_varies():
    night = simulate_night(71, n_exp=200, n_comp=2, variable_comp=1, variable_amp=0.1)
    sol = night.solve()
    assert sol.star_status[:2] == ("kept", "kept")
    assert any("cannot tell which" in w for w in sol.warnings)
    assert any("two comparison stars" in w for w in sol.to_dict()["warnings"])


def test_to_dict_is_json_safe_and_complete():
    night = simulate_night(81, n_exp=100, variable_comp=2, cloud=slice(40, 55))
    sol = night.solve()
    d = json.loads(json.dumps(sol.to_dict(), allow_nan=False))
    assert d["calibration_err"] == pytest.approx(sol.calibration_err)
    assert len(d["stars"]) == 10
    assert d["stars"][2]["status"] == "variable" and d["stars"][2]["reason"]
    assert d["stars"][8]["excess"] is not None  # diagnostic for the target too
    assert d["exposures"]["zero_point_jump"]["count"] == sum("zero_point_jump" in f for f in sol.exposure_flags)
    assert d["iterations"] == sol.iterations >= 2
    assert d["status_counts"]["variable"] == 1
    assert d["settings"]["clip_sigma"] == 5.0


def test_shift_invariance():
    # adding a constant to every instrumental magnitude changes only the zero points by that
    # constant (m_ij = M_i + z_j is degenerate in a common shift).
    night = simulate_night(91, n_exp=80)
    a = night.solve()
    b = solve_ensemble(night.exposure, night.star, night.mag + 3.21, night.mag_err, **_base_kwargs(night))
    assert np.allclose(b.zero_point - a.zero_point, 3.21, atol=1e-9)
    assert np.allclose(b.mag, a.mag, atol=1e-9)
    assert np.allclose(b.zero_point_err, a.zero_point_err, atol=1e-12)
    # and the order of the measurements does not matter
    perm = np.random.default_rng(0).permutation(night.mag.size)
    c = solve_ensemble(night.exposure[perm], night.star[perm], night.mag[perm], night.mag_err[perm],
                       **_base_kwargs(night))
    assert np.allclose(c.zero_point, a.zero_point, atol=1e-9)
    assert np.allclose(c.mag, a.mag[perm], atol=1e-9)


# --------------------------------------------------------------------------- errors


def _base_kwargs(night: Night) -> dict:
    return dict(n_exposures=night.n_exposures, is_comparison=night.is_comparison,
                catalog_mag=night.catalog_mag, catalog_err=night.catalog_err,
                time=night.time, airmass=night.airmass)


def test_bad_input_raises_readable_errors():
    night = simulate_night(3, n_exp=20)
    kw = _base_kwargs(night)
    with pytest.raises(ReductionError, match="mag_err must have one value per measurement"):
        solve_ensemble(night.exposure, night.star, night.mag, night.mag_err[:-1], **kw)
    with pytest.raises(ReductionError, match="exposure has .* entries but mag has"):
        solve_ensemble(night.exposure[:-1], night.star, night.mag, night.mag_err, **kw)
    with pytest.raises(ReductionError, match="time must have one value per exposure"):
        solve_ensemble(night.exposure, night.star, night.mag, night.mag_err, **{**kw, "time": night.time[:5]})
    with pytest.raises(ReductionError, match="catalog_mag must have one value per star"):
        solve_ensemble(night.exposure, night.star, night.mag, night.mag_err,
                       **{**kw, "catalog_mag": night.catalog_mag[:3]})
    with pytest.raises(ReductionError, match="star index 10 is out of range"):
        bad = night.star.copy()
        bad[0] = 10
        solve_ensemble(night.exposure, bad, night.mag, night.mag_err, **kw)
    with pytest.raises(ReductionError, match="no comparison star has a catalogue magnitude"):
        cat = night.catalog_mag.copy()
        cat[:8] = np.nan
        solve_ensemble(night.exposure, night.star, night.mag, night.mag_err, **{**kw, "catalog_mag": cat})
    with pytest.raises(ReductionError, match="fewer than 2 comparison stars have usable data"):
        good = night.star != 1
        good &= ~np.isin(night.star, [2, 3, 4, 5, 6, 7])
        solve_ensemble(night.exposure, night.star, night.mag, night.mag_err, good=good, **kw)
    with pytest.raises(ReductionError, match="measured more than once in exposure"):
        solve_ensemble(np.r_[night.exposure, night.exposure[0]], np.r_[night.star, night.star[0]],
                       np.r_[night.mag, night.mag[0]], np.r_[night.mag_err, night.mag_err[0]], **kw)
    with pytest.raises(ReductionError, match="integer indices"):
        solve_ensemble(night.exposure + 0.5, night.star, night.mag, night.mag_err, **kw)


def test_settings_are_validated():
    from varstar.errors import InputError

    with pytest.raises(InputError, match="clip_sigma"):
        EnsembleSettings(clip_sigma=-1.0)
    with pytest.raises(InputError, match="variable_p_value"):
        EnsembleSettings(variable_p_value=2.0)
    with pytest.raises(InputError, match="min_comparisons"):
        EnsembleSettings(min_comparisons=0)


# --------------------------------------------------------------------------- colour extinction


def _with_colour_extinction(night: Night, k2: float, seed: int) -> tuple[Night, np.ndarray]:
    """Add second-order extinction k2 * X * (B-V) to every star (Henden & Kaitchuck 1982)."""
    rng = np.random.default_rng(seed)
    n_star = night.is_comparison.size
    colour = rng.uniform(0.3, 1.5, n_star)
    mag = night.mag + k2 * night.airmass[night.exposure] * colour[night.star]
    return Night(**{**night.__dict__, "mag": mag}), colour


def test_colour_step_equals_dense_lstsq_with_the_extra_column():
    # Frisch-Waugh-Lovell: one step from the M+z residuals gives the joint solution of
    # m_ij = M_i + z_j + k D_ij exactly (checked against numpy's dense least squares).
    from varstar.ensemble.linear import colour_step as _colour_step

    rng = np.random.default_rng(5)
    n_exp, k = 30, 5
    W = rng.uniform(0.5, 2.0, (n_exp, k)) * (rng.random((n_exp, k)) > 0.15)
    U = W > 0
    X = 1.0 + rng.random(n_exp)
    c = rng.uniform(-0.6, 0.6, k)
    D = X[:, None] * c[None, :]
    Y = rng.normal(0, 0.02, (n_exp, k)) + rng.normal(0, 1, k)[None, :] + rng.normal(0, 0.3, n_exp)[:, None] - 0.05 * D
    fit = _solve_weighted(W, np.where(U, Y, 0.0))
    R = np.where(U, Y - fit.M - fit.z[:, None], 0.0)
    kappa, kappa_err = _colour_step(W, U, D, R)
    jj, ii = np.nonzero(U)
    A = np.zeros((jj.size, k + n_exp + 1))
    A[np.arange(jj.size), ii] = 1.0
    A[np.arange(jj.size), k + jj] = 1.0
    A[:, -1] = D[jj, ii]
    sw = np.sqrt(W[jj, ii])
    A_w = np.vstack([A * sw[:, None], np.r_[np.ones(k), np.zeros(n_exp + 1)]])  # gauge: sum M = 0
    b_w = np.r_[Y[jj, ii] * sw, 0.0]
    sol, *_ = np.linalg.lstsq(A_w, b_w, rcond=None)
    assert kappa == pytest.approx(sol[-1], abs=1e-10)
    cov = np.linalg.pinv(A_w.T @ A_w)
    assert kappa_err == pytest.approx(math.sqrt(cov[-1, -1]), rel=1e-6)


def test_colour_extinction_recovered_with_honest_errors_and_no_false_rejection():
    # Simulated truth: k'' = -0.04 mag per airmass per mag of colour, a typical B-band value
    # (common practice).  The fitted coefficient scatters about the truth with unit pulls, and
    # no constant comparison star is called variable even though the red ones drift by
    # several 0.01 mag against the blue ones over the night.
    k2 = -0.04
    pulls, rejected_without = [], 0
    for seed in range(30):
        night, colour = _with_colour_extinction(simulate_night(400 + seed, n_exp=200), k2, seed)
        sol = night.solve(colour=colour)
        assert sol.star_status[: night.is_comparison.sum()].count("variable") == 0
        pulls.append((sol.colour_extinction - k2) / sol.colour_extinction_err)
        assert sol.colour_reference == pytest.approx(colour[night.is_comparison].mean())
        rejected_without += night.solve().star_status.count("variable")
    pulls = np.array(pulls)
    assert abs(pulls.mean()) < 3 / math.sqrt(pulls.size)
    assert 0.7 < pulls.std(ddof=1) < 1.35
    # Without the colour term the same nights do reject constant red/blue comparison stars.
    assert rejected_without > 0


def test_colour_extinction_not_fitted_without_colour_spread():
    night = simulate_night(9)
    sol = night.solve(colour=np.full(night.is_comparison.size, 0.6))
    assert math.isnan(sol.colour_extinction) and math.isnan(sol.colour_reference)
    assert sol.to_dict()["colour_extinction"] is None
