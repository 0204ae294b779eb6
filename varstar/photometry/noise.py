"""Instrumental magnitudes and their errors from the CCD equation.

Merline & Howell (1995, Experimental Astronomy 6, 163), in electrons::

    sigma^2 = N* + n_pix (1 + n_pix / n_B) (N_S + N_D + N_R^2)

``N*`` the star's electrons in the aperture, ``n_pix`` the aperture's area in
pixels, ``n_B`` the number of background pixels, ``N_S`` the sky and ``N_D``
the dark electrons per pixel, ``N_R`` the read noise (e- per pixel).  The
factor ``n_pix / n_B`` is the background estimate's own error.  The
digitisation term of the full equation (gain^2 sigma_f^2, sigma_f ~ 0.289 ADU)
is left out, as in the form most often quoted; it matters only for gains of
many electrons per ADU at low sky.
"""

from __future__ import annotations

import numpy as np

#: 2.5 / ln 10: d(mag) = MAG_PER_LN * d(flux) / flux.
MAG_PER_LN = 2.5 / np.log(10.0)


def ccd_variance_e(source_e: np.ndarray, n_pix: np.ndarray, n_sky: np.ndarray, sky_e: np.ndarray,
                   dark_e: np.ndarray | float, read_noise_e: float) -> np.ndarray:
    """Variance (e-^2) of a star's aperture sum: the CCD equation of Merline & Howell (1995).

    Parameters
    ----------
    source_e
        The star's electrons in the aperture (net of background); a negative
        value counts as zero in the Poisson term.
    n_pix
        Aperture area (pixels).
    n_sky
        Number of background pixels the sky level was estimated from.
    sky_e, dark_e
        Sky and dark electrons per pixel (a negative sky counts as zero).
    read_noise_e
        Read noise (e- per pixel).
    """
    source_e = np.clip(np.asarray(source_e, float), 0.0, None)
    per_pixel = np.clip(np.asarray(sky_e, float), 0.0, None) + np.asarray(dark_e, float) + float(read_noise_e) ** 2
    n_pix = np.asarray(n_pix, float)
    return source_e + n_pix * (1.0 + n_pix / np.asarray(n_sky, float)) * per_pixel


def instrumental_magnitude(counts_adu: np.ndarray, exptime_s: float) -> np.ndarray:
    """-2.5 log10(counts / exposure time); NaN where the counts are not positive."""
    counts = np.asarray(counts_adu, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(counts > 0, -2.5 * np.log10(counts / float(exptime_s)), np.nan)


def magnitude_error(source_e: np.ndarray, variance_e: np.ndarray) -> np.ndarray:
    """1-sigma magnitude error, 2.5 / ln 10 x sigma / N* (NaN where N* is not positive)."""
    source_e = np.asarray(source_e, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(source_e > 0, MAG_PER_LN * np.sqrt(variance_e) / source_e, np.nan)
