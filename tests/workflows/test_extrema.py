"""Timings, O − C, ephemeris updates and predictions on an archive, through the command line.

Truth: the demo field's pulsator (``demo_series/truth.json``: period and epoch of
maximum light, invented).  The target file carries an older, slightly wrong
ephemeris, as observers' files do; the timings must land on the truth within
their errors and the updated ephemeris must recover the true period.
"""

from __future__ import annotations

import csv
import hashlib
import math
import re
from pathlib import Path

import numpy as np
import pytest

from helpers import one_json, run

import varstar  # noqa: E402

TIMING_KEYS = {"bjd_tdb", "err", "method", "band", "type", "cycle", "o_minus_c"}


@pytest.fixture(scope="module")
def demo(demo_data, demo_archive_path):
    return demo_data.folder, demo_archive_path, demo_data.truth


@pytest.fixture
def archive(demo, tmp_path):
    _, src, truth = demo
    dst = tmp_path / "a.h5"
    dst.write_bytes(src.read_bytes())
    return dst, truth


def digest(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def test_timings_land_on_the_truth_and_are_stored_once(capsys, archive, tmp_path):
    path, truth = archive
    rc, out, err = run(capsys, "timings", path, "--json", "-o", tmp_path / "oc.png", "--csv", tmp_path / "t.csv",
                       "--note", "demo run")
    assert rc == 0, err
    d = one_json(out)
    assert len(d["timings"]) >= 4 and d["n_new"] == len(d["timings"])
    for t in d["timings"]:
        assert TIMING_KEYS <= set(t) and t["type"] == "maximum"
        # truth of the simulation: the maximum of cycle E is at epoch + E P
        n = round((t["bjd_tdb"] - truth["epoch"]) / truth["period"])
        true_t = truth["epoch"] + n * truth["period"]
        # within 3 sigma, the truth's epoch rounded to 1e-4 d (truth.json) counted in; a mean curve that
        # ignored the nights' shared calibration errors put the V maxima 1.5 min (5 sigma) early
        assert abs(t["bjd_tdb"] - true_t) < 3 * math.hypot(t["err"], 0.5e-4 / math.sqrt(3)), t
        # the pulsator's maxima are asymmetric: the mean-curve template is the main estimate
        assert t["method"] == "mean-curve template" and t["check_method"] == "kwee-van-woerden"
        assert "demo run" in t["note"]
    fit = d["fit"]
    assert {"epoch", "period", "period_err", "quadratic", "quadratic_err"} <= set(fit)
    assert abs(fit["period"] - truth["period"]) < 4 * fit["period_err"]
    # the archive's older ephemeris is off: O − C shows it, by minutes
    assert all(t["o_minus_c"] < -0.001 for t in d["timings"])
    assert (tmp_path / "oc.png").read_bytes()[:4] == b"\x89PNG"
    rows = list(csv.DictReader((tmp_path / "t.csv").open()))
    assert len(rows) == len(d["timings"])
    assert float(rows[0]["bjd_tdb"]) == pytest.approx(d["timings"][0]["bjd_tdb"], abs=1e-6)
    assert re.fullmatch(r"\d{7}\.\d{6}", rows[0]["bjd_tdb"])
    # stored, and a second run stores nothing twice
    stored = varstar.open_archive(path).timings()
    assert len(stored) == len(d["timings"]) and set(stored["band_name"]) == {"B", "V"}
    rc, out, _ = run(capsys, "timings", path, "--json")
    d2 = one_json(out)
    assert d2["n_new"] == 0 and d2["n_found_again"] == len(d["timings"])
    assert len(varstar.open_archive(path).timings()) == len(d["timings"])


def test_update_keeps_the_ephemeris_history_and_predictions_follow(capsys, archive):
    path, truth = archive
    rc, out, err = run(capsys, "timings", path, "--update", "--json")
    assert rc == 0, err
    d = one_json(out)
    eph = varstar.open_archive(path).ephemerides()
    assert list(eph["ephemeris"]) == [0, 1]
    assert eph["source"].iloc[0].startswith("target description")
    assert eph["period"].iloc[1] == pytest.approx(d["fit"]["period"]) and eph["n_timings"].iloc[1] == len(d["timings"])
    assert d["updated_ephemeris"]["entry"] == 1
    # predictions now come from the new entry: events at epoch + E P of the fit
    rc, out, err = run(capsys, "predict", path, "--from", "2026-12-01", "--to", "2026-12-03", "--json")
    assert rc == 0, err
    p = one_json(out)
    assert p["ephemeris"]["period"] == pytest.approx(d["fit"]["period"])
    for e in p["events"]:
        assert e["bjd_tdb"] == pytest.approx(d["fit"]["epoch"] + e["cycle"] * d["fit"]["period"], abs=1e-9)
    assert len(p["events"]) == 4  # two days at 0.4617 d: 4 maxima


def test_predict_site_visible_matches_astropy_sun_and_target_altitudes(capsys, archive):
    """The night filter against astropy's own Sun and target altitudes (reference library)."""
    from astropy import units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_body
    from astropy.time import Time

    from varstar.timescale import offline_astropy

    path, _ = archive
    rc, out, _ = run(capsys, "predict", path, "--from", "2026-11-01", "--to", "2026-11-15", "--json")
    every = one_json(out)["events"]
    rc, out, _ = run(capsys, "predict", path, "--from", "2026-11-01", "--to", "2026-11-15", "--site-visible",
                     "--min-altitude", "25", "--sun-altitude", "-12", "--json")
    vis = one_json(out)["events"]
    assert 0 < len(vis) < len(every)
    tgt = varstar.open_archive(path).target
    loc = EarthLocation.from_geodetic(tgt.site.longitude_deg * u.deg, tgt.site.latitude_deg * u.deg, tgt.site.elevation_m * u.m)
    with offline_astropy():
        times = Time([e["jd_utc"] for e in every], format="jd", scale="utc")
        frame = AltAz(obstime=times, location=loc)
        sun = get_body("sun", times, loc).transform_to(frame).alt.deg
        star = SkyCoord(tgt.ra_deg * u.deg, tgt.dec_deg * u.deg).transform_to(frame).alt.deg
    expect = [(a >= 25) and (s <= -12) for a, s in zip(star, sun)]
    assert [e["cycle"] for e in vis] == [e["cycle"] for e, ok in zip(every, expect) if ok]
    assert np.allclose([e["sun_altitude_deg"] for e in every], sun, atol=0.05)
    # the UTC text and the JD agree
    assert every[0]["utc"].startswith(Time(every[0]["jd_utc"], format="jd", scale="utc").isot[:16])


def test_a_night_without_a_timeable_extremum_is_refused(capsys, archive):
    path, _ = archive
    before = digest(path)
    rc, out, err = run(capsys, "timings", path, "--night", "2026-09-19")
    assert rc == 2 and out == "" and "no extremum that can be timed" in err and "branch" in err
    assert digest(path) == before


@pytest.mark.parametrize(
    "table, message",
    [
        ("epoch = 2461295.3861\nperiod = -0.46\nkind = \"maximum\"", "period"),
        ("epoch = 61295.3861\nperiod = 0.4617\nkind = \"maximum\"", "MJD"),
        ("epoch = 2461295.3861\nperiod = 0.4617\nkind = \"maximum\"\ntime_system = \"HJD\"", "BJD_TDB"),
        (None, "no ephemeris"),
    ],
)
def test_bad_ephemeris_is_refused_and_nothing_is_stored(capsys, demo, tmp_path, table, message):
    folder, _, _ = demo
    text = (folder / "target.toml").read_text()
    text = re.sub(r"\[ephemeris\][^\[]*", "" if table is None else f"[ephemeris]\n{table}\n\n", text)
    (tmp_path / "t.toml").write_text(text)
    path = tmp_path / "a.h5"
    if table is None or "HJD" in table or "-0.46" in table or "61295" in table:
        # init itself keeps tables it does not check; the ephemeris is checked where it is used
        rc, _, err = run(capsys, "init", path, tmp_path / "t.toml")
        if rc != 0:  # refused already at init: also acceptable, with the key named
            assert message in err
            return
    before = digest(path)
    rc, out, err = run(capsys, "timings", path)
    assert rc == 2 and message in err and err.count("\n") == 1, err
    rc, out, err = run(capsys, "predict", path, "--from", "2026-12-01", "--to", "2026-12-02")
    assert rc == 2 and message in err
    assert digest(path) == before


def test_bad_dates_for_predict(capsys, archive):
    path, _ = archive
    for argv, message in ((["--from", "tomorrow", "--to", "2026-12-02"], "--from 'tomorrow'"),
                          (["--from", "2026-12-05", "--to", "2026-12-02"], "must be later"),
                          (["--from", "61000", "--to", "2026-12-02"], "full Julian Date")):
        rc, out, err = run(capsys, "predict", path, *argv)
        assert rc == 2 and message in err, err


def test_timings_from_python(archive):
    path, truth = archive
    arch = varstar.open_archive(path)
    d = arch.time_extrema(band="V", store=False)
    assert {t["band"] for t in d["timings"]} == {"V"} and d["n_new"] == 0
    assert arch.timings().empty
    assert math.isfinite(d["fit"]["period_err"])


def test_the_python_api_shows_its_options():
    import inspect

    from varstar.workflows.archive import Archive

    # options in the signature, not hidden behind **options (so help() and editors show them)
    timed = inspect.signature(Archive.time_extrema).parameters
    assert {"band", "kind", "night", "note", "store", "update", "seed", "timeout_s"} <= set(timed)
    assert not any(p.kind is p.VAR_KEYWORD for p in timed.values())
    pred = inspect.signature(Archive.predict).parameters
    assert {"start", "end", "site_visible", "min_altitude_deg", "max_sun_altitude_deg", "secondary"} <= set(pred)
    assert not any(p.kind is p.VAR_KEYWORD for p in pred.values())


def test_a_timing_whose_estimates_disagree_is_left_out_of_the_fit_unless_asked(capsys, archive):
    import h5py

    path, _ = archive
    a = varstar.open_archive(path)
    first = a.time_extrema()
    # The demo's maxima are asymmetric: the symmetric second estimate lies minutes from the template's
    # on every night alike, which is the methods' usual difference, not a disagreement.
    assert all(t["in_fit"] and not t["disagree"] for t in first["timings"])
    n = len(first["timings"])
    with h5py.File(path, "r+") as f:  # one night's second estimate 40 min off: a disturbed extremum
        f["timings"]["check_bjd_tdb"][0] = f["timings"]["check_bjd_tdb"][0] + 40.0 / 1440.0
    res = a.time_extrema(store=False)
    out = {(t["night"], t["band"]): t for t in res["timings"]}
    bad = [t for t in out.values() if t["disagree"]]
    assert len(bad) == 1 and not bad[0]["in_fit"]
    assert res["fit"]["n_timings"] == n - 1 and "left out of the fit" in res["fit_note"]
    res = a.time_extrema(store=False, include_disagreeing=True)
    assert res["fit"]["n_timings"] == n and "are in the fit" in res["fit_note"]
    rc, text, _ = run(capsys, "timings", path, "--no-store")
    assert rc == 0 and " !" in text and "left out of the ephemeris fit" in text
