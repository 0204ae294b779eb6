"""Shared-period multi-band periodogram.

VanderPlas & Ivezic (2015, ApJ 812, 18) fit all bands with one trial frequency.
This is their flavour without a shared base model: every band ``b`` has its own
mean and its own ``nterms`` Fourier amplitudes and phases, only the frequency
is common.  With ``chi2_ref,b`` the weighted scatter of band ``b`` about its own
weighted mean and ``chi2_b(f)`` the residual of its harmonic fit at ``f``::

    power(f) = sum_b [chi2_ref,b - chi2_b(f)] / sum_b chi2_ref,b

Each band's chi-square reduction is the generalised Lomb-Scargle one of
:mod:`varstar.period.gls`, so the fast (non-uniform FFT) path applies unchanged.
The power is in [0, 1]; bands with many precise points weigh most, as their
chi-square does.
"""

from __future__ import annotations

import numpy as np

from varstar.errors import InputError
from varstar.period.gls import (
    check_nterms,
    check_frequencies,
    prepare_series,
    reduction_prepared,
    resolve_method,
)


def multiband_power(
    t: np.ndarray,
    y: np.ndarray,
    dy: np.ndarray | float,
    band: np.ndarray,
    freq: np.ndarray,
    *,
    nterms: int = 1,
    method: str = "auto",
) -> np.ndarray:
    """Multi-band generalised Lomb-Scargle power with one shared frequency.

    Parameters
    ----------
    t : array_like, shape (N,)
        Times in days of all measurements of all bands (N >= 12).
    y : array_like, shape (N,) or (S, N)
        Values (e.g. magnitudes); ``S`` series sharing ``t`` and ``band``.
    dy : float or array_like, broadcastable to ``y``
        One-sigma uncertainties (> 0).
    band : array_like, shape (N,)
        Band label of each measurement (any comparable labels, e.g. "B", "V").
        Each band needs at least ``2 nterms + 2`` measurements.
    freq : array_like, shape (M,)
        Trial frequencies in cycles/day.
    nterms : int, optional
        Harmonics per band (default 1).
    method : {"auto", "exact", "fast"}, optional
        As in :func:`varstar.period.gls.gls_power`.

    Returns
    -------
    numpy.ndarray, shape (M,) or (S, M)
        ``(sum_b chi2_ref,b - sum_b chi2_b(f)) / sum_b chi2_ref,b``.

    Raises
    ------
    InputError
        On invalid input, a band with too few measurements, or data with no
        scatter about the band means.
    """
    nterms = check_nterms(nterms)
    t, y2, dy2, single = prepare_series(t, y, dy, nterms=nterms)
    freq = check_frequencies(freq)
    band = np.asarray(band)
    if band.shape != t.shape:
        raise InputError(f"band must give one label per measurement: shape {band.shape}, expected {t.shape}")
    labels, index, counts = np.unique(band, return_inverse=True, return_counts=True)
    need = 2 * nterms + 2
    if np.any(counts < need):
        few = [f"{labels[i]!s} ({counts[i]})" for i in np.flatnonzero(counts < need)]
        raise InputError(
            f"band(s) {', '.join(few)} have fewer than {need} measurements, too few for a "
            f"{nterms}-harmonic fit of their own; drop them or use fewer harmonics"
        )
    kind, spacing = resolve_method(method, t.size, freq)
    dchi2 = np.zeros((y2.shape[0], freq.size))
    chi2_ref = np.zeros(y2.shape[0])
    for b in range(labels.size):
        sel = index == b
        part, ref = reduction_prepared(
            t[sel], y2[:, sel], dy2[:, sel], freq, nterms, kind, spacing
        )
        dchi2 += part
        chi2_ref += ref
    if np.any(chi2_ref <= 0):
        raise InputError("y is constant within every band; a periodogram needs some scatter")
    power = dchi2 / chi2_ref[:, None]
    return power[0] if single else power
