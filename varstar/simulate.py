"""Simulated differential CCD photometry of one field, with known truth.

Two generators live here:

* :func:`simulate` runs a :class:`Scenario` (an invented field observed from a
  site on chosen nights) through a physical model of the sky, the telescope and
  the camera, and returns measurement tables exactly as upstream photometry
  software would hand them to varstar, together with the truth behind them.
  :func:`demo_scenario` is the invented demo field shipped in ``demo_series/``.
* :func:`synthetic_night` is a fast, fully vectorised generator of one night of
  the same kind of data for benchmarks and scale tests (no astropy call).

The instrumental magnitude of star *i* in exposure *j* taken in band *b* is::

    m_ij = M_i(t_j) + eps_b (B-V)_i(t_j) + k1_b X_j + k2_b X_j (B-V)_i(t_j)
           + zp_b(t_j) + cloud(t_j) + noise

with ``M`` the true standard magnitude in band *b*, ``eps_b`` the colour term,
``k1_b`` / ``k2_b`` the first- and second-order extinction coefficients
(Henden & Kaitchuck 1982), ``X`` the airmass (Hardie 1962), ``zp_b`` the
instrumental zero point (telescope throughput plus a slow drift and small grey
transparency changes) and ``cloud`` a grey extinction.  The instrumental
magnitude is ``-2.5 log10(N / t)`` with ``N`` the electrons collected in the
aperture in ``t`` seconds (Pogson 1856).

Noise: photon, sky, dark and read noise from the CCD equation (Merline &
Howell 1995) plus scintillation (Young 1967, scaled up by ~1.5 as Osborn et al.
2015 find for real sites).  The *reported* ``mag_err`` is the CCD-equation error
only, computed from the measured counts, as upstream photometry reports it: it
knows nothing about scintillation, so bright stars at high airmass scatter more
than their reported errors say.  That is realistic and on purpose.

Everything random takes a seed or a :class:`numpy.random.Generator`; the same
seed gives the same tables bit for bit.  Only :func:`write_series` touches files.
"""

from __future__ import annotations

import functools
import dataclasses
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError
from .timescale import exposure_times, hardie_airmass, night_label

#: 2.5 / ln(10): sigma_m = POGSON_K * sigma_F / F (Pogson 1856 magnitude scale).
POGSON_K = 2.5 / math.log(10.0)
#: TT - UTC in seconds since 2017-01-01 (32.184 s + 37 leap seconds; Eastman et al. 2010).
TT_MINUS_UTC_S = 69.184
#: Light time for one astronomical unit, seconds (IAU 2012 au / c; from memory).
AU_LIGHT_S = 499.004784
#: Sidereal rotation rate of the Earth in degrees of hour angle per solar day (from memory).
SIDEREAL_DEG_PER_DAY = 360.98564736629
#: Colour index of each supported band relative to V, per unit B-V: M_band = V + c (B-V).
#: B and V are exact by definition; R and I are rough main-sequence slopes (from
#: memory, Johnson-Cousins) used only by the synthetic generator.
_BAND_COLOUR_SLOPE = {"B": 1.0, "V": 0.0, "R": -0.55, "I": -1.10}
_NIGHT_GRID_STEP_D = 1.0 / 1440.0  # one-minute grid for the dark-window search

# ----------------------------------------------------------------------------
# Physics helpers (published equations; each is checked in tests/test_simulate.py)
# ----------------------------------------------------------------------------


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


def pulsation_template(phase: np.ndarray, n_harmonics: int = 5) -> np.ndarray:
    """Normalised light-curve shape of a pulsating star, in magnitudes.

    A truncated Fourier sawtooth, -sum_k s_k sin(2 pi k phi) / k with Lanczos
    factors s_k = sinc(k / (K + 1)) to soften the ringing: a fast rise to maximum
    and a slow decline.  Normalised to zero mean over phase, peak-to-peak 1, and
    maximum light (minimum magnitude) exactly at phase 0.
    """
    shift, mean, p2p = _template_norm(n_harmonics)
    return (_raw_template(np.asarray(phase, dtype=float) + shift, n_harmonics) - mean) / p2p


def _raw_template(phase: np.ndarray, n_harmonics: int) -> np.ndarray:
    k = np.arange(1, n_harmonics + 1, dtype=float)
    s = np.sinc(k / (n_harmonics + 1)) / k
    ph = np.asarray(phase, dtype=float)
    return -(np.sin(2.0 * np.pi * ph[..., None] * k) * s).sum(axis=-1)


@functools.lru_cache(maxsize=16)
def _template_norm(n_harmonics: int) -> tuple[float, float, float]:
    """Phase of maximum light, phase-mean and peak-to-peak of the raw template."""
    from scipy.optimize import minimize_scalar

    grid = np.arange(8192) / 8192.0
    raw = _raw_template(grid, n_harmonics)
    i = int(np.argmin(raw))
    res = minimize_scalar(
        lambda p: float(_raw_template(np.array([p]), n_harmonics)[0]),
        bracket=(grid[i] - 1 / 8192, grid[i], grid[i] + 1 / 8192),
        tol=1e-12,
    )
    shift = float(res.x) % 1.0
    lo = float(res.fun)
    # Phase mean is exactly zero for a pure sine series.
    hi = float(np.max(_raw_template(np.arange(65536) / 65536.0, n_harmonics)))
    return shift, 0.0, hi - lo


# ----------------------------------------------------------------------------
# Cheap astronomy (for night windows and the synthetic generator; no astropy)
# ----------------------------------------------------------------------------


def approx_sun(jd: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sun's geocentric right ascension, declination (deg, equinox of date) and distance (au).

    Low-precision formulae of the Astronomical Almanac (good to ~0.01 deg between
    1950 and 2050; from memory).  Checked against astropy's ``get_sun`` in the tests.
    """
    n = np.asarray(jd, dtype=float) - 2451545.0
    L = np.radians(280.460 + 0.9856474 * n)
    g = np.radians(357.528 + 0.9856003 * n)
    lam = L + np.radians(1.915) * np.sin(g) + np.radians(0.020) * np.sin(2 * g)
    eps = np.radians(23.439 - 0.0000004 * n)
    ra = np.degrees(np.arctan2(np.cos(eps) * np.sin(lam), np.cos(lam))) % 360.0
    dec = np.degrees(np.arcsin(np.sin(eps) * np.sin(lam)))
    r = 1.00014 - 0.01671 * np.cos(g) - 0.00014 * np.cos(2 * g)
    return ra, dec, r


def _precess_approx(ra_deg: float, dec_deg: float, jd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """J2000 -> mean equinox of date with the annual rates m = 3.075 s, n = 1.336 s = 20.04 arcsec (from memory)."""
    years = (np.asarray(jd, dtype=float) - 2451545.0) / 365.25
    ra = math.radians(ra_deg)
    dec = math.radians(dec_deg)
    dra_s = (3.075 + 1.336 * math.sin(ra) * math.tan(dec)) * years
    ddec_arcsec = 20.04 * math.cos(ra) * years
    return ra_deg + dra_s * 15.0 / 3600.0, dec_deg + ddec_arcsec / 3600.0


def gmst_deg(jd_ut: np.ndarray) -> np.ndarray:
    """Greenwich mean sidereal time in degrees: 18.697374558 h + 24.06570982441908 h/d (JD - 2451545) (from memory)."""
    d = np.asarray(jd_ut, dtype=float) - 2451545.0
    return (15.0 * (18.697374558 + 24.06570982441908 * d)) % 360.0


def approx_altitude(
    jd_ut: np.ndarray, ra_deg: np.ndarray | float, dec_deg: np.ndarray | float, latitude_deg: float, longitude_deg: float
) -> np.ndarray:
    """Geometric altitude (deg, no refraction) from hour angle and declination (spherical trigonometry)."""
    h = np.radians(gmst_deg(jd_ut) + longitude_deg - np.asarray(ra_deg, dtype=float))
    phi = math.radians(latitude_deg)
    d = np.radians(np.asarray(dec_deg, dtype=float))
    s = math.sin(phi) * np.sin(d) + math.cos(phi) * np.cos(d) * np.cos(h)
    return np.degrees(np.arcsin(np.clip(s, -1.0, 1.0)))


def approx_field_altitude(
    jd_ut: np.ndarray, ra_deg: float, dec_deg: float, latitude_deg: float, longitude_deg: float
) -> np.ndarray:
    """Altitude of a J2000 position at the given times (approximate precession to date included)."""
    ra_d, dec_d = _precess_approx(ra_deg, dec_deg, jd_ut)
    return approx_altitude(jd_ut, ra_d, dec_d, latitude_deg, longitude_deg)


def approx_sun_altitude(jd_ut: np.ndarray, latitude_deg: float, longitude_deg: float) -> np.ndarray:
    """Sun's geometric altitude in degrees (see :func:`approx_sun`)."""
    ra, dec, _ = approx_sun(jd_ut)
    return approx_altitude(jd_ut, ra, dec, latitude_deg, longitude_deg)


def approx_bjd_tdb(jd_utc: np.ndarray, ra_deg: float, dec_deg: float) -> np.ndarray:
    """Approximate BJD_TDB: JD_UTC + (TT - UTC) + Roemer delay to the Sun's centre.

    Uses :func:`approx_sun` for the Earth's position and TT - UTC = 69.184 s
    (valid from 2017).  Ignores the Sun's offset from the barycentre (< ~5 s),
    TDB - TT (< 2 ms) and the observer's offset from the geocentre (< 21 ms):
    good to a few seconds, which is what a scale test needs.  The pipeline
    computes exact BJD_TDB with astropy (:mod:`varstar.timescale`).
    """
    jd = np.asarray(jd_utc, dtype=float)
    ra_s, dec_s, r = approx_sun(jd)
    ra_t, dec_t = _precess_approx(ra_deg, dec_deg, jd)
    a_s, d_s = np.radians(ra_s), np.radians(dec_s)
    a_t, d_t = np.radians(ra_t), np.radians(dec_t)
    # Earth's heliocentric vector is minus the Sun's geocentric one.
    cos_angle = np.cos(d_s) * np.cos(d_t) * np.cos(a_s - a_t) + np.sin(d_s) * np.sin(d_t)
    roemer_s = -r * cos_angle * AU_LIGHT_S
    return jd + (TT_MINUS_UTC_S + roemer_s) / 86400.0


def _date_to_jd0(date: str) -> float:
    """JD at 0h UT of a calendar date ``YYYY-MM-DD``."""
    try:
        days = np.datetime64(date, "D").astype("int64")
    except ValueError:
        raise InputError(f"night date {date!r}: expected YYYY-MM-DD") from None
    return float(days) + 2440587.5


# ----------------------------------------------------------------------------
# Scenario description
# ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Pulsation:
    """Periodic pulsation with an asymmetric (sawtooth-like) light curve.

    ``amplitude`` maps band -> peak-to-peak amplitude (mag).  The epoch is a time
    of maximum light in BJD_TDB.  The colour changes with phase because the
    amplitudes differ between bands.
    """

    period_d: float
    epoch_bjd_tdb: float
    amplitude: Mapping[str, float]
    n_harmonics: int = 5

    def delta_mag(self, bjd_tdb: np.ndarray, band: str) -> np.ndarray:
        phase = (np.asarray(bjd_tdb, dtype=float) - self.epoch_bjd_tdb) / self.period_d
        return self.amplitude[band] * pulsation_template(phase % 1.0, self.n_harmonics)

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "pulsation", "period_d": self.period_d, "epoch_bjd_tdb": self.epoch_bjd_tdb,
                "amplitude_p2p": dict(self.amplitude), "n_harmonics": self.n_harmonics,
                "epoch_is": "maximum light"}


@dataclass(frozen=True)
class Sinusoid:
    """Small sinusoidal variation; ``amplitude`` maps band -> peak-to-peak (mag)."""

    period_d: float
    epoch_bjd_tdb: float
    amplitude: Mapping[str, float]

    def delta_mag(self, bjd_tdb: np.ndarray, band: str) -> np.ndarray:
        arg = 2.0 * np.pi * (np.asarray(bjd_tdb, dtype=float) - self.epoch_bjd_tdb) / self.period_d
        return 0.5 * self.amplitude[band] * np.sin(arg)

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "sinusoid", "period_d": self.period_d, "epoch_bjd_tdb": self.epoch_bjd_tdb,
                "amplitude_p2p": dict(self.amplitude), "epoch_is": "mean brightness, getting fainter"}


@dataclass(frozen=True)
class Trend:
    """Slow linear drift; ``rate`` maps band -> mag per day, zero at ``ref_bjd_tdb``."""

    rate: Mapping[str, float]
    ref_bjd_tdb: float

    def delta_mag(self, bjd_tdb: np.ndarray, band: str) -> np.ndarray:
        return self.rate[band] * (np.asarray(bjd_tdb, dtype=float) - self.ref_bjd_tdb)

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "trend", "rate_mag_per_d": dict(self.rate), "ref_bjd_tdb": self.ref_bjd_tdb}


Variability = Pulsation | Sinusoid | Trend


@dataclass(frozen=True)
class SimStar:
    """One star of the simulated field.

    ``V`` and ``BV`` are the true mean standard V magnitude and B-V colour; the
    catalogue lists them with Gaussian errors of ``catalog_err`` (band -> mag).
    ``in_catalogue`` False leaves the star's magnitudes out of the target file
    (usual for the variable target).
    """

    id: str
    role: str
    V: float
    BV: float
    catalog_err: Mapping[str, float] = field(default_factory=lambda: {"V": 0.01, "B": 0.015})
    variability: Variability | None = None
    in_catalogue: bool = True

    def mean_mag(self, band: str) -> float:
        return self.V + _BAND_COLOUR_SLOPE[band] * self.BV

    def to_dict(self) -> dict[str, Any]:
        return {"id": self.id, "role": self.role, "V": self.V, "BV": self.BV, "B": round(self.V + self.BV, 6),
                "catalog_err": dict(self.catalog_err), "in_catalogue": self.in_catalogue,
                "variability": None if self.variability is None else self.variability.to_dict()}


@dataclass(frozen=True)
class BandSetup:
    """One filter and how it is observed.

    ``zero_point_mag``: magnitude of a star giving 1 e-/s above the atmosphere;
    ``colour_term``: eps in m = M + eps (B-V) + ...; ``k1`` / ``k2``: first- and
    second-order extinction (mag per airmass, and per airmass per mag of B-V);
    ``k1_night_sigma``: night-to-night scatter of k1; ``sky_mag_arcsec2``: sky
    surface brightness at the zenith.
    """

    name: str
    exptime_s: float
    zero_point_mag: float
    colour_term: float
    k1: float
    k2: float
    k1_night_sigma: float
    sky_mag_arcsec2: float

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class Telescope:
    """Telescope and camera: aperture, detector noise, sampling, photometry aperture."""

    aperture_cm: float = 35.6
    gain_e_per_adu: float = 1.4
    read_noise_e: float = 9.0
    dark_e_per_s: float = 0.02
    pixel_scale_arcsec: float = 1.1
    aperture_radius_px: float = 5.0
    n_background_px: float = 400.0
    full_well_e: float = 95000.0
    adc_max_adu: float = 65535.0

    @property
    def n_pix(self) -> float:
        return math.pi * self.aperture_radius_px**2

    @property
    def saturation_e(self) -> float:
        return min(self.full_well_e, self.adc_max_adu * self.gain_e_per_adu)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class NightPlan:
    """One observing night: the evening's date at the site, when the observer starts and stops.

    Observing starts ``start_delay_h`` after the dark window opens (Sun below the
    scenario's limit and field above its altitude limit) and lasts at most
    ``max_hours``.  ``seeing_arcsec`` is the zenith FWHM; ``sky_offset_mag``
    brightens (negative) the sky, e.g. for moonlight.
    """

    evening: str
    start_delay_h: float = 0.0
    max_hours: float | None = None
    seeing_arcsec: float = 2.6
    sky_offset_mag: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class CloudPassage:
    """Passing clouds: grey extinction between ``floor_mag`` and ``peak_mag``.

    Starts ``start_after_h`` after the night's first exposure and lasts
    ``duration_h``.  Optionally a very thick moment of ``thick_mag`` lasting
    ``thick_minutes`` at 60 % of the passage, in which faint stars are lost.
    """

    night: int
    start_after_h: float
    duration_h: float
    peak_mag: float = 1.2
    floor_mag: float = 0.3
    thick_mag: float | None = None
    thick_minutes: float = 5.0

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class Scenario:
    """Everything that defines a simulated series of nights of one field."""

    field_name: str
    ra_deg: float
    dec_deg: float
    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    stars: tuple[SimStar, ...]
    bands: tuple[BandSetup, ...]
    nights: tuple[NightPlan, ...]
    telescope: Telescope = Telescope()
    clouds: tuple[CloudPassage, ...] = ()
    seed: int = 0
    overhead_s: float = 20.0
    overhead_jitter_s: float = 4.0
    sun_limit_deg: float = -12.0
    altitude_limit_deg: float = 25.0
    scintillation_factor: float = 1.5
    seeing_airmass_exponent: float = 0.6
    seeing_jitter: float = 0.12
    zp_night_sigma_mag: float = 0.04
    zp_drift_sigma_mag_per_h: float = 0.01
    transparency_jitter_mag: float = 0.004
    detection_snr: float = 5.0
    missing_fraction: float = 0.004
    n_cosmic: int = 4
    wide_form_night: int | None = None
    #: A "published" ephemeris of the target written into its TOML: (epoch BJD_TDB, period d,
    #: "maximum" or "minimum").  Invented like everything else; it may differ from the truth.
    published_ephemeris: tuple[float, float, str] | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for k in self.__dataclass_fields__:
            v = getattr(self, k)
            if isinstance(v, tuple):
                out[k] = [x.to_dict() if hasattr(x, "to_dict") else x for x in v]
            elif hasattr(v, "to_dict"):
                out[k] = v.to_dict()
            else:
                out[k] = v
        return out

    def band(self, name: str) -> BandSetup:
        for b in self.bands:
            if b.name == name:
                return b
        raise KeyError(name)

    def validate(self) -> None:
        """Raise :class:`InputError` for an inconsistent scenario."""
        names = [b.name for b in self.bands]
        if not names or len(set(names)) != len(names):
            raise InputError(f"scenario {self.field_name!r}: bands must be distinct and not empty, got {names}")
        for b in names:
            if b not in ("B", "V"):
                raise InputError(f"scenario {self.field_name!r}: band {b!r} is not simulated (use B and/or V)")
        ids = [s.id for s in self.stars]
        if len(set(ids)) != len(ids):
            raise InputError(f"scenario {self.field_name!r}: star ids must be unique, got {ids}")
        if sum(s.role == "target" for s in self.stars) != 1:
            raise InputError(f"scenario {self.field_name!r}: exactly one star must have role 'target'")
        for s in self.stars:
            if s.role not in ("target", "comparison", "check"):
                raise InputError(f"scenario star {s.id!r}: role must be target, comparison or check")
            if s.variability is not None:
                amp = getattr(s.variability, "amplitude", None) or getattr(s.variability, "rate", {})
                missing = [b for b in names if b not in amp]
                if missing:
                    raise InputError(f"scenario star {s.id!r}: variability lacks band(s) {missing}")
        for c in self.clouds:
            if not 0 <= c.night < len(self.nights):
                raise InputError(f"scenario cloud passage: night index {c.night} is not one of the {len(self.nights)} nights")
        if self.wide_form_night is not None and not 0 <= self.wide_form_night < len(self.nights):
            raise InputError(f"scenario wide_form_night {self.wide_form_night} is not a night index")


@dataclass(frozen=True)
class SimulatedSeries:
    """What :func:`simulate` returns.

    ``nights``: one long-form measurement table per night (columns ``jd, band,
    star, mag, mag_err, airmass, exptime, flag, frame``).  ``truth``: one row per
    exposure per star (measured or not) with ``jd, bjd_tdb, band, star, role,
    mag_true, cloud, airmass`` and the model's intermediate quantities.
    ``info``: JSON-safe facts (period, epoch, amplitudes, variable comparison,
    cloudy frames, flagged and lost rows, extinction by night).
    """

    nights: list[pd.DataFrame]
    truth: pd.DataFrame
    info: dict[str, Any]
    evenings: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        return dict(self.info)


MEASUREMENT_COLUMNS = ("jd", "band", "star", "mag", "mag_err", "airmass", "exptime", "flag", "frame")
TRUTH_FILE_COLUMNS = ("jd", "bjd_tdb", "band", "star", "role", "mag_true", "airmass", "cloud")

# ----------------------------------------------------------------------------
# The demo field (invented)
# ----------------------------------------------------------------------------


def demo_scenario() -> Scenario:
    """The invented demo field shipped in ``demo_series/``.

    Field "Wren-Hollow 7" is made up (name, stars, magnitudes; coordinates picked
    so the field is well placed on autumn evenings from a mid-northern site).  Its
    target V1 pulsates with P = 0.46173 d and a V range of 0.68 mag; comparison
    C4 is secretly variable (0.08 mag, 1.7313 d); clouds pass on the third night.
    """
    p = Pulsation(period_d=0.46173, epoch_bjd_tdb=2461295.3827, amplitude={"V": 0.68, "B": 0.89}, n_harmonics=5)
    c4 = Sinusoid(period_d=1.7313, epoch_bjd_tdb=2461294.911, amplitude={"V": 0.080, "B": 0.092})
    stars = (
        SimStar("V1", "target", V=13.05, BV=0.38, catalog_err={"V": 0.05, "B": 0.06}, variability=p, in_catalogue=False),
        SimStar("C1", "comparison", V=11.38, BV=0.52, catalog_err={"V": 0.008, "B": 0.010}),
        SimStar("C2", "comparison", V=12.18, BV=1.21, catalog_err={"V": 0.010, "B": 0.014}),
        SimStar("C3", "comparison", V=12.74, BV=0.64, catalog_err={"V": 0.011, "B": 0.014}),
        SimStar("C4", "comparison", V=13.31, BV=0.95, catalog_err={"V": 0.013, "B": 0.018}, variability=c4),
        SimStar("C5", "comparison", V=13.87, BV=0.37, catalog_err={"V": 0.016, "B": 0.019}),
        SimStar("C6", "comparison", V=14.42, BV=1.38, catalog_err={"V": 0.020, "B": 0.030}),
        SimStar("C7", "comparison", V=14.85, BV=0.78, catalog_err={"V": 0.024, "B": 0.032}),
        SimStar("K1", "check", V=13.58, BV=0.71, catalog_err={"V": 0.014, "B": 0.019}),
    )
    # Zero points from a 35 cm aperture, ~880 / 980 A passbands and ~35 % / ~25 %
    # total throughput (rough estimate from Vega's flux, from memory); sky for a
    # rural site; extinction typical of a 2 km site (common practice).
    bands = (
        BandSetup("V", exptime_s=60.0, zero_point_mag=20.90, colour_term=-0.045, k1=0.19, k2=-0.004,
                  k1_night_sigma=0.02, sky_mag_arcsec2=21.1),
        BandSetup("B", exptime_s=90.0, zero_point_mag=20.60, colour_term=0.038, k1=0.32, k2=-0.030,
                  k1_night_sigma=0.03, sky_mag_arcsec2=22.0),
    )
    nights = (
        NightPlan("2026-09-11", start_delay_h=0.4, max_hours=5.6, seeing_arcsec=2.5),
        NightPlan("2026-09-12", start_delay_h=1.2, max_hours=4.8, seeing_arcsec=2.9),
        NightPlan("2026-09-19", start_delay_h=0.2, max_hours=6.1, seeing_arcsec=2.7, sky_offset_mag=-0.4),
        NightPlan("2026-09-26", start_delay_h=3.6, max_hours=4.4, seeing_arcsec=3.1, sky_offset_mag=-0.9),
        NightPlan("2026-10-06", start_delay_h=0.1, max_hours=5.4, seeing_arcsec=2.4),
        NightPlan("2026-10-10", start_delay_h=2.4, max_hours=5.1, seeing_arcsec=2.6),
    )
    clouds = (CloudPassage(night=2, start_after_h=2.1, duration_h=1.0, peak_mag=1.45, floor_mag=0.3, thick_mag=4.2, thick_minutes=6.0),)
    return Scenario(
        field_name="Wren-Hollow 7 (invented demo field)",
        ra_deg=341.7625,
        dec_deg=18.6083,
        latitude_deg=34.21,
        longitude_deg=-108.39,
        elevation_m=2050.0,
        stars=stars,
        bands=bands,
        nights=nights,
        telescope=Telescope(),
        clouds=clouds,
        seed=20260911,
        wide_form_night=5,
        published_ephemeris=(2461295.3861, 0.4617140, "maximum"),
    )


# ----------------------------------------------------------------------------
# Catalogue and target file
# ----------------------------------------------------------------------------

_STREAM_CATALOGUE = 1
_STREAM_NAMES = ("schedule", "atmosphere", "clouds", "noise", "defects")


def catalogue(scenario: Scenario) -> pd.DataFrame:
    """Catalogue magnitudes: truth (mean standard magnitude) plus a Gaussian catalogue error.

    Drawn from the scenario's own seed (not the simulation's), so the target file
    is a function of the scenario alone.  Rounded to 0.001 mag as catalogues are.
    Columns ``star, role, band, mag_true_mean, catalog, catalog_err``.
    """
    rng = np.random.default_rng(np.random.SeedSequence([int(scenario.seed), _STREAM_CATALOGUE]))
    bands = [b.name for b in scenario.bands]
    rows = []
    draws = rng.standard_normal((len(scenario.stars), len(bands)))
    for i, s in enumerate(scenario.stars):
        for j, b in enumerate(bands):
            err = float(s.catalog_err.get(b, 0.0))
            true = s.mean_mag(b)
            rows.append((s.id, s.role, b, true, round(true + err * draws[i, j], 3), err))
    return pd.DataFrame(rows, columns=["star", "role", "band", "mag_true_mean", "catalog", "catalog_err"])


def _fmt(x: float, nd: int) -> str:
    s = f"{x:.{nd}f}"
    return "0." + "0" * nd if s == "-0." + "0" * nd else s


def _toml_text(
    name: str, ra_deg: float, dec_deg: float, lat: float, lon: float, elev: float,
    stars: Sequence[tuple[str, str, Mapping[str, float], Mapping[str, float]]], header: str,
) -> str:
    lines = [f"# {ln}" if ln else "#" for ln in header.splitlines()]
    lines += [
        "",
        "[target]",
        f"name = {json.dumps(name)}",
        f"ra = {_fmt(ra_deg, 5)}",
        f"dec = {_fmt(dec_deg, 5)}",
        "",
        "[site]",
        f"latitude = {_fmt(lat, 4)}",
        f"longitude = {_fmt(lon, 4)}",
        f"elevation = {_fmt(elev, 1)}",
    ]
    for sid, role, cat, err in stars:
        lines += ["", "[[stars]]", f"id = {json.dumps(sid)}", f"role = {json.dumps(role)}"]
        for b in ("V", "B", "R", "I"):
            if b in cat:
                lines.append(f"{b} = {_fmt(cat[b], 3)}")
        for b in ("V", "B", "R", "I"):
            if b in cat and b in err:
                lines.append(f"{b}_err = {_fmt(err[b], 3)}")
    return "\n".join(lines) + "\n"


def target_toml(scenario: Scenario) -> str:
    """The scenario's target description in varstar's TOML format.

    Comparison and check stars carry catalogue magnitudes (truth plus catalogue
    error, see :func:`catalogue`); the target, and any star with
    ``in_catalogue=False``, carries none.  Nothing reveals which comparison
    star varies.
    """
    cat = catalogue(scenario)
    entries = []
    for s in scenario.stars:
        sub = cat[cat["star"] == s.id]
        mags = dict(zip(sub["band"], sub["catalog"])) if s.in_catalogue else {}
        errs = dict(zip(sub["band"], sub["catalog_err"])) if s.in_catalogue else {}
        entries.append((s.id, s.role, mags, errs))
    header = (
        f"{scenario.field_name}: simulated data from varstar.simulate (seed {scenario.seed}).\n"
        "The field and its stars are invented; catalogue values = truth + simulated catalogue error."
    )
    text = _toml_text(scenario.field_name, scenario.ra_deg, scenario.dec_deg, scenario.latitude_deg,
                      scenario.longitude_deg, scenario.elevation_m, entries, header)
    if scenario.published_ephemeris is not None:
        epoch, period, kind = scenario.published_ephemeris
        text += (
            "\n# An older ephemeris of the target (invented, like the field; not exactly the truth)\n"
            f"[ephemeris]\nepoch = {epoch:.5f}\nperiod = {period:.7f}\nkind = {json.dumps(kind)}\n"
        )
    return text


# ----------------------------------------------------------------------------
# The simulation
# ----------------------------------------------------------------------------


def _generators(rng_or_seed: int | np.random.Generator | None, default_seed: int) -> dict[str, np.random.Generator]:
    if isinstance(rng_or_seed, np.random.Generator):
        seeds = rng_or_seed.integers(0, 2**63, size=len(_STREAM_NAMES))
        children = [np.random.default_rng(int(s)) for s in seeds]
    else:
        seed = default_seed if rng_or_seed is None else int(rng_or_seed)
        children = [np.random.default_rng(s) for s in np.random.SeedSequence([seed, 2]).spawn(len(_STREAM_NAMES))]
    return dict(zip(_STREAM_NAMES, children))


def dark_windows(scenario: Scenario) -> list[tuple[float, float]]:
    """For each night, (first, last) JD UTC at which the Sun is below ``sun_limit_deg``
    and the field above ``altitude_limit_deg`` (longest such stretch, 1-minute grid).

    Uses the cheap almanac formulae (:func:`approx_sun_altitude`,
    :func:`approx_field_altitude`): accurate to well under a minute of time here.
    """
    out = []
    grid = np.arange(0, 18 * 60 + 1) * _NIGHT_GRID_STEP_D  # 15h to 09h local mean time
    for plan in scenario.nights:
        local_noon = _date_to_jd0(plan.evening) + 0.5 - scenario.longitude_deg / 360.0
        jd = local_noon + 0.125 + grid
        sun = approx_sun_altitude(jd, scenario.latitude_deg, scenario.longitude_deg)
        alt = approx_field_altitude(jd, scenario.ra_deg, scenario.dec_deg, scenario.latitude_deg, scenario.longitude_deg)
        ok = (sun < scenario.sun_limit_deg) & (alt > scenario.altitude_limit_deg)
        if not ok.any():
            raise InputError(
                f"scenario night {plan.evening}: the field is never above {scenario.altitude_limit_deg} deg while the Sun "
                f"is below {scenario.sun_limit_deg} deg; choose another date or field"
            )
        edges = np.diff(np.concatenate([[0], ok.astype(np.int8), [0]]))
        starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
        k = int(np.argmax(stops - starts))
        out.append((float(jd[starts[k]]), float(jd[stops[k] - 1])))
    return out


def _schedule(scenario: Scenario, rng: np.random.Generator) -> list[dict[str, np.ndarray]]:
    """Interleaved exposures (bands in scenario order) for each night: mid-exposure JD, band index, exptime."""
    exptimes = np.array([b.exptime_s for b in scenario.bands])
    nb = len(exptimes)
    nights = []
    for i, (plan, (w0, w1)) in enumerate(zip(scenario.nights, dark_windows(scenario))):
        start = w0 + plan.start_delay_h / 24.0
        stop = w1 if plan.max_hours is None else min(w1, start + plan.max_hours / 24.0)
        if stop <= start:
            raise InputError(f"scenario night {plan.evening}: start_delay_h leaves no time to observe")
        n_max = int(math.ceil((stop - start) * 86400.0 / (exptimes.min() + scenario.overhead_s))) + nb
        band_idx = np.arange(n_max) % nb
        t_exp = exptimes[band_idx]
        step = t_exp + scenario.overhead_s + rng.uniform(0.0, scenario.overhead_jitter_s, n_max)
        t_start = start + np.concatenate([[0.0], np.cumsum(step[:-1])]) / 86400.0
        keep = t_start + t_exp / 86400.0 <= stop
        jd_mid = np.round(t_start[keep] + 0.5 * t_exp[keep] / 86400.0, 6)
        nights.append({"jd": jd_mid, "band_idx": band_idx[keep], "exptime": t_exp[keep], "session": (start, stop)})
    return nights


def _smooth_noise(rng: np.random.Generator, n: int, width: float) -> np.ndarray:
    """Unit-variance Gaussian noise correlated over ~``width`` samples (Gaussian-filtered white noise)."""
    from scipy.ndimage import gaussian_filter1d

    if n == 0:
        return np.zeros(0)
    w = gaussian_filter1d(rng.standard_normal(n + 8 * int(width) + 8), width, mode="wrap")[: n]
    sd = w.std()
    return (w - w.mean()) / sd if sd > 0 else w


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
    tel = scenario.telescope
    band_names = [b.name for b in scenario.bands]
    eps = np.array([b.colour_term for b in scenario.bands])
    k2 = np.array([b.k2 for b in scenario.bands])
    zp_mag = np.array([b.zero_point_mag for b in scenario.bands])
    sky_mag = np.array([b.sky_mag_arcsec2 for b in scenario.bands])
    n_nights = len(scenario.nights)
    n_bands = len(band_names)

    # --- exposures -------------------------------------------------------------
    sched = _schedule(scenario, g["schedule"])
    night_idx = np.concatenate([np.full(s["jd"].size, i) for i, s in enumerate(sched)])
    jd = np.concatenate([s["jd"] for s in sched])
    band_idx = np.concatenate([s["band_idx"] for s in sched])
    exptime = np.concatenate([s["exptime"] for s in sched])
    bjd = np.empty_like(jd)
    airmass = np.empty_like(jd)
    altitude = np.empty_like(jd)
    evenings = tuple(p.evening for p in scenario.nights)
    frames = np.empty(jd.size, dtype=object)
    for i, s in enumerate(sched):
        m = night_idx == i
        if not m.any():
            raise InputError(f"scenario night {evenings[i]}: no exposure fits in the observing window")
        et = exposure_times(jd[m], scenario.ra_deg, scenario.dec_deg, scenario.latitude_deg,
                            scenario.longitude_deg, scenario.elevation_m)
        # Use the values at the precision the files print them, so that the truth
        # files hold exactly what the physics used.
        bjd[m], airmass[m], altitude[m] = np.round(et.bjd_tdb, 6), np.round(et.airmass, 4), et.altitude_deg
        labels = night_label(jd[m], scenario.longitude_deg)
        if not np.all(labels == evenings[i]):
            raise InputError(f"scenario night {evenings[i]}: exposures fall on night {labels[0]}; check the date")
        prefix = evenings[i].replace("-", "") + "-"
        frames[m] = np.char.add(prefix, np.char.zfill(np.arange(1, m.sum() + 1).astype(str), 3)).astype(object)
    n_exp = jd.size

    # --- atmosphere and instrument, per exposure ---------------------------------
    ga = g["atmosphere"]
    k1_night = np.array([[b.k1 + b.k1_night_sigma * z for b, z in zip(scenario.bands, ga.standard_normal(n_bands))]
                         for _ in range(n_nights)])
    zp_night = scenario.zp_night_sigma_mag * ga.standard_normal(n_nights)
    zp_band_night = 0.5 * scenario.zp_night_sigma_mag * ga.standard_normal((n_nights, n_bands))
    drift = scenario.zp_drift_sigma_mag_per_h * ga.standard_normal(n_nights)
    t_mid = np.array([0.5 * (s["session"][0] + s["session"][1]) for s in sched])
    transparency = ga.exponential(scenario.transparency_jitter_mag, n_exp) if scenario.transparency_jitter_mag > 0 else np.zeros(n_exp)
    zero_point = (-zp_mag[band_idx] + zp_night[night_idx] + zp_band_night[night_idx, band_idx]
                  + drift[night_idx] * (jd - t_mid[night_idx]) * 24.0 + transparency)
    k1_exp = k1_night[night_idx, band_idx]
    seeing0 = np.array([p.seeing_arcsec for p in scenario.nights])
    wobble = np.concatenate([_smooth_noise(ga, int((night_idx == i).sum()), 6.0) for i in range(n_nights)])
    fwhm_arcsec = seeing0[night_idx] * airmass**scenario.seeing_airmass_exponent * np.exp(scenario.seeing_jitter * wobble)
    sky_offset = np.array([p.sky_offset_mag for p in scenario.nights])

    # --- clouds -----------------------------------------------------------------
    gc = g["clouds"]
    cloud_mag = np.zeros(n_exp)
    thick = np.zeros(n_exp, dtype=bool)
    for c in scenario.clouds:
        t0 = sched[c.night]["jd"][0] + c.start_after_h / 24.0
        dur = c.duration_h / 24.0
        u = (jd - t0) / dur
        inside = (night_idx == c.night) & (u >= 0) & (u <= 1)
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
    cloudy = cloud_mag > 0

    # --- stars: true standard magnitudes at each exposure -------------------------
    n_star = len(scenario.stars)
    v_true = np.empty((n_exp, n_star))
    b_true = np.empty((n_exp, n_star))
    for i, s in enumerate(scenario.stars):
        dv = s.variability.delta_mag(bjd, "V") if s.variability is not None and "V" in band_names else 0.0
        db = s.variability.delta_mag(bjd, "B") if s.variability is not None and "B" in band_names else 0.0
        v_true[:, i] = s.V + dv
        b_true[:, i] = s.V + s.BV + db
    colour_true = b_true - v_true
    is_b = (np.array(band_names)[band_idx] == "B")[:, None]
    mag_true = np.where(is_b, b_true, v_true)

    # --- instrumental magnitudes and counts --------------------------------------
    X = airmass[:, None]
    mag_inst_true = (mag_true + eps[band_idx][:, None] * colour_true + k1_exp[:, None] * X
                     + k2[band_idx][:, None] * X * colour_true + zero_point[:, None] + cloud_mag[:, None])
    t = exptime[:, None]
    n_star_e = t * mag_to_flux(mag_inst_true)
    # Sky: surface brightness grows roughly as the airmass (thin emitting layer; common practice).
    sky_rate_px = mag_to_flux(sky_mag[band_idx] + sky_offset[night_idx], zp_mag[band_idx]) * tel.pixel_scale_arcsec**2 * airmass
    sky_px = (exptime * sky_rate_px)[:, None]
    dark_px = tel.dark_e_per_s * t
    sigma_ccd_e = ccd_noise_e(n_star_e, tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e)
    sig_scint = scintillation_sigma(tel.aperture_cm, X, scenario.elevation_m, t, scenario.scintillation_factor)
    sig_scint = np.broadcast_to(sig_scint, n_star_e.shape)

    gn = g["noise"]
    z = gn.standard_normal((2, n_exp, n_star))
    n_scint = n_star_e * (1.0 + sig_scint * z[0])
    n_meas = n_scint + sigma_ccd_e * z[1]

    # --- defects: saturation, cosmic rays, random losses -------------------------
    gd = g["defects"]
    sigma_px = (fwhm_arcsec / tel.pixel_scale_arcsec / (2.0 * math.sqrt(2.0 * math.log(2.0))))[:, None]
    peak = n_scint / (2.0 * np.pi * sigma_px**2) + sky_px
    level = tel.saturation_e - sky_px
    lost_frac = saturation_loss(peak - sky_px, level)
    saturated = lost_frac > 0
    n_meas = np.where(saturated, n_meas - lost_frac * n_scint, n_meas)
    flag = np.where(saturated, 1, 0)

    snr_rep = ccd_snr(np.clip(n_meas, 1e-9, None), tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e)
    detected = (n_meas > 0) & (snr_rep >= scenario.detection_snr)
    eligible = np.flatnonzero((detected & ~saturated).ravel())
    n_cr = min(scenario.n_cosmic, eligible.size)
    cr_rows = np.sort(gd.choice(eligible, size=n_cr, replace=False)) if n_cr else np.zeros(0, dtype=int)
    cr_e = np.zeros(n_exp * n_star)
    cr_e[cr_rows] = gd.uniform(800.0, 6000.0, n_cr)
    n_meas = n_meas + cr_e.reshape(n_exp, n_star)
    flag = flag.ravel()
    flag[cr_rows] = 2
    flag = flag.reshape(n_exp, n_star)
    missing = (gd.random((n_exp, n_star)) < scenario.missing_fraction) & detected & (flag == 0)

    snr_rep = ccd_snr(np.clip(n_meas, 1e-9, None), tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e)
    mag = flux_to_mag(n_meas / t)
    mag_err = mag_err_from_snr(snr_rep)
    present = detected & ~missing

    status = np.full((n_exp, n_star), "ok", dtype=object)
    status[flag == 1] = "saturated"
    status[flag == 2] = "cosmic_ray"
    status[missing] = "missing"
    status[~detected] = "lost"

    # --- tables -----------------------------------------------------------------
    star_ids = np.array([s.id for s in scenario.stars], dtype=object)
    roles = np.array([s.role for s in scenario.stars], dtype=object)
    bands_arr = np.array(band_names, dtype=object)
    rep = lambda a: np.repeat(a, n_star)  # noqa: E731 - per-exposure -> per-row
    til = lambda a: np.tile(a, n_exp)  # noqa: E731 - per-star -> per-row
    rows = pd.DataFrame(
        {
            "jd": rep(jd),
            "band": rep(bands_arr[band_idx]),
            "star": til(star_ids),
            "mag": mag.ravel(),
            "mag_err": mag_err.ravel(),
            "airmass": rep(airmass),
            "exptime": rep(exptime),
            "flag": flag.ravel().astype(np.int64),
            "frame": rep(frames),
        }
    )
    pres = present.ravel()
    row_night = rep(night_idx)
    nights = [rows[pres & (row_night == i)].reset_index(drop=True) for i in range(n_nights)]

    truth = pd.DataFrame(
        {
            "night": rep(np.array(evenings, dtype=object)[night_idx]),
            "frame": rep(frames),
            "jd": rep(jd),
            "bjd_tdb": rep(bjd),
            "band": rep(bands_arr[band_idx]),
            "star": til(star_ids),
            "role": til(roles),
            "mag_true": mag_true.ravel(),
            "colour_true": colour_true.ravel(),
            "airmass": rep(airmass),
            "altitude_deg": rep(altitude),
            "exptime": rep(exptime),
            "cloud": rep(cloudy),
            "cloud_mag": rep(cloud_mag),
            "k1": rep(k1_exp),
            "zero_point": rep(zero_point),
            "fwhm_arcsec": rep(fwhm_arcsec),
            "peak_e": peak.ravel(),
            "mag_inst_true": mag_inst_true.ravel(),
            "n_star_e": n_star_e.ravel(),
            "sigma_ccd_mag": (POGSON_K * sigma_ccd_e / n_star_e).ravel(),
            "sigma_scint_mag": (POGSON_K * sig_scint).ravel(),
            "status": status.ravel(),
        }
    )

    info = _info(scenario, truth, nights, evenings, k1_night, zp_night, thick)
    return SimulatedSeries(nights=nights, truth=truth, info=info, evenings=evenings)


def _r(x: float, nd: int = 6) -> float:
    return float(round(float(x), nd))


def _info(scenario: Scenario, truth: pd.DataFrame, nights: list[pd.DataFrame], evenings: tuple[str, ...],
          k1_night: np.ndarray, zp_night: np.ndarray, thick: np.ndarray) -> dict[str, Any]:
    band_names = [b.name for b in scenario.bands]
    target = next(s for s in scenario.stars if s.role == "target")
    per_exp = truth.drop_duplicates("frame")
    thick_frames = set(per_exp["frame"].to_numpy()[thick])
    clouds = []
    for c in scenario.clouds:
        sel = per_exp[(per_exp["night"] == evenings[c.night]) & per_exp["cloud"]]
        lost = truth[(truth["night"] == evenings[c.night]) & truth["cloud"] & (truth["status"] == "lost")]
        clouds.append({
            "night": evenings[c.night],
            "n_frames": int(len(sel)),
            "first_frame": str(sel["frame"].iloc[0]) if len(sel) else None,
            "last_frame": str(sel["frame"].iloc[-1]) if len(sel) else None,
            "frames": [str(f) for f in sel["frame"]],
            "cloud_mag_range": [_r(sel["cloud_mag"].min(), 3), _r(sel["cloud_mag"].max(), 3)] if len(sel) else None,
            "thick_frames": [str(f) for f in sel["frame"] if f in thick_frames],
            "stars_lost": [{"frame": str(f), "star": str(s)} for f, s in zip(lost["frame"], lost["star"])],
            "passage": c.to_dict(),
        })
    bad = truth[truth["status"].isin(["saturated", "cosmic_ray"])]
    miss = truth[truth["status"] == "missing"]
    lost_all = truth[truth["status"] == "lost"]
    eps = {b.name: b.colour_term for b in scenario.bands}
    transformation = {}
    if "V" in eps:
        transformation["epsilon"] = _r(-eps["V"])
    if "V" in eps and "B" in eps:
        transformation["mu"] = _r(1.0 / (1.0 + eps["B"] - eps["V"]))
    variable_comps = [
        {"id": s.id, **s.variability.to_dict()} for s in scenario.stars if s.role != "target" and s.variability is not None
    ]
    night_info = []
    for i, (ev, df) in enumerate(zip(evenings, nights)):
        pe = per_exp[per_exp["night"] == ev]
        night_info.append({
            "evening": ev,
            "n_exposures": int(len(pe)),
            "n_exposures_by_band": {b: int((pe["band"] == b).sum()) for b in band_names},
            "n_rows": int(len(df)),
            "first_jd": _r(pe["jd"].min()),
            "last_jd": _r(pe["jd"].max()),
            "airmass_range": [_r(pe["airmass"].min(), 4), _r(pe["airmass"].max(), 4)],
            "k1": {b: _r(k1_night[i, j], 4) for j, b in enumerate(band_names)},
            "zero_point_offset": _r(zp_night[i], 4),
            "cloudy": bool(pe["cloud"].any()),
        })
    return {
        "generator": "varstar.simulate.simulate",
        "field": scenario.field_name,
        "invented": True,
        "seed": int(scenario.seed),
        "target": {"id": target.id, **(target.variability.to_dict() if target.variability else {"kind": "constant"}),
                   "mean_mag": {b: _r(target.mean_mag(b), 4) for b in band_names}},
        "variable_comparisons": variable_comps,
        "check_stars": [s.id for s in scenario.stars if s.role == "check"],
        "colour_terms": {b: _r(eps[b]) for b in band_names},
        "transformation": {**transformation,
                           "note": "V - v0 = epsilon (B - V) + zp_V and (B - V) = mu (b - v)0 + zp_BV after first- and second-order extinction"},
        "extinction": {"k2": {b.name: b.k2 for b in scenario.bands}, "k1_by_night": {n["evening"]: n["k1"] for n in night_info}},
        "nights": night_info,
        "clouds": clouds,
        "flagged": [{"frame": str(f), "star": str(s), "flag": 1 if st == "saturated" else 2, "reason": str(st)}
                    for f, s, st in zip(bad["frame"], bad["star"], bad["status"])],
        "missing": [{"frame": str(f), "star": str(s)} for f, s in zip(miss["frame"], miss["star"])],
        "counts": {
            "exposures": int(len(per_exp)),
            "rows": int(sum(len(n) for n in nights)),
            "rows_flagged": int(len(bad)),
            "rows_missing_at_random": int(len(miss)),
            "rows_lost_below_detection": int(len(lost_all)),
        },
        "noise": {"reported_mag_err": "CCD equation only (Merline & Howell 1995), from the measured counts",
                  "scintillation": f"Young (1967) x {scenario.scintillation_factor}, not in the reported errors",
                  "detection_snr": scenario.detection_snr},
    }


# ----------------------------------------------------------------------------
# Fast synthetic generator (benchmarks, scale tests)
# ----------------------------------------------------------------------------

_SYN_DEFAULTS = {  # band: (exptime_s, zero_point_mag, colour_term, k1, k2, sky_mag_arcsec2)
    "B": (90.0, 20.60, 0.038, 0.32, -0.030, 22.0),
    "V": (60.0, 20.90, -0.045, 0.19, -0.004, 21.1),
    "R": (60.0, 20.90, 0.030, 0.13, 0.0, 20.5),
    "I": (60.0, 20.30, 0.020, 0.08, 0.0, 19.6),
}


def synthetic_night(
    n_exposures: int,
    n_stars: int,
    bands: Sequence[str] = ("B", "V"),
    seed: int | np.random.Generator = 0,
    start_jd: float = 2461300.75,
    *,
    field_seed: int = 0,
    ra_deg: float = 341.7625,
    dec_deg: float = 18.6083,
    latitude_deg: float = 34.21,
    longitude_deg: float = -108.39,
    elevation_m: float = 2050.0,
    night_hours: float = 7.0,
    centre_on_transit: bool = True,
    period_d: float = 0.46173,
    epoch_bjd_tdb: float = 2461295.3827,
    amplitude_v: float = 0.68,
    missing_fraction: float = 0.003,
    flag_fraction: float = 0.001,
    telescope: Telescope | None = None,
) -> tuple[str, pd.DataFrame]:
    """One synthetic night, fully vectorised, for benchmarks and scale tests.

    ``n_exposures`` exposures in *each* band, interleaved (B, V, B, V, ...), of
    ``n_stars`` stars: ``V1`` the target (pulsating, as in the demo), ``C1`` ...
    comparisons and, with four or more stars, a last check star ``K1``.  The
    measurement table has ``n_exposures * n_stars * len(bands)`` rows less about
    ``missing_fraction`` of them.

    The exposures span ``night_hours`` (so the cadence shortens, and the exposure
    time with it, as ``n_exposures`` grows) centred on the field's meridian
    transit nearest ``start_jd + night_hours / 2`` (the Sun is ignored: these are
    scale data), or starting at ``start_jd`` when ``centre_on_transit`` is False.
    Airmass (Hardie 1962) comes from cheap sidereal-time geometry, consistent
    with the JD and coordinates; the light curve is evaluated at an approximate
    BJD_TDB (:func:`approx_bjd_tdb`, good to seconds).  No astropy call.

    Parameters
    ----------
    seed
        Noise and defects of this night.
    field_seed
        The star field (magnitudes, colours, catalogue errors): keep it fixed
        across nights to get the same field every night.

    Returns
    -------
    (str, pandas.DataFrame)
        The target TOML text and the long-form measurement table (columns
        ``jd, band, star, mag, mag_err, airmass, exptime, flag, frame``).  The
        table's ``attrs["truth"]`` holds the target's period, epoch and amplitudes.
    """
    if n_exposures < 1 or n_stars < 3:
        raise InputError(f"synthetic_night: need n_exposures >= 1 and n_stars >= 3, got {n_exposures}, {n_stars}")
    bands = tuple(bands)
    unknown = [b for b in bands if b not in _SYN_DEFAULTS]
    if unknown or not bands or len(set(bands)) != len(bands):
        raise InputError(f"synthetic_night: bands must be distinct names among {', '.join(_SYN_DEFAULTS)}, got {bands}")
    tel = telescope or Telescope()
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    frng = np.random.default_rng(np.random.SeedSequence([int(field_seed), 3]))

    # --- field -------------------------------------------------------------------
    n_comp = n_stars - 1 - (1 if n_stars >= 4 else 0)
    ids = ["V1"] + [f"C{k}" for k in range(1, n_comp + 1)] + (["K1"] if n_stars >= 4 else [])
    roles = ["target"] + ["comparison"] * n_comp + (["check"] if n_stars >= 4 else [])
    v = np.concatenate([[13.05], np.sort(frng.uniform(10.8, 15.0, n_stars - 1))])
    bv = np.concatenate([[0.38], frng.uniform(0.3, 1.4, n_stars - 1)])
    cat_err_v = 0.006 + 0.004 * (v - 10.0)
    slope = np.array([_BAND_COLOUR_SLOPE[b] for b in bands])
    std_mean = v[None, :] + slope[:, None] * bv[None, :]  # (band, star)
    cat = std_mean + (cat_err_v * (1.0 + 0.4 * np.abs(slope[:, None]))) * frng.standard_normal(std_mean.shape)

    # --- exposures ---------------------------------------------------------------
    nb = len(bands)
    n_frames = n_exposures * nb
    span = night_hours / 24.0
    cadence = span / n_frames
    if centre_on_transit:
        t_c = start_jd + 0.5 * span
        ra_d, _ = _precess_approx(ra_deg, dec_deg, np.array([t_c]))
        ha = ((gmst_deg(t_c) + longitude_deg - ra_d[0]) + 180.0) % 360.0 - 180.0
        t0 = t_c - ha / SIDEREAL_DEG_PER_DAY - 0.5 * span
    else:
        t0 = start_jd
    k = np.arange(n_frames)
    band_idx = k % nb
    jd = np.round(t0 + (k + 0.5) * cadence, 6)
    prm = np.array([_SYN_DEFAULTS[b] for b in bands])  # (band, 6)
    exptime = np.minimum(prm[band_idx, 0], np.floor(0.8 * cadence * 86400.0 * 10.0) / 10.0)
    if np.any(exptime <= 0):
        raise InputError(f"synthetic_night: {n_frames} exposures do not fit in {night_hours} h")
    alt = approx_field_altitude(jd, ra_deg, dec_deg, latitude_deg, longitude_deg)
    if np.any(alt < 5.0):
        raise InputError("synthetic_night: the field is below 5 deg altitude; use centre_on_transit=True or another start_jd")
    airmass = hardie_airmass(90.0 - alt)
    bjd = approx_bjd_tdb(jd, ra_deg, dec_deg)

    # --- true magnitudes ----------------------------------------------------------
    amp = amplitude_v * (1.0 + 0.31 * slope)  # B larger than V, redder bands smaller (RR-Lyrae-like)
    shape = pulsation_template(((bjd - epoch_bjd_tdb) / period_d) % 1.0)
    mag_true = np.broadcast_to(std_mean[band_idx], (n_frames, n_stars)).copy()
    mag_true[:, 0] += amp[band_idx] * shape
    i_b = bands.index("B") if "B" in bands else None
    i_v = bands.index("V") if "V" in bands else None
    colour = np.broadcast_to(bv, (n_frames, n_stars)).copy()
    if i_b is not None and i_v is not None:
        colour[:, 0] = bv[0] + (amp[i_b] - amp[i_v]) * shape

    # --- instrument ---------------------------------------------------------------
    X = airmass[:, None]
    zp = -prm[band_idx, 1] + 0.01 * rng.standard_normal() + 0.01 * rng.standard_normal() * (jd - jd.mean()) * 24.0
    zp = zp + rng.exponential(0.004, n_frames)
    m_inst = (mag_true + prm[band_idx, 2][:, None] * colour + prm[band_idx, 3][:, None] * X
              + prm[band_idx, 4][:, None] * X * colour + zp[:, None])
    t = exptime[:, None]
    n_e = t * mag_to_flux(m_inst)
    sky_px = (exptime * mag_to_flux(prm[band_idx, 5], prm[band_idx, 1]) * tel.pixel_scale_arcsec**2 * airmass)[:, None]
    dark_px = tel.dark_e_per_s * t
    sig_e = ccd_noise_e(n_e, tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e)
    sig_sc = scintillation_sigma(tel.aperture_cm, X, elevation_m, t, 1.5)
    z = rng.standard_normal((2, n_frames, n_stars))
    n_meas = n_e * (1.0 + sig_sc * z[0]) + sig_e * z[1]
    n_meas = np.clip(n_meas, 1e-3 * n_e, None)
    mag = flux_to_mag(n_meas / t)
    mag_err = mag_err_from_snr(ccd_snr(n_meas, tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e))
    flag = (rng.random((n_frames, n_stars)) < flag_fraction).astype(np.int64)
    # A flagged measurement is bad: here clipped (saturated-like), fainter by 0.02-0.3 mag.
    mag = np.where(flag == 1, mag + rng.uniform(0.02, 0.3, flag.shape), mag)
    keep = (rng.random((n_frames, n_stars)) >= missing_fraction).ravel()
    # Below a signal-to-noise of 5 the upstream photometry reports no measurement.
    keep &= (mag_err <= mag_err_from_snr(5.0)).ravel()

    # --- table --------------------------------------------------------------------
    date = night_label(np.array([jd[0]]), longitude_deg)[0].replace("-", "")
    frames = np.char.add(date + "-", np.char.zfill(np.arange(1, n_frames + 1).astype(str), 4 if n_frames < 10000 else 6))
    ids_arr = np.array(ids, dtype=object)
    df = pd.DataFrame(
        {
            "jd": np.repeat(jd, n_stars)[keep],
            "band": np.repeat(np.array(bands, dtype=object)[band_idx], n_stars)[keep],
            "star": np.tile(ids_arr, n_frames)[keep],
            "mag": mag.ravel()[keep],
            "mag_err": mag_err.ravel()[keep],
            "airmass": np.repeat(airmass, n_stars)[keep],
            "exptime": np.repeat(exptime, n_stars)[keep],
            "flag": flag.ravel()[keep],
            "frame": np.repeat(frames.astype(object), n_stars)[keep],
        }
    )
    df.attrs["truth"] = {
        "target": "V1", "period_d": period_d, "epoch_bjd_tdb": epoch_bjd_tdb,
        "amplitude_p2p": {b: float(a) for b, a in zip(bands, amp)},
    }
    entries = []
    for i, (sid, role) in enumerate(zip(ids, roles)):
        if role == "target":
            entries.append((sid, role, {}, {}))
        else:
            entries.append((sid, role, {b: float(np.round(cat[j, i], 3)) for j, b in enumerate(bands)},
                            {b: float(np.round(cat_err_v[i] * (1.0 + 0.4 * abs(slope[j])), 3)) for j, b in enumerate(bands)}))
    toml = _toml_text(f"Synthetic field (field seed {field_seed}, invented)", ra_deg, dec_deg, latitude_deg,
                      longitude_deg, elevation_m, entries, "Synthetic scale-test field from varstar.simulate.synthetic_night.")
    return toml, df


# ----------------------------------------------------------------------------
# Files (the only part of this module that writes)
# ----------------------------------------------------------------------------


def _col_text(values: np.ndarray, fmt: str) -> np.ndarray:
    """Format a float column with ``fmt``; NaN -> empty; '-0.000' -> '0.000'."""
    v = np.asarray(values, dtype=float)
    fin = np.isfinite(v)
    out = np.full(v.shape, "", dtype=object)
    if fin.any():
        s = np.char.mod(fmt, v[fin])
        neg0 = np.char.startswith(s, "-") & (np.char.strip(s, "-0.") == "")
        s = np.where(neg0, np.char.lstrip(s, "-"), s)
        out[fin] = s.astype(object)
    return out


_LONG_FORMATS = {"jd": "%.6f", "mag": "%.4f", "mag_err": "%.5f", "airmass": "%.4f", "exptime": "%g"}


def measurements_csv(df: pd.DataFrame) -> str:
    """Long-form measurement table as CSV text (deterministic formatting)."""
    cols = [c for c in MEASUREMENT_COLUMNS if c in df.columns]
    out = pd.DataFrame({c: (_col_text(df[c].to_numpy(), _LONG_FORMATS[c]) if c in _LONG_FORMATS else df[c].astype(str).to_numpy(dtype=object))
                        for c in cols})
    return out.to_csv(index=False, lineterminator="\n")


def to_wide(df: pd.DataFrame, star_ids: Sequence[str]) -> pd.DataFrame:
    """Long-form table -> wide form: one row per exposure (``jd, band, exptime, frame``),
    ``<id>`` and ``<id>_err`` per star.  Flagged measurements become empty cells,
    as a wide-form producer would leave them."""
    good = df[df["flag"] == 0]
    exp = df.drop_duplicates("frame")[["jd", "band", "exptime", "frame"]].reset_index(drop=True)
    pos = pd.Index(exp["frame"]).get_indexer(good["frame"])
    star_pos = pd.Index(list(star_ids)).get_indexer(good["star"])
    mag = np.full((len(exp), len(star_ids)), np.nan)
    err = np.full_like(mag, np.nan)
    mag[pos, star_pos] = good["mag"].to_numpy()
    err[pos, star_pos] = good["mag_err"].to_numpy()
    cols: dict[str, Any] = {c: exp[c].to_numpy() for c in exp.columns}
    for j, s in enumerate(star_ids):
        cols[s] = mag[:, j]
        cols[f"{s}_err"] = err[:, j]
    return pd.DataFrame(cols)


def wide_csv(wide: pd.DataFrame, star_ids: Sequence[str]) -> str:
    """Wide-form table as CSV text (deterministic formatting, empty cells for missing)."""
    cols: dict[str, Any] = {
        "jd": _col_text(wide["jd"].to_numpy(), "%.6f"),
        "band": wide["band"].astype(str).to_numpy(dtype=object),
        "exptime": _col_text(wide["exptime"].to_numpy(), "%g"),
        "frame": wide["frame"].astype(str).to_numpy(dtype=object),
    }
    for s in star_ids:
        cols[s] = _col_text(wide[s].to_numpy(), "%.4f")
        cols[f"{s}_err"] = _col_text(wide[f"{s}_err"].to_numpy(), "%.5f")
    return pd.DataFrame(cols).to_csv(index=False, lineterminator="\n")


def truth_csv(truth: pd.DataFrame) -> str:
    """The truth table's file columns (``jd, bjd_tdb, band, star, role, mag_true, airmass, cloud``) as CSV text."""
    cols = {
        "jd": _col_text(truth["jd"].to_numpy(), "%.6f"),
        "bjd_tdb": _col_text(truth["bjd_tdb"].to_numpy(), "%.6f"),
        "band": truth["band"].to_numpy(dtype=object),
        "star": truth["star"].to_numpy(dtype=object),
        "role": truth["role"].to_numpy(dtype=object),
        "mag_true": _col_text(truth["mag_true"].to_numpy(), "%.4f"),
        "airmass": _col_text(truth["airmass"].to_numpy(), "%.4f"),
        "cloud": truth["cloud"].astype(int).astype(str).to_numpy(dtype=object),
    }
    return pd.DataFrame(cols).to_csv(index=False, lineterminator="\n")


def series_files(series: SimulatedSeries, scenario: Scenario, wide_nights: Sequence[int] | None = None) -> dict[str, str]:
    """File name -> text of everything :func:`write_series` writes (pure; no I/O)."""
    wide = set([scenario.wide_form_night] if wide_nights is None and scenario.wide_form_night is not None else (wide_nights or ()))
    star_ids = [s.id for s in scenario.stars]
    files: dict[str, str] = {"target.toml": target_toml(scenario)}
    names = {}
    for i, (ev, df) in enumerate(zip(series.evenings, series.nights)):
        if i in wide:
            name = f"night-{ev}-wide.csv"
            files[name] = wide_csv(to_wide(df, star_ids), star_ids)
        else:
            name = f"night-{ev}.csv"
            files[name] = measurements_csv(df)
        names[ev] = name
    files["truth.csv"] = truth_csv(series.truth)
    info = dict(series.info)
    info["files"] = {"target": "target.toml", "nights": names, "truth": "truth.csv",
                     "truth_columns": list(TRUTH_FILE_COLUMNS)}
    info["scenario"] = scenario.to_dict()
    files["truth.json"] = json.dumps(info, indent=2, ensure_ascii=False) + "\n"
    return files


def write_series(series: SimulatedSeries, scenario: Scenario, directory: str | Path,
                 wide_nights: Sequence[int] | None = None) -> list[Path]:
    """Write ``target.toml``, one ``night-YYYY-MM-DD.csv`` per night (``-wide.csv`` for the
    wide-form night(s), by default ``scenario.wide_form_night``), ``truth.csv`` and
    ``truth.json`` into ``directory``.  Returns the paths written."""
    d = Path(directory)
    d.mkdir(parents=True, exist_ok=True)
    written = []
    for name, text in series_files(series, scenario, wide_nights).items():
        p = d / name
        p.write_bytes(text.encode("utf-8"))
        written.append(p)
    return written


# ----------------------------------------------------------------------------
# A standard field for fitting transformation coefficients (invented)
# ----------------------------------------------------------------------------


def standard_field_scenario() -> Scenario:
    """An invented field of twelve standard stars, observed with the demo telescope.

    "Lantern Cluster" is made up.  Its stars span B-V from about 0 to 1.6 (the
    trade wants at least ~1 mag of colour to pin down the slopes, common
    practice) with small catalogue errors, as standard-star catalogues have.
    It is observed for half an hour at the start of the demo's first night, with
    the same filters, camera and colour terms as the demo field, so the fitted
    coefficients apply to the demo series.
    """
    demo = demo_scenario()
    V = (10.62, 11.05, 11.48, 11.90, 12.21, 12.57, 12.83, 13.12, 13.40, 13.66, 13.95, 14.22)
    BV = (0.02, 1.48, 0.35, 0.91, 0.18, 1.21, 0.64, 1.59, 0.47, 0.08, 1.03, 0.76)
    errs = {"V": 0.006, "B": 0.008}
    stars = tuple(
        SimStar(f"S{k + 1:02d}", "target" if k == 0 else "comparison", V=v, BV=c, catalog_err=errs)
        for k, (v, c) in enumerate(zip(V, BV))
    )
    return dataclasses.replace(
        demo,
        field_name="Lantern Cluster (invented standard field)",
        ra_deg=318.40,
        dec_deg=9.75,
        stars=stars,
        nights=(NightPlan("2026-09-11", start_delay_h=0.0, max_hours=0.5, seeing_arcsec=2.5),),
        clouds=(),
        seed=demo.seed + 101,
        n_cosmic=0,
        missing_fraction=0.0,
        wide_form_night=None,
        published_ephemeris=None,
    )


def standards_toml(scenario: Scenario) -> str:
    """The standard field's star list (``[field]`` and ``[[stars]]`` with B and V) as TOML."""
    cat = catalogue(scenario)
    lines = [
        f"# {scenario.field_name}: invented standard stars for varstar's demo (seed {scenario.seed}).",
        "# Catalogue values = truth + simulated catalogue error.",
        "",
        "[field]",
        f"name = {json.dumps(scenario.field_name)}",
    ]
    for s in scenario.stars:
        sub = cat[cat["star"] == s.id].set_index("band")
        lines += ["", "[[stars]]", f"id = {json.dumps(s.id)}"]
        lines += [f"{b} = {_fmt(sub.loc[b, 'catalog'], 3)}" for b in ("V", "B")]
        lines += [f"{b}_err = {_fmt(sub.loc[b, 'catalog_err'], 3)}" for b in ("V", "B")]
    return "\n".join(lines) + "\n"


def standard_field_files(scenario: Scenario | None = None) -> dict[str, str]:
    """``standards.toml`` and ``standards.csv`` (one half-hour run) of the invented standard field."""
    scenario = scenario or standard_field_scenario()
    series = simulate(scenario)
    return {"standards.toml": standards_toml(scenario), "standards.csv": measurements_csv(series.nights[0])}


def demo_files() -> dict[str, str]:
    """Every file of the shipped demo series: the demo field's nights and truth, and the standard field."""
    scenario = demo_scenario()
    files = series_files(simulate(scenario), scenario)
    files.update(standard_field_files())
    return files
