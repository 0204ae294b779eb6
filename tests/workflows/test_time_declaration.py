"""Declared time columns: MJD, HJD(UTC) or BJD_TDB, at the start, middle or end of the exposure.

Each declared file is made from a demo night by converting its JD(UTC) mid-exposure
times with astropy directly (the reference library for time scales, independent of
varstar.timescale); ingested with the declaration, the archive must hold the same
JD(UTC) mid-exposure times and the same light curve as the original file.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import varstar
from varstar.errors import InputError

from helpers import DEMO, run

NIGHT = DEMO / "night-2026-09-11.csv"


def _astropy_times(jd_utc: np.ndarray, system: str) -> np.ndarray:
    """JD(UTC) -> HJD(UTC) or BJD_TDB for the demo target and site, by astropy."""
    import astropy.units as u
    from astropy.coordinates import EarthLocation, SkyCoord
    from astropy.time import Time
    from astropy.utils import iers

    t = varstar.read_target(DEMO / "target.toml")
    loc = EarthLocation.from_geodetic(t.site.longitude_deg * u.deg, t.site.latitude_deg * u.deg, t.site.elevation_m * u.m)
    coord = SkyCoord(t.ra_deg * u.deg, t.dec_deg * u.deg)
    with iers.conf.set_temp("auto_download", False), iers.conf.set_temp("auto_max_age", None):
        tm = Time(jd_utc, format="jd", scale="utc", location=loc)
        if system == "hjd_utc":
            return (tm + tm.light_travel_time(coord, "heliocentric")).utc.jd
        return (tm.tdb + tm.light_travel_time(coord, "barycentric")).jd


def _declared_file(tmp_path, system: str, point: str, fmt: str):
    df = pd.read_csv(NIGHT)
    jd = df["jd"].to_numpy()
    shift = {"start": -0.5, "mid": 0.0, "end": 0.5}[point] * df["exptime"].to_numpy() / 86400.0
    t = jd + shift if system == "utc" else _astropy_times(jd + shift, system)
    df["jd"] = t - (2400000.5 if fmt == "mjd" else 0.0)
    path = tmp_path / f"night-{system}-{point}-{fmt}.csv"
    df.to_csv(path, index=False, float_format="%.9f")
    return path


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    path = tmp_path_factory.mktemp("ref") / "ref.h5"
    varstar.create_archive(path, varstar.read_target(DEMO / "target.toml"))
    varstar.ingest(path, [NIGHT])
    return varstar.open_archive(path)


@pytest.mark.parametrize("system, point, fmt", [
    ("utc", "mid", "mjd"), ("bjd_tdb", "start", "jd"), ("hjd_utc", "end", "mjd"), ("bjd_tdb", "mid", "mjd"),
])
def test_a_declared_time_column_gives_the_archive_of_the_plain_one(tmp_path, reference, system, point, fmt):
    f = _declared_file(tmp_path, system, point, fmt)
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(DEMO / "target.toml"))
    rep = varstar.ingest(path, [f], time_format=fmt, time_system=system, time_point=point).nights[0]
    assert any("stored as JD(UTC) at mid-exposure" in w for w in rep["warnings"]) or (system, point) == ("utc", "mid")
    got, want = varstar.open_archive(path).exposures(), reference.exposures()
    # 1e-8 d = 0.9 ms: the file's 9 decimals of a day, and the inverse iteration, are far below it
    assert np.abs(got["jd_utc"].to_numpy() - want["jd_utc"].to_numpy()).max() < 1e-8
    a, b = varstar.open_archive(path).lightcurve(), reference.lightcurve()
    assert np.abs(a["bjd_tdb"].to_numpy() - b["bjd_tdb"].to_numpy()).max() < 1e-8
    assert np.allclose(a["mag"], b["mag"], atol=1e-9, rtol=0)


def test_the_target_description_declares_the_time_column(tmp_path, reference):
    f = _declared_file(tmp_path, "bjd_tdb", "start", "mjd")
    text = (DEMO / "target.toml").read_text() + (
        '\n[measurements]\ntime_format = "mjd"\ntime_system = "bjd_tdb"\ntime_point = "start"\n')
    (tmp_path / "t.toml").write_text(text)
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(tmp_path / "t.toml"))
    varstar.ingest(path, [f])
    got = varstar.open_archive(path).exposures()["jd_utc"].to_numpy()
    assert np.abs(got - reference.exposures()["jd_utc"].to_numpy()).max() < 1e-8


def test_time_declaration_mistakes_are_named(tmp_path, capsys):
    text = (DEMO / "target.toml").read_text()
    (tmp_path / "bad.toml").write_text(text + '\n[measurements]\ntime_system = "tt"\n')
    rc, _, err = run(capsys, "init", tmp_path / "x.h5", tmp_path / "bad.toml")
    assert rc == 2 and "[measurements].time_system: 'tt' is not one of utc, hjd_utc, bjd_tdb" in err
    (tmp_path / "bad2.toml").write_text(text + '\n[measurements]\ntimezone = "utc"\n')
    rc, _, err = run(capsys, "init", tmp_path / "y.h5", tmp_path / "bad2.toml")
    assert rc == 2 and "[measurements].timezone is not a key" in err

    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(DEMO / "target.toml"))
    df = pd.read_csv(NIGHT)
    df = df.drop(columns="exptime")
    f = tmp_path / "no-exptime.csv"
    df.to_csv(f, index=False)
    before = path.read_bytes()
    with pytest.raises(InputError, match=r"no-exptime\.csv, line 2: the times are declared as the start"):
        varstar.ingest(path, [f], time_point="start")
    # MJD values read as JD: the hint names the declaration
    mjd = _declared_file(tmp_path, "utc", "mid", "mjd")
    rc, _, err = run(capsys, "ingest", path, mjd)
    assert rc == 2 and "--time-format mjd" in err
    assert path.read_bytes() == before
