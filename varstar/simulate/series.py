"""The simulation of a scenario's nights, in named steps.

:func:`simulate` runs, in order: the exposures (:func:`.schedule.plan_exposures`),
the atmosphere and instrument at each exposure (:func:`draw_atmosphere`), passing
clouds (:func:`draw_clouds`), the stars' true magnitudes (:func:`true_magnitudes`),
the expected electrons and their noise (:func:`expected_signal`), the measurement
with its noise and defects (:func:`measure`), and the tables (:func:`night_tables`,
:func:`truth_table`).  Each random step has its own stream (schedule, atmosphere,
clouds, noise, defects), all spawned from one seed, so the same seed gives the
same tables bit for bit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .info import series_info
from .noise import (
    POGSON_K,
    ccd_noise_e,
    ccd_snr,
    flux_to_mag,
    mag_err_from_snr,
    mag_to_flux,
    saturation_loss,
    scintillation_sigma,
)
from .scenario import Scenario, SimulatedSeries, Telescope
from .schedule import Exposures, plan_exposures

__all__ = [
    "Atmosphere",
    "Clouds",
    "Readout",
    "Signal",
    "draw_atmosphere",
    "draw_clouds",
    "expected_signal",
    "measure",
    "night_tables",
    "simulate",
    "true_magnitudes",
    "truth_table",
]

_STREAM_NAMES = ("schedule", "atmosphere", "clouds", "noise", "defects")


def _generators(rng_or_seed: int | np.random.Generator | None, default_seed: int) -> dict[str, np.random.Generator]:
    """One independent Generator per random step (:data:`_STREAM_NAMES`), from a seed or a Generator."""
    if isinstance(rng_or_seed, np.random.Generator):
        seeds = rng_or_seed.integers(0, 2**63, size=len(_STREAM_NAMES))
        children = [np.random.default_rng(int(s)) for s in seeds]
    else:
        seed = default_seed if rng_or_seed is None else int(rng_or_seed)
        children = [np.random.default_rng(s) for s in np.random.SeedSequence([seed, 2]).spawn(len(_STREAM_NAMES))]
    return dict(zip(_STREAM_NAMES, children))


def _smooth_noise(rng: np.random.Generator, n: int, width: float) -> np.ndarray:
    """Unit-variance Gaussian noise correlated over ~``width`` samples (Gaussian-filtered white noise)."""
    from scipy.ndimage import gaussian_filter1d

    if n == 0:
        return np.zeros(0)
    w = gaussian_filter1d(rng.standard_normal(n + 8 * int(width) + 8), width, mode="wrap")[: n]
    sd = w.std()
    return (w - w.mean()) / sd if sd > 0 else w


# ----------------------------------------------------------------------------
# Atmosphere and instrument
# ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Atmosphere:
    """The sky and the instrument at each exposure.

    ``k1_night`` (night, band) and ``zp_night`` (night) are the drawn nightly
    extinction and zero-point offset; ``zero_point`` (mag, per exposure) is the
    instrumental zero point with its nightly offsets, drift and transparency
    changes; ``k1`` the first-order extinction and ``fwhm_arcsec`` the seeing of
    each exposure.
    """

    k1_night: np.ndarray
    zp_night: np.ndarray
    zero_point: np.ndarray
    k1: np.ndarray
    fwhm_arcsec: np.ndarray


def draw_atmosphere(scenario: Scenario, exp: Exposures, rng: np.random.Generator) -> Atmosphere:
    """Nightly extinction and zero points, slow drifts, transparency and seeing, drawn from ``rng``."""
    ga = rng
    n_nights = len(scenario.nights)
    n_bands = len(scenario.bands)
    night_idx, band_idx = exp.night_idx, exp.band_idx
    zp_mag = np.array([b.zero_point_mag for b in scenario.bands])
    k1_night = np.array([[b.k1 + b.k1_night_sigma * z for b, z in zip(scenario.bands, ga.standard_normal(n_bands))]
                         for _ in range(n_nights)])
    zp_night = scenario.zp_night_sigma_mag * ga.standard_normal(n_nights)
    zp_band_night = 0.5 * scenario.zp_night_sigma_mag * ga.standard_normal((n_nights, n_bands))
    drift = scenario.zp_drift_sigma_mag_per_h * ga.standard_normal(n_nights)
    t_mid = exp.session_mid
    transparency = ga.exponential(scenario.transparency_jitter_mag, exp.n) if scenario.transparency_jitter_mag > 0 else np.zeros(exp.n)
    zero_point = (-zp_mag[band_idx] + zp_night[night_idx] + zp_band_night[night_idx, band_idx]
                  + drift[night_idx] * (exp.jd - t_mid[night_idx]) * 24.0 + transparency)
    seeing0 = np.array([p.seeing_arcsec for p in scenario.nights])
    wobble = np.concatenate([_smooth_noise(ga, int((night_idx == i).sum()), 6.0) for i in range(n_nights)])
    fwhm_arcsec = seeing0[night_idx] * exp.airmass**scenario.seeing_airmass_exponent * np.exp(scenario.seeing_jitter * wobble)
    return Atmosphere(k1_night=k1_night, zp_night=zp_night, zero_point=zero_point,
                      k1=k1_night[night_idx, band_idx], fwhm_arcsec=fwhm_arcsec)


@dataclass(frozen=True)
class Clouds:
    """Grey cloud extinction (mag) at each exposure, and which exposures fall in a thick moment."""

    cloud_mag: np.ndarray
    thick: np.ndarray


def draw_clouds(scenario: Scenario, exp: Exposures, rng: np.random.Generator) -> Clouds:
    """The scenario's cloud passages at each exposure; each passage's texture is drawn from ``rng``."""
    gc = rng
    jd = exp.jd
    cloud_mag = np.zeros(exp.n)
    thick = np.zeros(exp.n, dtype=bool)
    for c in scenario.clouds:
        t0 = exp.first_jd[c.night] + c.start_after_h / 24.0
        dur = c.duration_h / 24.0
        u = (jd - t0) / dur
        inside = (exp.night_idx == c.night) & (u >= 0) & (u <= 1)
        freq = gc.uniform(2.0, 7.0, 4)
        phase = gc.uniform(0.0, 2 * np.pi, 4)
        texture = np.mean(np.sin(2 * np.pi * freq * u[:, None] + phase), axis=1)  # in [-1, 1]
        env = np.sin(np.pi * np.clip(u, 0, 1))
        prof = c.floor_mag + (c.peak_mag - c.floor_mag) * env * (0.8 + 0.2 * texture)
        prof = np.clip(prof, c.floor_mag, c.peak_mag)
        if c.thick_mag is not None:
            tk = inside & (np.abs(jd - (t0 + 0.6 * dur)) <= 0.5 * c.thick_minutes / 1440.0)
            prof = np.where(tk, c.thick_mag, prof)
            thick |= tk
        cloud_mag = np.where(inside, np.maximum(cloud_mag, prof), cloud_mag)
    return Clouds(cloud_mag=cloud_mag, thick=thick)


# ----------------------------------------------------------------------------
# Stars and the signal they give
# ----------------------------------------------------------------------------


def true_magnitudes(scenario: Scenario, exp: Exposures) -> tuple[np.ndarray, np.ndarray]:
    """True standard magnitude in each exposure's band and true B-V, both (exposure, star)."""
    band_names = [b.name for b in scenario.bands]
    n_star = len(scenario.stars)
    v_true = np.empty((exp.n, n_star))
    b_true = np.empty((exp.n, n_star))
    for i, s in enumerate(scenario.stars):
        dv = s.variability.delta_mag(exp.bjd, "V") if s.variability is not None and "V" in band_names else 0.0
        db = s.variability.delta_mag(exp.bjd, "B") if s.variability is not None and "B" in band_names else 0.0
        v_true[:, i] = s.V + dv
        b_true[:, i] = s.V + s.BV + db
    colour_true = b_true - v_true
    is_b = (np.array(band_names)[exp.band_idx] == "B")[:, None]
    mag_true = np.where(is_b, b_true, v_true)
    return mag_true, colour_true


@dataclass(frozen=True)
class Signal:
    """Expected (noise-free) instrumental magnitudes and electrons, and the noise they carry.

    (exposure, star) arrays: ``mag_inst_true``, ``n_star_e``, ``sigma_ccd_e``
    (CCD-equation noise, electrons), ``sig_scint`` (relative scintillation
    noise).  (exposure, 1) arrays: ``exptime`` (s), ``sky_px`` and ``dark_px``
    (electrons per pixel).
    """

    mag_inst_true: np.ndarray
    n_star_e: np.ndarray
    exptime: np.ndarray
    sky_px: np.ndarray
    dark_px: np.ndarray
    sigma_ccd_e: np.ndarray
    sig_scint: np.ndarray


def expected_signal(scenario: Scenario, exp: Exposures, atm: Atmosphere, clouds: Clouds,
                    mag_true: np.ndarray, colour_true: np.ndarray) -> Signal:
    """Instrumental magnitudes by the model of the package docstring, electrons, sky, dark and noise."""
    tel = scenario.telescope
    band_idx, night_idx, airmass, exptime = exp.band_idx, exp.night_idx, exp.airmass, exp.exptime
    eps = np.array([b.colour_term for b in scenario.bands])
    k2 = np.array([b.k2 for b in scenario.bands])
    zp_mag = np.array([b.zero_point_mag for b in scenario.bands])
    sky_mag = np.array([b.sky_mag_arcsec2 for b in scenario.bands])
    sky_offset = np.array([p.sky_offset_mag for p in scenario.nights])
    X = airmass[:, None]
    mag_inst_true = (mag_true + eps[band_idx][:, None] * colour_true + atm.k1[:, None] * X
                     + k2[band_idx][:, None] * X * colour_true + atm.zero_point[:, None] + clouds.cloud_mag[:, None])
    t = exptime[:, None]
    n_star_e = t * mag_to_flux(mag_inst_true)
    # Sky: surface brightness grows roughly as the airmass (thin emitting layer; common practice).
    sky_rate_px = mag_to_flux(sky_mag[band_idx] + sky_offset[night_idx], zp_mag[band_idx]) * tel.pixel_scale_arcsec**2 * airmass
    sky_px = (exptime * sky_rate_px)[:, None]
    dark_px = tel.dark_e_per_s * t
    sigma_ccd_e = ccd_noise_e(n_star_e, tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e)
    sig_scint = scintillation_sigma(tel.aperture_cm, X, scenario.elevation_m, t, scenario.scintillation_factor)
    sig_scint = np.broadcast_to(sig_scint, n_star_e.shape)
    return Signal(mag_inst_true=mag_inst_true, n_star_e=n_star_e, exptime=t, sky_px=sky_px, dark_px=dark_px,
                  sigma_ccd_e=sigma_ccd_e, sig_scint=sig_scint)


# ----------------------------------------------------------------------------
# The measurement: noise and defects
# ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Readout:
    """What the photometry reports, (exposure, star) arrays.

    ``mag`` / ``mag_err`` (instrumental magnitude and its CCD-equation error),
    ``flag`` (0 good, 1 saturated, 2 cosmic ray), ``status`` (``ok``,
    ``saturated``, ``cosmic_ray``, ``missing``, ``lost``), ``present`` (the row
    is in the measurement table) and ``peak_e`` (peak pixel, electrons).
    """

    mag: np.ndarray
    mag_err: np.ndarray
    flag: np.ndarray
    status: np.ndarray
    present: np.ndarray
    peak_e: np.ndarray


def _reported_snr(tel: Telescope, signal: Signal, n_meas: np.ndarray) -> np.ndarray:
    """Signal-to-noise the photometry reports: the CCD equation on the measured electrons."""
    return ccd_snr(np.clip(n_meas, 1e-9, None), tel.n_pix, tel.n_background_px, signal.sky_px, signal.dark_px,
                   tel.read_noise_e)


def _saturation(tel: Telescope, fwhm_arcsec: np.ndarray, sky_px: np.ndarray,
                n_scint: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Peak pixel (electrons, sky included) of a Gaussian image and the fraction of flux lost to clipping."""
    sigma_px = (fwhm_arcsec / tel.pixel_scale_arcsec / (2.0 * math.sqrt(2.0 * math.log(2.0))))[:, None]
    peak = n_scint / (2.0 * np.pi * sigma_px**2) + sky_px
    level = tel.saturation_e - sky_px
    return peak, saturation_loss(peak - sky_px, level)


def _cosmic_rays(eligible_mask: np.ndarray, n_cosmic: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices of ``n_cosmic`` hit measurements (among ``eligible_mask``) and the electrons each gains."""
    eligible = np.flatnonzero(eligible_mask.ravel())
    n_cr = min(n_cosmic, eligible.size)
    cr_rows = np.sort(rng.choice(eligible, size=n_cr, replace=False)) if n_cr else np.zeros(0, dtype=int)
    cr_e = np.zeros(eligible_mask.size)
    cr_e[cr_rows] = rng.uniform(800.0, 6000.0, n_cr)
    return cr_rows, cr_e.reshape(eligible_mask.shape)


def _status(flag: np.ndarray, missing: np.ndarray, detected: np.ndarray) -> np.ndarray:
    """Word for each measurement's fate (later rules win: lost over missing over the flags)."""
    status = np.full(flag.shape, "ok", dtype=object)
    status[flag == 1] = "saturated"
    status[flag == 2] = "cosmic_ray"
    status[missing] = "missing"
    status[~detected] = "lost"
    return status


def measure(scenario: Scenario, signal: Signal, fwhm_arcsec: np.ndarray,
            noise_rng: np.random.Generator, defects_rng: np.random.Generator) -> Readout:
    """Photon, sky, read and scintillation noise (from ``noise_rng``), then saturation,
    detection, cosmic rays and random losses (from ``defects_rng``), and what is reported."""
    tel = scenario.telescope
    z = noise_rng.standard_normal((2, *signal.n_star_e.shape))
    n_scint = signal.n_star_e * (1.0 + signal.sig_scint * z[0])
    n_meas = n_scint + signal.sigma_ccd_e * z[1]

    peak, lost_frac = _saturation(tel, fwhm_arcsec, signal.sky_px, n_scint)
    saturated = lost_frac > 0
    n_meas = np.where(saturated, n_meas - lost_frac * n_scint, n_meas)
    flag = np.where(saturated, 1, 0)

    detected = (n_meas > 0) & (_reported_snr(tel, signal, n_meas) >= scenario.detection_snr)
    cr_rows, cr_e = _cosmic_rays(detected & ~saturated, scenario.n_cosmic, defects_rng)
    n_meas = n_meas + cr_e
    flag = flag.ravel()
    flag[cr_rows] = 2
    flag = flag.reshape(n_meas.shape)
    missing = (defects_rng.random(n_meas.shape) < scenario.missing_fraction) & detected & (flag == 0)

    return Readout(
        mag=flux_to_mag(n_meas / signal.exptime),
        mag_err=mag_err_from_snr(_reported_snr(tel, signal, n_meas)),
        flag=flag,
        status=_status(flag, missing, detected),
        present=detected & ~missing,
        peak_e=peak,
    )


# ----------------------------------------------------------------------------
# Tables
# ----------------------------------------------------------------------------


def night_tables(scenario: Scenario, exp: Exposures, readout: Readout) -> list[pd.DataFrame]:
    """One long-form measurement table per night: the rows the photometry reports."""
    n_star = len(scenario.stars)
    star_ids = np.array([s.id for s in scenario.stars], dtype=object)
    bands_arr = np.array([b.name for b in scenario.bands], dtype=object)
    rep = lambda a: np.repeat(a, n_star)  # noqa: E731 - per-exposure -> per-row
    rows = pd.DataFrame(
        {
            "jd": rep(exp.jd),
            "band": rep(bands_arr[exp.band_idx]),
            "star": np.tile(star_ids, exp.n),
            "mag": readout.mag.ravel(),
            "mag_err": readout.mag_err.ravel(),
            "airmass": rep(exp.airmass),
            "exptime": rep(exp.exptime),
            "flag": readout.flag.ravel().astype(np.int64),
            "frame": rep(exp.frames),
        }
    )
    pres = readout.present.ravel()
    row_night = rep(exp.night_idx)
    return [rows[pres & (row_night == i)].reset_index(drop=True) for i in range(len(scenario.nights))]


def truth_table(scenario: Scenario, exp: Exposures, atm: Atmosphere, clouds: Clouds, mag_true: np.ndarray,
                colour_true: np.ndarray, signal: Signal, readout: Readout) -> pd.DataFrame:
    """One row per exposure per star (measured or not): the truth and the model's intermediate quantities."""
    n_star = len(scenario.stars)
    star_ids = np.array([s.id for s in scenario.stars], dtype=object)
    roles = np.array([s.role for s in scenario.stars], dtype=object)
    bands_arr = np.array([b.name for b in scenario.bands], dtype=object)
    rep = lambda a: np.repeat(a, n_star)  # noqa: E731 - per-exposure -> per-row
    til = lambda a: np.tile(a, exp.n)  # noqa: E731 - per-star -> per-row
    return pd.DataFrame(
        {
            "night": rep(np.array(exp.evenings, dtype=object)[exp.night_idx]),
            "frame": rep(exp.frames),
            "jd": rep(exp.jd),
            "bjd_tdb": rep(exp.bjd),
            "band": rep(bands_arr[exp.band_idx]),
            "star": til(star_ids),
            "role": til(roles),
            "mag_true": mag_true.ravel(),
            "colour_true": colour_true.ravel(),
            "airmass": rep(exp.airmass),
            "altitude_deg": rep(exp.altitude),
            "exptime": rep(exp.exptime),
            "cloud": rep(clouds.cloud_mag > 0),
            "cloud_mag": rep(clouds.cloud_mag),
            "k1": rep(atm.k1),
            "zero_point": rep(atm.zero_point),
            "fwhm_arcsec": rep(atm.fwhm_arcsec),
            "peak_e": readout.peak_e.ravel(),
            "mag_inst_true": signal.mag_inst_true.ravel(),
            "n_star_e": signal.n_star_e.ravel(),
            "sigma_ccd_mag": (POGSON_K * signal.sigma_ccd_e / signal.n_star_e).ravel(),
            "sigma_scint_mag": (POGSON_K * signal.sig_scint).ravel(),
            "status": readout.status.ravel(),
        }
    )


# ----------------------------------------------------------------------------
# The whole simulation
# ----------------------------------------------------------------------------


def simulate(scenario: Scenario, rng_or_seed: int | np.random.Generator | None = None) -> SimulatedSeries:
    """Simulate the scenario's nights of interleaved B/V differential photometry.

    Parameters
    ----------
    scenario
        The field, site, stars, instrument and nights (see :class:`Scenario`).
    rng_or_seed
        Seed or numpy Generator for every random step after the catalogue
        (which :func:`catalogue` draws from ``scenario.seed``).  ``None`` uses
        ``scenario.seed``.

    Returns
    -------
    SimulatedSeries
        Measurement tables per night, the truth and a JSON-safe info dict.
    """
    scenario.validate()
    g = _generators(rng_or_seed, scenario.seed)
    exp = plan_exposures(scenario, g["schedule"])
    atm = draw_atmosphere(scenario, exp, g["atmosphere"])
    clouds = draw_clouds(scenario, exp, g["clouds"])
    mag_true, colour_true = true_magnitudes(scenario, exp)
    signal = expected_signal(scenario, exp, atm, clouds, mag_true, colour_true)
    readout = measure(scenario, signal, atm.fwhm_arcsec, g["noise"], g["defects"])
    nights = night_tables(scenario, exp, readout)
    truth = truth_table(scenario, exp, atm, clouds, mag_true, colour_true, signal, readout)
    info = series_info(scenario, truth, nights, exp.evenings, atm.k1_night, atm.zp_night, clouds.thick)
    return SimulatedSeries(nights=nights, truth=truth, info=info, evenings=exp.evenings)
