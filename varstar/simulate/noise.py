"""The photometric signal and its noise: magnitudes and fluxes, the CCD equation,
scintillation and saturation.

Published equations only, each checked in ``tests/simulate/test_simulate.py``: the
magnitude scale (Pogson 1856), the CCD equation (Merline & Howell 1995),
scintillation (Young 1967) and the flux a clipped Gaussian star image loses.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "POGSON_K",
    "ccd_noise_e",
    "ccd_snr",
    "flux_to_mag",
    "mag_err_from_snr",
    "mag_to_flux",
    "saturation_loss",
    "scintillation_sigma",
]

#: 2.5 / ln(10): sigma_m = POGSON_K * sigma_F / F (Pogson 1856 magnitude scale).
POGSON_K = 2.5 / math.log(10.0)


def mag_to_flux(mag: np.ndarray | float, zero_point: float = 0.0) -> np.ndarray:
    """Flux from magnitude, Pogson (1856): F = 10^(-0.4 (m - zp)).

    ``zero_point`` is the magnitude of unit flux.
    """
    return np.power(10.0, -0.4 * (np.asarray(mag, dtype=float) - zero_point))


def flux_to_mag(flux: np.ndarray | float, zero_point: float = 0.0) -> np.ndarray:
    """Magnitude from flux, Pogson (1856): m = zp - 2.5 log10(F).  NaN for F <= 0."""
    f = np.asarray(flux, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(f > 0, zero_point - 2.5 * np.log10(np.where(f > 0, f, 1.0)), np.nan)


def mag_err_from_snr(snr: np.ndarray | float) -> np.ndarray:
    """Magnitude error from signal-to-noise: sigma_m = (2.5 / ln 10) / SNR ~ 1.0857 / SNR."""
    return POGSON_K / np.asarray(snr, dtype=float)


def ccd_noise_e(
    n_star_e: np.ndarray | float,
    n_pix: float,
    n_background_px: float,
    sky_e_per_px: np.ndarray | float,
    dark_e_per_px: np.ndarray | float,
    read_noise_e: float,
) -> np.ndarray:
    """Noise (electrons) of an aperture measurement, the CCD equation's denominator.

    Merline & Howell (1995): sigma_N = sqrt(N* + n_pix (1 + n_pix/n_B) (N_S + N_D + N_R^2)),
    with ``N*`` the star's electrons, ``N_S`` / ``N_D`` the sky / dark electrons
    per pixel, ``N_R`` the read noise per pixel and ``n_B`` the number of pixels
    the background was estimated from.
    """
    n = np.clip(np.asarray(n_star_e, dtype=float), 0.0, None)
    per_px = np.asarray(sky_e_per_px, dtype=float) + np.asarray(dark_e_per_px, dtype=float) + read_noise_e**2
    return np.sqrt(n + n_pix * (1.0 + n_pix / n_background_px) * per_px)


def ccd_snr(
    n_star_e: np.ndarray | float,
    n_pix: float,
    n_background_px: float,
    sky_e_per_px: np.ndarray | float,
    dark_e_per_px: np.ndarray | float,
    read_noise_e: float,
) -> np.ndarray:
    """Signal-to-noise ratio by the CCD equation (Merline & Howell 1995); see :func:`ccd_noise_e`."""
    n = np.asarray(n_star_e, dtype=float)
    return n / ccd_noise_e(n, n_pix, n_background_px, sky_e_per_px, dark_e_per_px, read_noise_e)


def scintillation_sigma(
    aperture_cm: float,
    airmass: np.ndarray | float,
    elevation_m: float,
    exptime_s: np.ndarray | float,
    factor: float = 1.0,
) -> np.ndarray:
    """Relative flux noise from scintillation, Young (1967).

    sigma_F / F = factor * 0.09 D^(-2/3) X^(7/4) exp(-h / 8000 m) (2 t)^(-1/2), with D
    the aperture in cm, X the airmass, h the site altitude in m and t the exposure
    in s.  ``factor`` = 1 is Young's estimate; Osborn et al. (2015) find real sites
    often ~1.5 times noisier.
    """
    x = np.asarray(airmass, dtype=float)
    t = np.asarray(exptime_s, dtype=float)
    return factor * 0.09 * aperture_cm ** (-2.0 / 3.0) * x**1.75 * math.exp(-elevation_m / 8000.0) / np.sqrt(2.0 * t)


def saturation_loss(peak_e: np.ndarray, level_e: np.ndarray | float) -> np.ndarray:
    """Fraction of a Gaussian star image's flux lost when pixels clip at ``level_e``.

    For a circular Gaussian of peak P clipped at L < P the flux above L is
    2 pi s^2 [P - L - L ln(P/L)], a fraction 1 - (L/P)(1 + ln(P/L)) of the total
    2 pi s^2 P (direct integration).  Zero where P <= L.
    """
    p = np.asarray(peak_e, dtype=float)
    lvl = np.broadcast_to(np.asarray(level_e, dtype=float), p.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(p > lvl, lvl / p, 1.0)
        return np.where(p > lvl, 1.0 - r * (1.0 - np.log(r)), 0.0)
