"""Times and airmass: JD(UTC) -> BJD_TDB and HJD(UTC), airmass, night labels.

This is the only module that knows about astropy time scales.  Everything runs
offline: astropy is told, for the duration of each call only, never to download
IERS tables and to accept the bundled ones (polar motion and UT1 - UTC matter
here at the millisecond level at most).
"""

from __future__ import annotations

import contextlib
import functools
import warnings
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from .errors import InputError

# Spacing of the exact evaluations when a night has many exposures.  The
# barycentric correction is smooth (annual term ~ 500 s, diurnal term ~ 20 ms):
# linear interpolation between nodes h apart errs by A (omega h)^2 / 8, under a
# microsecond for h = 2 min, and the direction to the target (for airmass) by
# ~1e-5 rad.  astropy's own evaluation costs ~0.1 ms per time, which would be
# the largest cost of ingesting a long night.
_NODE_SPACING_D = 2.0 / 1440.0
_EXACT_BELOW = 64


@functools.lru_cache(maxsize=1)
def _bundled_iers_a():
    """The IERS-A table shipped with astropy, read once per process (it never changes)."""
    from astropy.utils import iers

    return iers.IERS_A.open(iers.IERS_A_FILE)


@contextlib.contextmanager
def offline_astropy() -> Iterator[None]:
    """Configure astropy for offline use within a ``with`` block.

    No IERS download is attempted, the bundled tables are used even when they
    are old, and the warnings about it (harmless at our precision) are muted.
    """
    from astropy.utils import iers

    with (
        iers.conf.set_temp("auto_download", False),
        iers.conf.set_temp("auto_max_age", None),
        iers.conf.set_temp("iers_degraded_accuracy", "ignore"),
        warnings.catch_warnings(),
        # The bundled IERS-A table alone (1973 on, with predictions a year ahead):
        # loading it takes a third of the time of the merged A+B table astropy
        # would otherwise build on every start, and UT1 and polar motion change
        # BJD by microseconds at most.
        iers.earth_orientation_table.set(_bundled_iers_a()),
    ):
        warnings.filterwarnings("ignore", module="erfa")
        warnings.filterwarnings("ignore", message=".*(IERS|polar motion|leap.second|dubious year).*")
        from astropy.utils.exceptions import AstropyWarning

        warnings.filterwarnings("ignore", category=AstropyWarning)
        yield


@dataclass(frozen=True)
class ExposureTimes:
    """Times and airmass of a set of exposures (all arrays of the input's shape)."""

    jd_utc: np.ndarray
    bjd_tdb: np.ndarray
    hjd_utc: np.ndarray
    airmass: np.ndarray
    altitude_deg: np.ndarray


def hardie_airmass(zenith_deg: np.ndarray) -> np.ndarray:
    """Airmass from the true zenith distance, Hardie (1962).

    X = sec z - 0.0018167 (sec z - 1) - 0.002875 (sec z - 1)^2 - 0.0008083 (sec z - 1)^3.
    The formula is meant for z up to ~85 deg (beyond, its cubic turns over and
    even goes negative), so NaN is returned for z > 85 deg.
    """
    z = np.asarray(zenith_deg, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = 1.0 / np.cos(np.radians(z))
        d = s - 1.0
        x = s - 0.0018167 * d - 0.002875 * d**2 - 0.0008083 * d**3
    return np.where(z <= 85.0, x, np.nan)


def _location_and_coord(ra_deg: float, dec_deg: float, latitude_deg: float, longitude_deg: float, elevation_m: float):
    import astropy.units as u
    from astropy.coordinates import EarthLocation, SkyCoord

    loc = EarthLocation.from_geodetic(longitude_deg * u.deg, latitude_deg * u.deg, elevation_m * u.m)
    coord = SkyCoord(ra_deg * u.deg, dec_deg * u.deg, frame="icrs")
    return loc, coord


def _exact(jd: np.ndarray, loc, coord) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Corrections BJD_TDB - JD_UTC and HJD_UTC - JD_UTC (days), and altitude, by astropy.

    The corrections are returned rather than the dates so that no precision is
    lost to the float64 spacing of a Julian Date (~40 microseconds).
    """
    from astropy.coordinates import AltAz
    from astropy.time import Time

    t = Time(jd, format="jd", scale="utc", location=loc)
    ltt_bary = t.light_travel_time(coord, "barycentric")
    ltt_helio = t.light_travel_time(coord, "heliocentric")
    tdb = t.tdb
    bary = (tdb.jd1 - t.jd1) + (tdb.jd2 - t.jd2) + ltt_bary.to_value("day")
    helio = ltt_helio.to_value("day")
    # Unit vector towards the target in the horizontal frame (east, north, up
    # in some order): smooth in time even through a transit near the zenith,
    # where the altitude itself has a cusp a spline cannot follow.
    xyz = coord.transform_to(AltAz(obstime=t, location=loc)).cartesian.xyz.value
    return np.asarray(bary, float), np.asarray(helio, float), np.asarray(xyz, dtype=float)


def exposure_times(
    jd_utc: np.ndarray,
    ra_deg: float,
    dec_deg: float,
    latitude_deg: float,
    longitude_deg: float,
    elevation_m: float,
) -> ExposureTimes:
    """Convert mid-exposure JD(UTC) to BJD_TDB and HJD(UTC), with airmass.

    Parameters
    ----------
    jd_utc
        Julian Dates in UTC (any shape).
    ra_deg, dec_deg
        ICRS coordinates of the target, degrees.
    latitude_deg, longitude_deg, elevation_m
        Geodetic site position (longitude east positive).

    Returns
    -------
    ExposureTimes
        BJD_TDB follows Eastman, Siverd & Gaudi (2010): TDB plus the Roemer delay
        to the solar-system barycentre for the observer's position (astropy,
        built-in ephemeris).  HJD is in UTC, as it is traditionally quoted.
        Airmass is Hardie (1962) from the geometric altitude.
    """
    jd = np.asarray(jd_utc, dtype=float)
    flat = jd.ravel()
    if flat.size == 0:
        empty = np.empty(jd.shape)
        return ExposureTimes(jd, empty, empty.copy(), empty.copy(), empty.copy())
    loc, coord = _location_and_coord(ra_deg, dec_deg, latitude_deg, longitude_deg, elevation_m)
    uniq, inverse = np.unique(flat, return_inverse=True)
    span = uniq[-1] - uniq[0]
    n_nodes = int(np.ceil(span / _NODE_SPACING_D)) + 1
    with offline_astropy():
        if uniq.size <= max(_EXACT_BELOW, 2 * n_nodes) or span > 2.0:
            d_bary, d_helio, xyz = _exact(uniq, loc, coord)
        else:
            nodes = np.linspace(uniq[0], uniq[-1], n_nodes)
            bary_n, helio_n, xyz_n = _exact(nodes, loc, coord)
            d_bary = np.interp(uniq, nodes, bary_n)
            d_helio = np.interp(uniq, nodes, helio_n)
            xyz = np.stack([np.interp(uniq, nodes, comp) for comp in xyz_n])
    alt = np.degrees(np.arctan2(xyz[2], np.hypot(xyz[0], xyz[1])))
    bjd = uniq + d_bary
    hjd = uniq + d_helio
    airmass = hardie_airmass(90.0 - alt)
    shape = jd.shape
    return ExposureTimes(
        jd_utc=jd,
        bjd_tdb=bjd[inverse].reshape(shape),
        hjd_utc=hjd[inverse].reshape(shape),
        airmass=airmass[inverse].reshape(shape),
        altitude_deg=alt[inverse].reshape(shape),
    )


def night_label(jd_utc: np.ndarray, longitude_deg: float) -> np.ndarray:
    """Label each time with the calendar date of the evening its night began.

    Observers name a night by its evening date at the site (common practice):
    local mean solar time is shifted back by 12 hours so that a whole night,
    dusk to dawn, carries one label.  Returns ``YYYY-MM-DD`` strings.
    """
    jd = np.asarray(jd_utc, dtype=float)
    lon = (longitude_deg + 180.0) % 360.0 - 180.0
    # JD n.5 is 0h UT; local mean time = UT + longitude/15 h; minus 12 h.
    day_number = np.floor(jd + lon / 360.0)  # JD of local noon before, as an integer day
    days = (day_number - 2440588).astype("int64")  # JD 2440587.5 = 1970-01-01 0h
    return np.datetime_as_string(days.astype("datetime64[D]"), unit="D")


def _site_location(site) -> tuple[float, float, float]:
    """(latitude_deg, longitude_deg, elevation_m) of a :class:`varstar.target.Site`-like object."""
    try:
        return float(site.latitude_deg), float(site.longitude_deg), float(site.elevation_m)
    except AttributeError as exc:  # a programming error, not a user's
        raise TypeError("site must have latitude_deg, longitude_deg and elevation_m (varstar.target.Site)") from exc


def to_jd_utc(times: np.ndarray, system: str, ra_deg: float, dec_deg: float, site) -> np.ndarray:
    """JD(UTC) of times given in ``system``: ``"utc"`` (as they are), ``"hjd_utc"`` or ``"bjd_tdb"``.

    The inverse of :func:`exposure_times` for the target at ``ra_deg``,
    ``dec_deg`` seen from ``site`` (see :func:`bjd_tdb_to_utc`).
    """
    if system == "utc":
        return np.asarray(times, dtype=float)
    if system not in ("hjd_utc", "bjd_tdb"):
        raise ValueError(f"unknown time system {system!r}")
    return bjd_tdb_to_utc(times, ra_deg, dec_deg, site, heliocentric=system == "hjd_utc")


def bjd_tdb_to_utc(bjd_tdb: np.ndarray, ra_deg: float, dec_deg: float, site, *, heliocentric: bool = False) -> np.ndarray:
    """Invert :func:`exposure_times`: the JD(UTC) at which the site sees a given BJD_TDB.

    BJD_TDB = JD_UTC + c(JD_UTC), with c the TT - UTC, TDB - TT and barycentric
    light-time correction of :func:`exposure_times`.  c changes by at most
    ~1e-4 s per second (the annual term, 500 s x 2 pi / 1 yr), so the
    fixed-point iteration ``jd = bjd - c(jd)`` gains four orders of magnitude
    per step; three steps from ``jd = bjd`` leave an error far below the
    float64 spacing of a JD (40 microseconds).

    Parameters
    ----------
    bjd_tdb
        Barycentric Julian Dates (TDB), any shape.
    ra_deg, dec_deg
        ICRS coordinates of the target, degrees.
    site
        Observing site (:class:`varstar.target.Site`).

    heliocentric
        The dates are HJD(UTC) instead (the heliocentric light time alone,
        which changes as slowly: the same iteration).

    Returns
    -------
    numpy.ndarray
        JD(UTC), same shape.
    """
    bjd = np.asarray(bjd_tdb, dtype=float)
    if bjd.size == 0:
        return np.empty(bjd.shape)
    lat, lon, elev = _site_location(site)
    loc, coord = _location_and_coord(ra_deg, dec_deg, lat, lon, elev)
    uniq, inverse = np.unique(bjd.ravel(), return_inverse=True)
    jd = uniq.copy()
    with offline_astropy():
        for _ in range(3):
            bary, helio, _ = _exact(jd, loc, coord)
            jd = uniq - (helio if heliocentric else bary)
    return jd[inverse].reshape(bjd.shape)


def altitudes(jd_utc: np.ndarray, ra_deg: float, dec_deg: float, site) -> tuple[np.ndarray, np.ndarray]:
    """Geometric altitudes (degrees, no refraction) of the target and of the Sun.

    For planning: whether a predicted extremum is observable (target up, Sun
    below -18 deg for astronomical darkness).  astropy ``AltAz`` with the
    bundled Earth-orientation table; the Sun from ``get_body("sun")``
    (topocentric, built-in ephemeris).

    Parameters
    ----------
    jd_utc
        Julian Dates (UTC), any shape.
    ra_deg, dec_deg
        ICRS coordinates of the target, degrees.
    site
        Observing site (:class:`varstar.target.Site`).

    Returns
    -------
    (target_alt_deg, sun_alt_deg)
        Arrays of the input's shape.
    """
    jd = np.asarray(jd_utc, dtype=float)
    if jd.size == 0:
        return np.empty(jd.shape), np.empty(jd.shape)
    from astropy.coordinates import AltAz, get_body
    from astropy.time import Time

    lat, lon, elev = _site_location(site)
    loc, coord = _location_and_coord(ra_deg, dec_deg, lat, lon, elev)
    with offline_astropy():
        t = Time(jd.ravel(), format="jd", scale="utc", location=loc)
        frame = AltAz(obstime=t, location=loc)
        target_alt = coord.transform_to(frame).alt.deg
        sun_alt = get_body("sun", t, location=loc).transform_to(frame).alt.deg
    return np.asarray(target_alt, float).reshape(jd.shape), np.asarray(sun_alt, float).reshape(jd.shape)


def parse_utc(text: str, *, what: str = "date") -> float:
    """JD(UTC) of a date or time given as text: ``YYYY-MM-DD`` (0h UTC), ISO ``YYYY-MM-DDTHH:MM[:SS]``, or a JD.

    Raises InputError naming ``what`` for anything else.
    """
    from astropy.time import Time

    s = str(text).strip()
    try:
        jd = float(s)
    except ValueError:
        jd = None
    if jd is not None:
        if not (2_300_000.0 < jd < 2_600_000.0):
            raise InputError(f"{what} {s!r}: a number is read as a full Julian Date (2,300,000-2,600,000)")
        return jd
    try:
        with offline_astropy():
            return float(Time(s.replace(" ", "T"), format="isot" if "T" in s or " " in s else "iso", scale="utc").jd)
    except ValueError:
        raise InputError(f"{what} {s!r}: give YYYY-MM-DD, YYYY-MM-DDTHH:MM (UTC) or a Julian Date") from None


def utc_iso(jd_utc: np.ndarray) -> list[str]:
    """ISO 8601 UTC text (to the second, with a trailing Z) of Julian Dates in UTC."""
    from astropy.time import Time

    with offline_astropy():
        t = Time(np.atleast_1d(np.asarray(jd_utc, dtype=float)), format="jd", scale="utc", precision=0)
        return [s + "Z" for s in t.isot]
