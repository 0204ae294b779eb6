"""End-to-end: generated nights with known truth -> ingest -> archive light curve.

The data are the invented demo field simulated by :mod:`varstar.simulate`
(photon and scintillation noise, extinction, clouds).  The checks compare what
the archive returns with the simulation's truth, using pull distributions.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import varstar
from varstar.errors import InputError
from varstar.simulate import demo_scenario, simulate, write_series
from varstar.workflows.reduce import excluded_stars

from helpers import DEMO


def _plain_scenario(n_nights: int, seed: int):
    """The demo field with no colour terms and no colour extinction.

    Without them a differential magnitude tied to catalogue magnitudes equals the
    true standard magnitude (up to noise and catalogue errors), so the light curve
    can be compared with the truth directly; the colour terms are the business of
    the transformation to the standard system.  ``seed`` also draws the catalogue
    errors, so that different seeds give independent calibrations.
    """
    sc = dataclasses.replace(demo_scenario(), seed=seed)
    bands = tuple(dataclasses.replace(b, colour_term=0.0, k2=0.0) for b in sc.bands)
    return dataclasses.replace(sc, bands=bands, nights=sc.nights[:n_nights], clouds=(), wide_form_night=None)


def _ingest_series(tmp_path: Path, scenario, seed: int):
    series = simulate(scenario, seed)
    folder = tmp_path / f"s{seed}"
    write_series(series, scenario, folder)
    arch_path = folder / "t.h5"
    varstar.create_archive(arch_path, varstar.read_target(folder / "target.toml"))
    for p in sorted(folder.glob("night-*.csv")):
        varstar.ingest(arch_path, [p])
    return varstar.open_archive(arch_path), series


@pytest.mark.slow
def test_target_magnitudes_match_truth_within_quoted_errors(tmp_path):
    # Simulated truth, many seeds: within each night the scatter of (mag - truth)
    # about its mean must match mag_err (pull width ~1), and the nightly mean offsets
    # must be covered by cal_err (with the mean's own error) about 68% of the time.
    # Each seed draws its own catalogue errors, so the nightly offsets are independent.
    within, nightly = [], []
    for seed in range(20, 36):
        arch, series = _ingest_series(tmp_path, _plain_scenario(1, seed), seed)
        truth = series.truth[series.truth["star"] == "V1"][["frame", "band", "mag_true"]]
        lc = arch.lightcurve().merge(truth, on=["frame", "band"], how="left", validate="one_to_one")
        assert lc["mag_true"].notna().all()
        for (_, _), g in lc.groupby(["night", "band"]):
            d = (g["mag"] - g["mag_true"]).to_numpy()
            e = g["mag_err"].to_numpy()
            w = 1 / e**2
            mean = np.sum(w * d) / np.sum(w)
            within.extend((d - mean) / e)
            nightly.append(mean / math.hypot(g["cal_err"].iloc[0], 1 / math.sqrt(np.sum(w))))
    within = np.array(within)
    nightly = np.array(nightly)
    assert abs(np.mean(within)) < 0.05
    # The reported errors leave out scintillation (as real photometry programs do), so the
    # pulls may be a little wider than 1, never narrower.
    assert 0.9 < np.std(within) < 1.2, np.std(within)
    frac = np.mean(np.abs(nightly) < 1)
    n = nightly.size
    assert abs(frac - 0.683) < 3 * math.sqrt(0.683 * 0.317 / n) + 0.05, (frac, nightly)
    assert np.all(np.abs(nightly) < 4)
    assert 0.6 < np.std(nightly) < 1.4, nightly


@pytest.fixture(scope="module")
def demo_archive(tmp_path_factory):
    """The shipped demo series, ingested night by night."""
    folder = tmp_path_factory.mktemp("demo")
    path = folder / "demo.h5"
    varstar.create_archive(path, varstar.read_target(DEMO / "target.toml"))
    results = [varstar.ingest(path, [p]) for p in sorted(DEMO.glob("night-*.csv"))]
    return varstar.open_archive(path), results


def test_demo_secretly_variable_comparison_is_rejected_and_no_other(demo_archive):
    arch, _ = demo_archive
    truth = json.loads((DEMO / "truth.json").read_text())
    variable = {v["id"] for v in truth["variable_comparisons"]}
    comps = arch.comparisons()
    rejected = comps[comps["status"] == "variable"]
    assert set(rejected["star"]) == variable
    # Found on most nights (on a night near its extremum its change is below the noise).
    n_nights = len(arch.nights())
    per_band = rejected.groupby("band")["night_label"].nunique()
    assert (per_band >= n_nights // 2).all(), per_band


def test_demo_cloudy_exposures_are_flagged_and_kept(demo_archive):
    arch, results = demo_archive
    truth = json.loads((DEMO / "truth.json").read_text())
    cloudy = set(truth["clouds"][0]["frames"])
    exp = arch.exposures()
    flagged = set(exp.loc[exp["flags"] != "", "frame"])
    # No clear-sky exposure is flagged; nearly every cloudy one is (the passage's
    # thin edges, below ~0.1 mag of grey extinction, need not be).
    assert flagged <= cloudy
    assert len(flagged) >= 0.9 * len(cloudy)
    # Flagged exposures stay in the archive and are left out of the light curve by default.
    lc_all = arch.lightcurve(include_flagged=True)
    lc = arch.lightcurve()
    assert set(lc_all["frame"]) & flagged
    assert not set(lc["frame"]) & flagged
    assert (lc_all.loc[lc_all["frame"].isin(flagged), "quality"] & 1).all()
    # The night report names them.
    report = arch.night_report(truth["clouds"][0]["night"])
    named = {f["frame"] for b in report["bands"].values() for f in b["flagged_frames"]}
    assert named == flagged


def test_demo_check_star_scatter_matches_prediction(demo_archive):
    # The check star is constant: its rms must match the rms its errors predict
    # (common practice: the observer's first quality indicator).
    arch, _ = demo_archive
    for label in arch.nights()["label"]:
        rep = arch.night_report(label)
        for band, b in rep["bands"].items():
            k = b["check_stars"]["K1"]
            assert 0.7 < k["rms"] / k["predicted_rms"] < 1.4, (label, band, k)


def test_demo_colour_extinction_recovered(demo_archive):
    # The simulated second-order extinction (truth.json) is recovered by the ensemble's
    # colour term within its errors, night by night (pulls, 4-sigma bound each).
    arch, _ = demo_archive
    truth = json.loads((DEMO / "truth.json").read_text())["extinction"]["k2"]
    pulls = []
    for label in arch.nights()["label"]:
        for band, b in arch.night_report(label)["bands"].items():
            e = b["ensemble"]
            pulls.append((e["colour_extinction"] - truth[band]) / e["colour_extinction_err"])
    pulls = np.array(pulls)
    assert np.all(np.abs(pulls) < 4), pulls
    assert abs(pulls.mean()) < 3 / math.sqrt(pulls.size) + 0.3


def test_raw_measurements_are_kept_exactly(demo_archive):
    arch, _ = demo_archive
    raw = arch.raw()
    src = pd.read_csv(DEMO / "night-2026-09-11.csv")
    mine = raw[raw["source"] == "night-2026-09-11.csv"].sort_values("line")
    assert len(mine) == len(src)
    assert np.array_equal(mine["mag"].to_numpy(), src["mag"].to_numpy(), equal_nan=True)
    assert np.array_equal(mine["jd"].to_numpy(), src["jd"].to_numpy())
    assert mine["star"].tolist() == src["star"].tolist()
    assert mine["line"].tolist() == list(range(2, len(src) + 2))


def test_ingest_same_file_twice_adds_nothing(demo_archive, tmp_path):
    arch, _ = demo_archive
    before = arch.path.read_bytes()
    res = varstar.ingest(arch.path, [DEMO / "night-2026-09-11.csv"])
    assert res.nights == () and len(res.skipped) == 1
    assert arch.path.read_bytes() == before


def test_night_already_present_is_refused_and_nothing_written(demo_archive, tmp_path):
    arch, _ = demo_archive
    before = arch.path.read_bytes()
    altered = tmp_path / "again.csv"
    altered.write_text((DEMO / "night-2026-09-11.csv").read_text() + "\n# edited\n")
    with pytest.raises(InputError, match="2026-09-11 is already in"):
        varstar.ingest(arch.path, [altered])
    assert arch.path.read_bytes() == before


def test_band_without_catalogue_values_is_refused(tmp_path):
    target = varstar.read_target(DEMO / "target.toml")
    path = tmp_path / "a.h5"
    varstar.create_archive(path, target)
    bad = tmp_path / "r.csv"
    bad.write_text("jd,band,star,mag,mag_err\n2461295.7,R,V1,1.0,0.01\n2461295.7,R,C1,1.0,0.01\n2461295.7,R,C2,1.0,0.01\n")
    before = path.read_bytes()
    with pytest.raises(InputError, match=r"r\.csv, line 2: band 'R' has no catalogue magnitude"):
        varstar.ingest(path, [bad])
    assert path.read_bytes() == before


def test_band_names_differing_only_in_case_are_one_band_unless_the_target_has_both(tmp_path):
    # Filter names are case-insensitive in everyday use (common practice), but Stromgren v and Johnson V
    # are different bands: a description listing both keeps them apart.
    night = (DEMO / "night-2026-09-11.csv").read_text()
    lower = tmp_path / "lower.csv"
    lower.write_text(night.replace(",V,", ",v,").replace(",B,", ",b,"))
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(DEMO / "target.toml"))
    rep = varstar.ingest(path, [lower]).nights[0]
    assert sorted(rep["bands"]) == ["B", "V"]
    assert any("band 'v' of" in w and "read as 'V'" in w for w in rep["warnings"])
    reference = tmp_path / "b.h5"
    varstar.create_archive(reference, varstar.read_target(DEMO / "target.toml"))
    varstar.ingest(reference, [DEMO / "night-2026-09-11.csv"])
    cols = ["bjd_tdb", "band", "mag", "mag_err"]
    assert varstar.open_archive(path).lightcurve()[cols].equals(varstar.open_archive(reference).lightcurve()[cols])

    both = (DEMO / "target.toml").read_text().replace('role = "comparison"\n', 'role = "comparison"\nv = 11.0\n', 1)
    (tmp_path / "both.toml").write_text(both)
    target = varstar.read_target(tmp_path / "both.toml")
    assert {"v", "V"} <= target.catalog_bands()
    from varstar.workflows.reduce import band_names
    import pandas as pd

    table = pd.DataFrame({"band": ["v", "V", "b"], "source": ["f.csv"] * 3})
    assert band_names(target, table)["band"].tolist() == ["v", "V", "B"]


def test_excluded_comparison_is_left_out(tmp_path):
    text = (DEMO / "target.toml").read_text() + '\n[reduction]\nexclude = ["C4"]\n'
    (tmp_path / "t.toml").write_text(text)
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(tmp_path / "t.toml"))
    varstar.ingest(path, [DEMO / "night-2026-09-11.csv"])
    comps = varstar.open_archive(path).comparisons()
    assert set(comps.loc[comps["star"] == "C4", "status"]) == {"excluded"}
    assert "variable" not in set(comps["status"])
    (tmp_path / "bad.toml").write_text((DEMO / "target.toml").read_text() + '\n[reduction]\nexclude = ["K1"]\n')
    with pytest.raises(InputError, match="not a comparison star"):
        excluded_stars(varstar.read_target(tmp_path / "bad.toml"))


def test_implausible_instrumental_magnitudes_are_flagged_not_reduced(demo_data, tmp_path):
    """A few target rows at instrumental magnitude 49 (a file error) lie ~58 mag from the comparison
    stars of their exposures, beyond a detector's range (DETECTOR_RANGE_MAG, common practice): they
    are stored flagged with a warning, and the light curve's good points stay within the truth's range."""
    import varstar
    from varstar.workflows.reduce import DETECTOR_RANGE_MAG

    src = demo_data.folder / "night-2026-09-12.csv"
    lines = src.read_text().splitlines()
    header = lines[0].split(",")
    i_star, i_mag = header.index("star"), header.index("mag")
    bad = 0
    for k in range(1, len(lines)):
        cells = lines[k].split(",")
        if cells[i_star] == "V1" and bad < 5 and k % 7 == 0:
            cells[i_mag] = "49.0"
            lines[k] = ",".join(cells)
            bad += 1
    assert bad == 5
    path_csv = tmp_path / "night-2026-09-12.csv"
    path_csv.write_text("\n".join(lines) + "\n")
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    res = varstar.ingest(path, [path_csv])
    warns = " ".join(res.nights[0]["warnings"])
    assert "5 measurement(s) of V1" in warns and f"{DETECTOR_RANGE_MAG:g} mag" in warns
    arch = varstar.open_archive(path)
    good = arch.lightcurve()
    assert good["mag"].max() < 20  # the demo target is about 13 mag
    every = arch.lightcurve(star="V1", include_flagged=True)
    assert every["flags"].str.contains("implausible_magnitude").sum() == 5
    assert len(every) - len(arch.lightcurve(star="V1")) == 5
