"""Cheap astronomy (no astropy): the Sun's position, mean sidereal time, approximate
precession, altitudes and an approximate BJD_TDB good to a few seconds.

Low-precision almanac formulae, for questions that need a tenth of a degree,
not an arcsecond: placing simulated nights (:mod:`varstar.simulate`) and
telling a night exposure from a daylight one (the reduction's plausibility
check).  The pipeline's times and airmasses are exact, from astropy
(:mod:`varstar.timescale`).
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError

__all__ = [
    "AU_LIGHT_S",
    "SIDEREAL_DEG_PER_DAY",
    "TT_MINUS_UTC_S",
    "approx_altitude",
    "approx_bjd_tdb",
    "approx_field_altitude",
    "approx_sun",
    "approx_sun_altitude",
    "date_to_jd0",
    "gmst_deg",
    "precess_approx",
]

#: TT - UTC in seconds since 2017-01-01 (32.184 s + 37 leap seconds; Eastman et al. 2010).
TT_MINUS_UTC_S = 69.184
#: Light time for one astronomical unit, seconds (IAU 2012 au / c; from memory).
AU_LIGHT_S = 499.004784
#: Sidereal rotation rate of the Earth in degrees of hour angle per solar day (from memory).
SIDEREAL_DEG_PER_DAY = 360.98564736629


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


def precess_approx(ra_deg: float, dec_deg: float, jd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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
    ra_d, dec_d = precess_approx(ra_deg, dec_deg, jd_ut)
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
    ra_t, dec_t = precess_approx(ra_deg, dec_deg, jd)
    a_s, d_s = np.radians(ra_s), np.radians(dec_s)
    a_t, d_t = np.radians(ra_t), np.radians(dec_t)
    # Earth's heliocentric vector is minus the Sun's geocentric one.
    cos_angle = np.cos(d_s) * np.cos(d_t) * np.cos(a_s - a_t) + np.sin(d_s) * np.sin(d_t)
    roemer_s = -r * cos_angle * AU_LIGHT_S
    return jd + (TT_MINUS_UTC_S + roemer_s) / 86400.0


def date_to_jd0(date: str) -> float:
    """JD at 0h UT of a calendar date ``YYYY-MM-DD``."""
    try:
        days = np.datetime64(date, "D").astype("int64")
    except ValueError:
        raise InputError(f"night date {date!r}: expected YYYY-MM-DD") from None
    return float(days) + 2440587.5
