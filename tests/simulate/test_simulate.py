"""Tests of varstar.simulate: published equations, determinism, realism of the noise.

Outside references: Pogson (1856), Merline & Howell (1995) CCD equation, Young
(1967) scintillation, Hardie (1962) airmass (via varstar.timescale), astropy as
reference library for the Sun's and the field's positions and for BJD_TDB, and
the simulation's own truth through pull distributions.
"""

from __future__ import annotations

import dataclasses
import math
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from varstar import simulate as S
from varstar.errors import InputError
from varstar.target import parse_target
from varstar.timescale import exposure_times, hardie_airmass, night_label, offline_astropy

from helpers import DEMO as DEMO_DIR, REPO


@pytest.fixture(scope="module")
def demo():
    scenario = S.demo_scenario()
    return scenario, S.simulate(scenario)


@pytest.fixture(scope="module")
def joined(demo):
    """Measured rows joined with their truth."""
    _, series = demo
    meas = pd.concat(series.nights, ignore_index=True)
    return meas.merge(series.truth, on=["frame", "star"], suffixes=("", "_truth"), validate="one_to_one")


# --------------------------------------------------------------------------- equations


def test_pogson_flux_magnitude():
    # Pogson (1856): five magnitudes are exactly a flux ratio of 100.
    assert S.mag_to_flux(5.0) / S.mag_to_flux(0.0) == pytest.approx(0.01, rel=1e-14)
    assert S.flux_to_mag(100.0) == pytest.approx(-5.0, abs=1e-14)
    # One magnitude = 100^(1/5) = 2.511886...
    assert S.mag_to_flux(0.0) / S.mag_to_flux(1.0) == pytest.approx(2.5118864315095806, rel=1e-14)
    m = np.array([-10.0, 0.3, 12.345, 21.0])
    np.testing.assert_allclose(S.flux_to_mag(S.mag_to_flux(m, 20.9), 20.9), m, atol=1e-12)
    assert np.isnan(S.flux_to_mag(0.0)) and np.isnan(S.flux_to_mag(-1.0))
    # sigma_m = (2.5/ln10) / SNR: 1.0857/SNR, and equal to the derivative of m(F).
    assert S.mag_err_from_snr(100.0) == pytest.approx(0.010857362047581294, rel=1e-12)
    f, h = 1.0e4, 1e-3
    dm_df = (S.flux_to_mag(f + h) - S.flux_to_mag(f - h)) / (2 * h)
    assert abs(dm_df) * f / 1.0 == pytest.approx(S.mag_err_from_snr(1.0), rel=1e-6)


def test_ccd_equation_hand_example():
    # Merline & Howell (1995): SNR = N* / sqrt(N* + n_pix (1 + n_pix/n_B)(N_S + N_D + N_R^2)).
    # Hand: N* = 10000, n_pix = 50, n_B = 200, N_S = 100, N_D = 5, N_R = 10:
    # 10000 + 50 * 1.25 * (100 + 5 + 100) = 10000 + 12812.5 = 22812.5; sqrt = 151.0381;
    # SNR = 10000 / 151.0381 = 66.2085.
    assert S.ccd_snr(10000.0, 50.0, 200.0, 100.0, 5.0, 10.0) == pytest.approx(66.2085, abs=5e-4)
    assert S.ccd_noise_e(10000.0, 50.0, 200.0, 100.0, 5.0, 10.0) == pytest.approx(151.0381, abs=5e-4)
    # Photon-limited limit: no sky, dark or read noise -> SNR = sqrt(N*).
    assert S.ccd_snr(40000.0, 50.0, 200.0, 0.0, 0.0, 0.0) == pytest.approx(200.0, rel=1e-12)


def test_young_scintillation_hand_example():
    # Young (1967): 0.09 D^(-2/3) X^(7/4) exp(-h/8000) (2t)^(-1/2).
    # Hand: D = 35 cm, X = 1.5, h = 2000 m, t = 60 s:
    # 35^(-2/3) = 0.093460; 1.5^1.75 = 2.033133; exp(-0.25) = 0.778801; 120^(-1/2) = 0.091287
    # 0.09 * 0.093460 * 2.033133 * 0.778801 * 0.091287 = 0.0012158.
    assert S.scintillation_sigma(35.0, 1.5, 2000.0, 60.0) == pytest.approx(0.0012158, rel=2e-4)
    # Osborn et al. (2015) factor scales it linearly; X^(7/4) and t^(-1/2) scalings.
    assert S.scintillation_sigma(35.0, 1.5, 2000.0, 60.0, factor=1.5) == pytest.approx(1.5 * 0.0012158, rel=2e-4)
    assert S.scintillation_sigma(35.0, 2.0, 0.0, 10.0) / S.scintillation_sigma(35.0, 1.0, 0.0, 40.0) == pytest.approx(
        2.0**1.75 * 2.0, rel=1e-12
    )


def test_saturation_loss_matches_numerical_integration():
    # Closed form for a clipped circular Gaussian against brute-force integration.
    s, peak, level = 1.3, 150000.0, 90000.0
    x = np.linspace(-12, 12, 1201)
    xx, yy = np.meshgrid(x, x)
    img = peak * np.exp(-(xx**2 + yy**2) / (2 * s**2))
    lost = np.clip(img - level, 0, None).sum() / img.sum()
    assert S.saturation_loss(np.array([peak]), level)[0] == pytest.approx(lost, rel=1e-3)
    assert S.saturation_loss(np.array([80000.0]), level)[0] == 0.0


def test_pulsation_template_shape():
    ph = np.arange(20000) / 20000.0
    m = S.pulsation_template(ph)
    assert m.mean() == pytest.approx(0.0, abs=1e-12)
    assert m.max() - m.min() == pytest.approx(1.0, abs=1e-6)
    assert np.argmin(m) == 0  # maximum light (smallest magnitude) at phase 0
    # Asymmetric: the rise from minimum light to maximum light is fast.
    rise = 1.0 - ph[np.argmax(m)]
    assert rise < 0.3


# --------------------------------------------------------------------------- cheap astronomy vs astropy


def test_almanac_sun_and_field_altitude_against_astropy():
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, get_sun
    from astropy.time import Time

    jd = 2461295.0 + np.linspace(0.0, 60.0, 241)
    lat, lon = 34.21, -108.39
    with offline_astropy():
        loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, 2050 * u.m)
        t = Time(jd, format="jd", scale="utc")
        sun = get_sun(t).transform_to(AltAz(obstime=t, location=loc)).alt.deg
    assert np.max(np.abs(S.approx_sun_altitude(jd, lat, lon) - sun)) < 0.05
    et = exposure_times(jd, 341.7625, 18.6083, lat, lon, 2050.0)
    assert np.max(np.abs(S.approx_field_altitude(jd, 341.7625, 18.6083, lat, lon) - et.altitude_deg)) < 0.05
    # Approximate BJD_TDB within 10 s of astropy's (Eastman et al. 2010 definition).
    assert np.max(np.abs(S.approx_bjd_tdb(jd, 341.7625, 18.6083) - et.bjd_tdb)) * 86400.0 < 10.0


# --------------------------------------------------------------------------- demo scenario


def test_demo_is_deterministic_and_matches_committed_files(demo, tmp_path):
    scenario, series = demo
    first = S.series_files(series, scenario)
    again = S.series_files(S.simulate(scenario), scenario)
    assert first == again
    other = S.series_files(S.simulate(scenario, 1), scenario)
    assert other["truth.csv"] != first["truth.csv"]
    # A Generator gives the same result as the same Generator again.
    g1 = S.simulate(scenario, np.random.default_rng(7))
    g2 = S.simulate(scenario, np.random.default_rng(7))
    pd.testing.assert_frame_equal(g1.nights[0], g2.nights[0])
    # The shipped files are exactly a fresh generation (byte compare).
    first = S.demo_files()
    assert set(first) >= {"standards.toml", "standards.csv", "target.toml", "truth.json"}
    for name, text in first.items():
        assert (DEMO_DIR / name).read_bytes() == text.encode("utf-8"), f"demo_series/{name} is stale: run make_demo.py"
    shipped = {p.name for p in DEMO_DIR.glob("night-*.csv")}
    assert shipped == {n for n in first if n.startswith("night-")}
    total = sum((DEMO_DIR / n).stat().st_size for n in first)
    assert total < 1_500_000


@pytest.mark.slow
def test_make_demo_script_writes_the_same_bytes(demo, tmp_path):
    scenario, series = demo
    out = tmp_path / "demo"
    subprocess.run([sys.executable, str(DEMO_DIR / "make_demo.py"), str(out)], check=True, capture_output=True,
                   env={"PYTHONPATH": str(REPO), "PATH": "/usr/bin:/bin"}, timeout=120)
    for name, text in S.demo_files().items():
        assert (out / name).read_bytes() == text.encode("utf-8")


def test_demo_scenario_shape(demo):
    scenario, series = demo
    info = series.info
    roles = [s.role for s in scenario.stars]
    assert roles.count("target") == 1 and roles.count("check") == 1 and 6 <= roles.count("comparison") <= 7
    assert 5 <= len(scenario.nights) <= 7
    assert all("2026-08-01" <= n.evening <= "2026-11-30" for n in scenario.nights)
    assert 10_000 <= info["counts"]["rows"] <= 20_000
    colours = [s.BV for s in scenario.stars if s.role != "target"]
    assert min(colours) >= 0.3 and max(colours) <= 1.4
    assert all(abs(b.colour_term) <= 0.1 and b.colour_term != 0 for b in scenario.bands)
    tgt = info["target"]
    assert 0.3 <= tgt["period"] <= 0.6 and 0.5 <= tgt["amplitude_p2p"]["V"] <= 0.8
    assert tgt["amplitude_p2p"]["B"] > tgt["amplitude_p2p"]["V"]
    var = info["variable_comparisons"]
    assert len(var) == 1 and 0.06 <= var[0]["amplitude_p2p"]["V"] <= 0.1
    assert sum(n["cloudy"] for n in info["nights"]) == 1


def test_exposures_interleaved_dark_and_high(demo):
    scenario, series = demo
    for ev, night in zip(series.evenings, series.nights):
        exp = night.drop_duplicates("frame")
        assert list(exp["band"].iloc[:6]) == ["V", "B"] * 3
        t = series.truth[series.truth["night"] == ev].drop_duplicates("frame")
        assert (t["band"].to_numpy()[0::2] == "V").all() and (t["band"].to_numpy()[1::2] == "B").all()
        assert set(zip(t["band"], t["exptime"])) == {("V", 60.0), ("B", 90.0)}
        gaps = np.diff(t["jd"].to_numpy()) * 86400.0
        # mid-to-mid = half of each exposure + overhead (20-24 s)
        assert gaps.min() >= 75.0 + 20.0 - 0.2 and gaps.max() <= 75.0 + 24.0 + 0.2
        assert (night_label(t["jd"].to_numpy(), scenario.longitude_deg) == ev).all()
        assert (np.round(night["jd"].to_numpy(), 6) == night["jd"].to_numpy()).all()
    tr = series.truth.drop_duplicates("frame")
    # Field above 25 deg (astropy via exposure_times) and Sun below -12 deg (astropy get_sun).
    assert tr["altitude_deg"].min() > scenario.altitude_limit_deg - 0.05
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, get_sun
    from astropy.time import Time

    jd = tr["jd"].to_numpy()[::7]
    with offline_astropy():
        loc = EarthLocation.from_geodetic(scenario.longitude_deg * u.deg, scenario.latitude_deg * u.deg, scenario.elevation_m * u.m)
        tt = Time(jd, format="jd", scale="utc")
        sun = get_sun(tt).transform_to(AltAz(obstime=tt, location=loc)).alt.deg
    assert sun.max() < scenario.sun_limit_deg + 0.05


def test_airmass_is_hardie_of_true_altitude(demo):
    scenario, series = demo
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord
    from astropy.time import Time

    tr = series.truth.drop_duplicates("frame").iloc[::25]
    with offline_astropy():
        loc = EarthLocation.from_geodetic(scenario.longitude_deg * u.deg, scenario.latitude_deg * u.deg, scenario.elevation_m * u.m)
        t = Time(tr["jd"].to_numpy(), format="jd", scale="utc")
        alt = SkyCoord(scenario.ra_deg * u.deg, scenario.dec_deg * u.deg).transform_to(AltAz(obstime=t, location=loc)).alt.deg
    # Hardie (1962) via varstar.timescale.hardie_airmass, with astropy's altitude.
    np.testing.assert_allclose(tr["airmass"].to_numpy(), hardie_airmass(90.0 - alt), atol=2e-4)
    # The tables carry the same airmass to 4 decimals.
    night = series.nights[0]
    t0 = series.truth[series.truth["night"] == series.evenings[0]].drop_duplicates("frame").set_index("frame")
    np.testing.assert_allclose(night["airmass"].to_numpy(), t0.loc[night["frame"], "airmass"].to_numpy(), atol=0)
    assert series.truth["airmass"].between(1.0, 1.0 / math.sin(math.radians(24.9))).all()


def test_instrumental_model_is_the_published_equation(demo):
    # m_inst = M + eps (B-V) + k1 X + k2 X (B-V) + zp(t) + cloud(t)   (Henden & Kaitchuck 1982 form)
    scenario, series = demo
    tr = series.truth
    eps = tr["band"].map({b.name: b.colour_term for b in scenario.bands}).to_numpy()
    k2 = tr["band"].map({b.name: b.k2 for b in scenario.bands}).to_numpy()
    k1 = np.array([series.info["extinction"]["k1_by_night"][n][b] for n, b in zip(tr["night"], tr["band"])])
    X, c = tr["airmass"].to_numpy(), tr["colour_true"].to_numpy()
    model = tr["mag_true"] + eps * c + k1 * X + k2 * X * c + tr["zero_point"] + tr["cloud_mag"]
    np.testing.assert_allclose(model, tr["mag_inst_true"], atol=1e-4)  # k1 in info is rounded to 1e-4
    # Electrons follow Pogson: N = t 10^(-0.4 m_inst).
    np.testing.assert_allclose(tr["n_star_e"], tr["exptime"] * 10 ** (-0.4 * tr["mag_inst_true"]), rtol=1e-12)


def test_noise_pulls_have_unit_width(joined):
    # Simulated truth as reference: (measured - noise-free) / expected sigma is N(0, 1)
    # for constant stars in clear frames; expected sigma = CCD equation (+) scintillation.
    clean = joined[(joined["flag"] == 0) & ~joined["cloud"] & (joined["status"] == "ok")]
    for star in ("C1", "C2", "C3", "C5", "C6", "C7", "K1"):
        q = clean[clean["star"] == star]
        sig = np.hypot(q["sigma_ccd_mag"], q["sigma_scint_mag"])
        pull = (q["mag"] - q["mag_inst_true"]) / sig
        assert len(q) > 900
        assert abs(pull.mean()) < 0.1, star
        assert 0.93 < pull.std() < 1.07, (star, pull.std())
    # The reported error is the CCD-equation part, computed from the measured counts
    # (so it scatters by ~1/(2 SNR) around the true value).
    ratio_err = clean["mag_err"] / clean["sigma_ccd_mag"]
    assert abs(ratio_err.median() - 1.0) < 0.003
    hi = clean["sigma_ccd_mag"] < 0.01  # SNR > 100
    np.testing.assert_allclose(clean["mag_err"][hi], clean["sigma_ccd_mag"][hi], rtol=0.05)
    # So a bright star scatters more than it reports (scintillation), a faint one does not.
    def ratio(star):
        q = clean[clean["star"] == star]
        return ((q["mag"] - q["mag_inst_true"]) / q["mag_err"]).std()

    assert ratio("C1") > 1.06
    assert abs(ratio("C7") - 1.0) < 0.07


def test_zero_colour_terms_allowed_and_differential_mags_recover_standard_differences():
    sc = S.demo_scenario()
    bands = tuple(dataclasses.replace(b, colour_term=0.0, k2=0.0) for b in sc.bands)
    nights = sc.nights[:1]
    sc = dataclasses.replace(sc, bands=bands, nights=nights, clouds=(), wide_form_night=None, n_cosmic=0)
    series = S.simulate(sc, 3)
    m = series.nights[0]
    m = m[m["flag"] == 0]
    wide = m.pivot(index="frame", columns="star", values="mag").join(m.drop_duplicates("frame").set_index("frame")["band"])
    for band in ("V", "B"):
        w = wide[wide["band"] == band]
        for sid in ("C2", "C3", "C5", "K1"):
            s = next(x for x in sc.stars if x.id == sid)
            c1 = next(x for x in sc.stars if x.id == "C1")
            d = (w[sid] - w["C1"]).dropna()
            # Without colour terms first-order extinction and the zero point cancel.
            assert d.mean() == pytest.approx(s.mean_mag(band) - c1.mean_mag(band), abs=4 * d.std() / math.sqrt(len(d)) + 1e-4)


def test_clouds_block_lowers_snr_and_loses_faint_stars(demo, joined):
    scenario, series = demo
    info = series.info["clouds"][0]
    tr = series.truth.drop_duplicates("frame")
    cloudy = tr[tr["cloud"]]
    assert set(cloudy["night"]) == {info["night"]}
    idx = np.flatnonzero(tr["cloud"].to_numpy())
    assert (np.diff(idx) == 1).all()  # one consecutive block
    thin = cloudy[~cloudy["frame"].isin(info["thick_frames"])]
    assert thin["cloud_mag"].min() >= 0.3 and thin["cloud_mag"].max() <= 1.5
    assert len(info["thick_frames"]) >= 1 and cloudy["cloud_mag"].max() > 3
    # Cloud is grey: in thin cloud every star is shifted by the cloud extinction ...
    q = joined[joined["cloud"] & (joined["flag"] == 0)]
    th = q[~q["frame"].isin(info["thick_frames"])]
    shift = (th["mag"] - (th["mag_inst_true"] - th["cloud_mag"])).groupby(th["frame"]).median()
    np.testing.assert_allclose(shift, th.groupby("frame")["cloud_mag"].first(), atol=0.03)
    # ... and the noise model still holds (pulls of unit width under cloud).
    pull = (q["mag"] - q["mag_inst_true"]) / np.hypot(q["sigma_ccd_mag"], q["sigma_scint_mag"])
    assert abs(pull.mean()) < 0.15 and 0.85 < pull.std() < 1.15
    # Reported errors grow under cloud.
    c3 = joined[(joined["star"] == "C3") & (joined["night"] == info["night"])]
    assert c3[c3["cloud"]]["mag_err"].median() > 1.3 * c3[~c3["cloud"]]["mag_err"].median()
    # Stars lost only in thick cloud, faint ones first; never the bright C1.
    lost = series.truth[series.truth["status"] == "lost"]
    assert len(lost) > 0 and set(lost["frame"]) <= set(info["thick_frames"])
    assert "C1" not in set(lost["star"])


def test_flags_and_missing_rows(demo, joined):
    scenario, series = demo
    tr = series.truth
    sat = joined[joined["flag"] == 1]
    assert 1 <= len(sat) <= 4 and set(sat["star"]) == {"C1"}  # the brightest star, in good seeing
    # Flag 1 exactly where the brightest pixel passes the saturation level.
    level = scenario.telescope.saturation_e
    assert (sat["peak_e"] > level).all()
    assert (tr[tr["status"] != "saturated"]["peak_e"] <= level).all()
    # The clipped flux makes the magnitude fainter (by the Gaussian-clipping loss).
    assert (sat["mag"] > sat["mag_inst_true"]).all()
    assert (joined["flag"] == 2).sum() == scenario.n_cosmic
    missing = tr[tr["status"] == "missing"]
    assert 10 <= len(missing) <= 100
    measured = set(zip(joined["frame"], joined["star"]))
    assert not any((f, s) in measured for f, s in zip(missing["frame"], missing["star"]))
    assert len(joined) == (tr["status"].isin(["ok", "saturated", "cosmic_ray"])).sum()


def test_variability_truth(demo):
    scenario, series = demo
    tr = series.truth
    v1 = tr[tr["star"] == "V1"]
    for band, amp in (("V", 0.68), ("B", 0.89)):
        m = v1[v1["band"] == band]["mag_true"]
        assert m.max() - m.min() == pytest.approx(amp, abs=0.01)  # phases well covered
    # The star is bluer at maximum light (B amplitude larger).
    bright = v1["mag_true"] < v1.groupby("band")["mag_true"].transform("median")
    assert v1[bright]["colour_true"].mean() < v1[~bright]["colour_true"].mean() - 0.05
    # Light curve is phased on BJD_TDB with maximum light at the epoch.
    p = scenario.stars[0].variability
    ph = ((v1["bjd_tdb"] - p.epoch) / p.period) % 1.0
    vv = v1[v1["band"] == "V"]
    np.testing.assert_allclose(vv["mag_true"], 13.05 + 0.68 * S.pulsation_template(ph[vv.index]), atol=1e-12)
    c4 = tr[(tr["star"] == "C4") & (tr["band"] == "V")]["mag_true"]
    assert 0.06 < c4.max() - c4.min() <= 0.0801
    for sid in ("C1", "C2", "C3", "C5", "C6", "C7", "K1"):
        assert tr[tr["star"] == sid].groupby("band")["mag_true"].nunique().max() == 1


def test_target_toml_parses_and_catalogue_is_truth_plus_error(demo):
    scenario, _ = demo
    tgt = parse_target(S.target_toml(scenario), "demo target.toml")
    assert tgt.star_ids == tuple(s.id for s in scenario.stars)
    assert tgt.ra_deg == pytest.approx(scenario.ra_deg, abs=1e-5)
    assert tgt.site.longitude_deg == pytest.approx(scenario.longitude_deg)
    assert tgt.target_star.catalog == {}
    pulls = []
    for s in scenario.stars:
        if s.role == "target":
            continue
        st = tgt.star(s.id)
        for b in ("V", "B"):
            pulls.append((st.catalog[b] - s.mean_mag(b)) / st.catalog_err[b])
    pulls = np.array(pulls)
    assert np.abs(pulls).max() < 4 and 0.4 < pulls.std() < 1.8  # 16 draws of N(0,1)
    assert S.target_toml(scenario) == S.target_toml(scenario)


def test_written_files_read_back(demo, tmp_path):
    scenario, series = demo
    S.write_series(series, scenario, tmp_path)
    ev = series.evenings
    long = pd.read_csv(tmp_path / f"night-{ev[0]}.csv")
    assert list(long.columns) == list(S.MEASUREMENT_COLUMNS)
    np.testing.assert_allclose(long["mag"], series.nights[0]["mag"], atol=5e-5)
    wide = pd.read_csv(tmp_path / f"night-{ev[scenario.wide_form_night]}-wide.csv")
    assert list(wide.columns[:4]) == ["jd", "band", "exptime", "frame"]
    assert [c for c in wide.columns[4:]] == [x for s in scenario.stars for x in (s.id, f"{s.id}_err")]
    good = series.nights[scenario.wide_form_night]
    assert wide[[s.id for s in scenario.stars]].notna().sum().sum() == (good["flag"] == 0).sum()
    truth = pd.read_csv(tmp_path / "truth.csv")
    assert list(truth.columns) == list(S.TRUTH_FILE_COLUMNS) and len(truth) == len(series.truth)
    import json

    info = json.loads((tmp_path / "truth.json").read_text())
    assert info["target"]["period"] == scenario.stars[0].variability.period
    assert info["scenario"]["seed"] == scenario.seed
    try:
        from varstar.measurements import read_measurements
    except ImportError:  # pragma: no cover - reader not present
        return
    tidy = read_measurements(sorted(tmp_path.glob("night-*.csv")), [s.id for s in scenario.stars])
    assert len(tidy) == series.info["counts"]["rows"] - (series.nights[scenario.wide_form_night]["flag"] != 0).sum()


# --------------------------------------------------------------------------- synthetic generator


def test_synthetic_night_shapes_and_consistency(monkeypatch):
    # No astropy path: exposure_times must not be called at all.
    def boom(*a, **k):
        raise AssertionError("synthetic_night must not call astropy")

    import varstar.simulate.schedule
    import varstar.timescale

    monkeypatch.setattr(varstar.timescale, "exposure_times", boom)
    monkeypatch.setattr(varstar.simulate.schedule, "exposure_times", boom)
    toml, df = S.synthetic_night(200, 12, seed=5, missing_fraction=0.0)
    assert list(df.columns) == list(S.MEASUREMENT_COLUMNS)
    assert len(df) == 200 * 12 * 2
    tgt = parse_target(toml, "synthetic")
    assert len(tgt.stars) == 12 and tgt.stars[-1].role == "check" and tgt.stars[0].role == "target"
    assert set(df["star"]) == set(tgt.star_ids)
    per = df.groupby("frame").agg(n=("star", "size"), nb=("band", "nunique"), nj=("jd", "nunique"), na=("airmass", "nunique"))
    assert (per["n"] == 12).all() and (per[["nb", "nj", "na"]] == 1).all().all()
    assert (df.drop_duplicates("frame")["band"].value_counts() == 200).all()
    assert df["jd"].is_monotonic_increasing
    # Big case: 2000 exposures x 30 stars x 2 bands, fully vectorised.
    toml2, big = S.synthetic_night(2000, 30, seed=1, missing_fraction=0.0)
    # Every frame of 2000 x 2 bands x 30 stars, less the measurements below a
    # signal-to-noise of 5 (sigma_m > 1.0857 / 5, Pogson), which photometry does not report.
    assert big.shape[1] == 9 and 100_000 < big.shape[0] <= 120_000
    assert big["mag_err"].max() <= 1.0857362 / 5
    assert big["frame"].nunique() == 4000
    # Same field from the same field_seed, different noise from a different seed.
    toml3, df3 = S.synthetic_night(200, 12, seed=6, missing_fraction=0.0)
    assert toml3 == toml and not np.array_equal(df3["mag"], df["mag"])
    toml4, df4 = S.synthetic_night(200, 12, seed=5, missing_fraction=0.0)
    pd.testing.assert_frame_equal(df4, df)
    # Missing rows and flags at the requested rates.
    _, dm = S.synthetic_night(500, 20, seed=8, missing_fraction=0.05, flag_fraction=0.02)
    n_full = 500 * 20 * 2
    assert abs(len(dm) / n_full - 0.95) < 0.01 and abs(dm["flag"].mean() - 0.02) < 0.005
    with pytest.raises(InputError):
        S.synthetic_night(10, 5, bands=("B", "Q"))


def test_synthetic_airmass_and_light_curve_against_astropy():
    toml, df = S.synthetic_night(150, 6, seed=2, start_jd=2461400.2, missing_fraction=0.0, flag_fraction=0.0)
    tgt = parse_target(toml)
    exp = df.drop_duplicates("frame")
    et = exposure_times(exp["jd"].to_numpy(), tgt.ra_deg, tgt.dec_deg, tgt.site.latitude_deg, tgt.site.longitude_deg, tgt.site.elevation_m)
    # Hardie airmass of the geometric altitude, cheap geometry vs astropy.
    np.testing.assert_allclose(exp["airmass"].to_numpy(), et.airmass, rtol=2e-3)
    assert exp["airmass"].min() < 1.1  # centred on the meridian transit
    # Target minus the mean comparison follows the template phased on BJD_TDB.
    truth = df.attrs["truth"]
    v = df[df["band"] == "V"].pivot(index="frame", columns="star", values="mag")
    comps = [s.id for s in tgt.stars_with_role("comparison")]
    diff = v["V1"] - v[comps].mean(axis=1)
    bjd = pd.Series(et.bjd_tdb, index=exp["frame"].to_numpy())[v.index]
    model = truth["amplitude_p2p"]["V"] * S.pulsation_template(((bjd - truth["epoch"]) / truth["period"]) % 1.0)
    resid = diff - model
    assert resid.std() < 0.02 and np.corrcoef(diff, model)[0, 1] > 0.99


def test_scenario_errors_name_the_problem():
    sc = S.demo_scenario()
    with pytest.raises(InputError, match="band 'R'"):
        S.simulate(dataclasses.replace(sc, bands=(dataclasses.replace(sc.bands[0], name="R"),)))
    with pytest.raises(InputError, match="2026-06-21"):
        # A field at -70 deg never rises above 25 deg at latitude 34 N.
        S.dark_windows(dataclasses.replace(sc, dec_deg=-70.0, nights=(S.NightPlan("2026-06-21"),)))
    with pytest.raises(InputError, match="YYYY-MM-DD"):
        S.dark_windows(dataclasses.replace(sc, nights=(S.NightPlan("21/06/2026"),)))
