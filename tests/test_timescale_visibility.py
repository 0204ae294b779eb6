"""Tests of varstar.timescale.bjd_tdb_to_utc and varstar.timescale.altitudes.

References used (named again beside each check):

* astropy, the reference library (REFERENCES.md "Time"): BJD_TDB computed
  directly as ``t.tdb + t.light_travel_time(coord, 'barycentric')``; altitudes
  with ``AltAz`` and the Sun from ``get_sun`` (geocentric, so it differs from
  varstar's topocentric Sun by the solar parallax, 8.8 arcsec at most).
* varstar.timescale.exposure_times (itself tested against astropy in
  tests/test_timescale.py): the inversion must undo it.
* Spherical astronomy, common practice: at upper culmination an object's
  altitude is 90 - |latitude - declination|, at lower culmination
  latitude + declination - 90 (northern site); the Sun's declination is
  -23.44 deg at the December solstice (obliquity of the ecliptic, from memory).

The site and the target are invented.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from varstar.target import Site
from varstar.timescale import altitudes, bjd_tdb_to_utc, exposure_times

SITE = Site(latitude_deg=45.0, longitude_deg=10.0, elevation_m=300.0)
RA, DEC = 283.51, 12.25
SECONDS_PER_DAY = 86400.0


def jd_of(year, month, day, hour=0, minute=0):
    """JD(UTC) from a calendar date; JD 2440587.5 is 1970-01-01 0h UT (common practice)."""
    delta = dt.datetime(year, month, day, hour, minute) - dt.datetime(1970, 1, 1)
    return 2440587.5 + delta.total_seconds() / SECONDS_PER_DAY


@pytest.fixture(autouse=True)
def _reference_offline():
    """Keep the astropy reference computations offline too (all dates are in the bundled tables)."""
    from astropy.utils import iers

    with iers.conf.set_temp("auto_download", False):
        yield


def site_exposure_times(jd):
    return exposure_times(jd, RA, DEC, SITE.latitude_deg, SITE.longitude_deg, SITE.elevation_m)


def test_bjd_to_utc_undoes_exposure_times():
    # Reference: varstar.timescale.exposure_times; required < 1e-7 d (8.6 ms).
    # Dates over two years (exact evaluation) and one long night of 300
    # exposures (exposure_times interpolates there; < 1 microsecond error).
    jd = np.array([jd_of(2024, 1, 3, 4, 10), jd_of(2024, 6, 21, 9, 30), jd_of(2024, 12, 21, 23, 20),
                   jd_of(2025, 8, 30, 7, 15)])
    night = jd_of(2025, 9, 11, 2, 0) + np.arange(300) * 90.0 / SECONDS_PER_DAY
    for sample in (jd, night):
        bjd = site_exposure_times(sample).bjd_tdb
        back = bjd_tdb_to_utc(bjd, RA, DEC, SITE)
        assert back.shape == sample.shape
        assert np.max(np.abs(back - sample)) < 1e-7
        # In fact it is at the float64 spacing of a JD (40 microseconds) or better.
        assert np.max(np.abs(back - sample)) * SECONDS_PER_DAY < 1e-4


def test_bjd_to_utc_against_astropy_directly():
    # Reference: astropy (REFERENCES.md "Time"): BJD_TDB of the returned
    # JD(UTC), computed without varstar, gives back the BJD_TDB asked for.
    import astropy.units as u
    from astropy.coordinates import EarthLocation, SkyCoord
    from astropy.time import Time

    bjd = np.array([2460311.43125, 2460480.9, 2460700.25])
    jd = bjd_tdb_to_utc(bjd, RA, DEC, SITE)
    loc = EarthLocation.from_geodetic(SITE.longitude_deg * u.deg, SITE.latitude_deg * u.deg, SITE.elevation_m * u.m)
    t = Time(jd, format="jd", scale="utc", location=loc)
    ref = t.tdb + t.light_travel_time(SkyCoord(RA * u.deg, DEC * u.deg), "barycentric")
    off_s = ((bjd - ref.jd1) - ref.jd2) * SECONDS_PER_DAY
    assert np.max(np.abs(off_s)) < 1e-4
    # The correction itself is real: JD(UTC) and BJD_TDB differ by the light
    # time (at most ~500 s, REFERENCES.md) plus TT - UTC = 69.184 s.
    diff_s = (bjd - jd) * SECONDS_PER_DAY
    assert np.all(np.abs(diff_s - 69.184) < 520.0)
    assert np.ptp(diff_s) > 100.0


def test_altitudes_against_astropy_directly():
    # Reference: astropy AltAz with get_sun (REFERENCES.md "Time", reference library).
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_sun
    from astropy.time import Time

    jd = jd_of(2025, 3, 10, 0, 0) + np.arange(0.0, 1.0, 1.0 / 48.0)
    target_alt, sun_alt = altitudes(jd, RA, DEC, SITE)
    loc = EarthLocation.from_geodetic(SITE.longitude_deg * u.deg, SITE.latitude_deg * u.deg, SITE.elevation_m * u.m)
    t = Time(jd, format="jd", scale="utc", location=loc)
    frame = AltAz(obstime=t, location=loc)
    ref_target = SkyCoord(RA * u.deg, DEC * u.deg).transform_to(frame).alt.deg
    ref_sun = get_sun(t).transform_to(frame).alt.deg
    assert np.max(np.abs(target_alt - ref_target)) < 1e-6
    assert np.max(np.abs(sun_alt - ref_sun)) < 0.005  # solar parallax 8.8" = 0.0024 deg
    assert target_alt.shape == sun_alt.shape == jd.shape
    # Over a day both rise and set at this latitude.
    assert target_alt.min() < 0 < target_alt.max()
    assert sun_alt.min() < 0 < sun_alt.max()


def test_sun_at_winter_midnight_and_summer_noon():
    # Spherical astronomy (common practice): at the December solstice the Sun
    # (declination -23.44 deg, from memory) culminates below the horizon at local
    # midnight at altitude lat + dec - 90 = 45 - 23.44 - 90 = -68.44 deg; at the
    # June solstice it culminates at noon at 90 - |lat - dec| = 68.44 deg.
    # Local mean midnight at longitude 10 E is 23:20 UT; the equation of time
    # (a few minutes) moves the Sun only ~0.01 deg near culmination.
    # Astronomical darkness (Sun below -18 deg, common practice) at midnight.
    midnight = jd_of(2024, 12, 20, 23, 20)
    noon = jd_of(2025, 6, 21, 11, 20)
    _, sun = altitudes(np.array([midnight, noon]), RA, DEC, SITE)
    assert sun[0] < -18.0
    assert sun[0] == pytest.approx(45.0 - 23.44 - 90.0, abs=0.3)
    assert sun[1] == pytest.approx(90.0 - (45.0 - 23.44), abs=0.3)


def test_target_culmination_altitude():
    # Spherical astronomy (common practice): the highest altitude over a day is
    # 90 - |lat - dec| = 90 - 32.75 = 57.25 deg.  The apparent declination differs
    # from the J2000/ICRS one by precession (~0.15 deg over 25 years at most),
    # so allow 0.3 deg.
    jd = jd_of(2025, 7, 1, 0, 0) + np.arange(0.0, 1.0, 1.0 / 1440.0)
    target_alt, _ = altitudes(jd, RA, DEC, SITE)
    assert target_alt.max() == pytest.approx(90.0 - abs(45.0 - DEC), abs=0.3)
    # Lower culmination: lat + dec - 90 = -32.75 deg.
    assert target_alt.min() == pytest.approx(45.0 + DEC - 90.0, abs=0.3)


def test_empty_inputs_keep_their_shape():
    assert bjd_tdb_to_utc(np.array([]), RA, DEC, SITE).shape == (0,)
    a, s = altitudes(np.empty((0,)), RA, DEC, SITE)
    assert a.shape == s.shape == (0,)
