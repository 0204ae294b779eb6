"""Standard-system results end to end: standard field -> coefficients -> archive -> colour.

Generated data with known truth (varstar.simulate): an invented standard field
and invented target fields observed with a camera whose colour terms are known.
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
from varstar.cli import main
from varstar.errors import InputError
from varstar.workflows.standard import transform_archive
from varstar.setups import read_setup, resolve_transformation
from varstar.simulate import (
    Pulsation,
    SimStar,
    demo_scenario,
    simulate,
    standard_field_files,
    standard_field_scenario,
    write_series,
)
from varstar.standards import fit_standard_field
from varstar.transform import Coefficients

from helpers import DEMO


def _camera(sc, k2_b: float = 0.0, k2_v: float = 0.0):
    bands = tuple(dataclasses.replace(b, k2=k2_b if b.name == "B" else k2_v) for b in sc.bands)
    return dataclasses.replace(sc, bands=bands)


def _truth_coefficients(sc) -> tuple[float, float]:
    # V - v = -eps_V_instr (B-V): the scenario's V colour term enters with the opposite sign;
    # (B - V) = (b - v) / (1 + eps_B - eps_V) (the simulator's instrumental equation).
    eps_v = sc.band("V").colour_term
    eps_b = sc.band("B").colour_term
    return -eps_v, 1.0 / (1.0 + eps_b - eps_v)


@pytest.mark.slow
def test_coefficients_from_generated_standard_fields_recover_the_truth(tmp_path):
    # Simulated truth (Hardie 1962 equations): over independent standard fields (catalogue
    # errors and photometric noise redrawn), the fitted eps and mu scatter about the
    # truth with pulls of about unit width.
    pulls_e, pulls_m = [], []
    for seed in range(8):
        sc = _camera(dataclasses.replace(standard_field_scenario(), seed=3000 + seed), k2_b=-0.03)
        eps, mu = _truth_coefficients(sc)
        files = standard_field_files(sc)
        d = tmp_path / f"f{seed}"
        d.mkdir()
        for name, text in files.items():
            (d / name).write_text(text)
        fit = fit_standard_field([d / "standards.csv"], d / "standards.toml", k2_bv=-0.03)
        pulls_e.append((fit.epsilon_v - eps) / fit.epsilon_v_err)
        pulls_m.append((fit.mu_bv - mu) / fit.mu_bv_err)
    for pulls in (np.array(pulls_e), np.array(pulls_m)):
        assert np.all(np.abs(pulls) < 4), pulls
        assert abs(pulls.mean()) < 1.2, pulls
        assert 0.4 < pulls.std(ddof=1) < 1.8, pulls


def test_second_order_extinction_must_be_removed_for_mu(tmp_path):
    # Henden & Kaitchuck (1982): mu refers to colours outside the atmosphere.  With the
    # simulated k''_B = -0.03 at airmass ~1.35, ignoring it biases mu by ~ mu^2 k'' X (a few
    # 0.01); removing the true value recovers mu within its error.
    sc = _camera(standard_field_scenario(), k2_b=-0.03)
    _, mu = _truth_coefficients(sc)
    for name, text in standard_field_files(sc).items():
        (tmp_path / name).write_text(text)
    right = fit_standard_field([tmp_path / "standards.csv"], tmp_path / "standards.toml", k2_bv=-0.03)
    wrong = fit_standard_field([tmp_path / "standards.csv"], tmp_path / "standards.toml", k2_bv=0.0)
    assert abs(right.mu_bv - mu) < 3 * right.mu_bv_err
    assert wrong.mu_bv - mu > 0.02


def _red_target_scenario(seed: int):
    """A red pulsating target (B-V ~ 1.3) among blue comparison stars (B-V ~ 0.5), known colour terms."""
    sc = _camera(demo_scenario())
    puls = Pulsation(period=0.3712, epoch=2461295.21, amplitude={"V": 0.45, "B": 0.60}, n_harmonics=4)
    stars = [SimStar("R1", "target", V=12.8, BV=1.30, variability=puls, in_catalogue=False)]
    for k, (v, c) in enumerate(((11.6, 0.42), (12.1, 0.55), (12.5, 0.48), (12.9, 0.61), (13.3, 0.39), (13.6, 0.52))):
        stars.append(SimStar(f"C{k + 1}", "comparison", V=v, BV=c, catalog_err={"V": 0.004, "B": 0.005}))
    stars.append(SimStar("K1", "check", V=13.1, BV=0.57, catalog_err={"V": 0.004, "B": 0.005}))
    return dataclasses.replace(sc, stars=tuple(stars), nights=sc.nights[:2], clouds=(), seed=seed, wide_form_night=None)


def _ingest(tmp_path: Path, sc, transformation: str | None):
    series = simulate(sc)
    write_series(series, sc, tmp_path)
    toml = tmp_path / "target.toml"
    if transformation:
        toml.write_text(toml.read_text() + transformation)
    path = tmp_path / "t.h5"
    varstar.create_archive(path, varstar.read_target(toml))
    for p in sorted(tmp_path.glob("night-*.csv")):
        varstar.ingest(path, [p])
    return varstar.open_archive(path), series


def test_red_target_is_corrected_to_the_standard_system(tmp_path):
    # Issue check on generated data: untransformed V of a red target against blue
    # comparisons is off by about eps * Delta(B-V) ~ eps * 0.8; transformed, the mean
    # offset from truth is < 0.005 mag and the pulls have unit width.
    sc = _red_target_scenario(seed=77)
    eps, mu = _truth_coefficients(sc)
    table = f"\n[transformation]\nepsilon_v = {eps}\nmu_bv = {mu}\n"
    arch, series = _ingest(tmp_path, sc, table)
    truth = series.truth[series.truth["star"] == "R1"][["frame", "band", "mag_true", "colour_true"]]
    lc = arch.lightcurve().merge(truth, on=["frame", "band"], validate="one_to_one")
    assert lc["transformed"].mean() > 0.97
    lc = lc[lc["transformed"]]
    v = lc[lc["band"] == "V"]
    untrans = (v["mag_untransformed"] - v["mag_true"]).mean()
    trans = (v["mag"] - v["mag_true"]).mean()
    comp_colour = np.mean([s.BV for s in sc.stars if s.role == "comparison"])
    assert untrans == pytest.approx(-eps * (1.30 - comp_colour), abs=0.006)
    assert abs(trans) < 0.005
    for band in ("V", "B"):
        g = lc[lc["band"] == band]
        d = (g["mag"] - g["mag_true"]).to_numpy()
        pulls = (d - d.mean()) / g["mag_err"].to_numpy()
        assert 0.85 < pulls.std() < 1.25, (band, pulls.std())
    bv_pull = (lc["bv"] - lc["colour_true"]) / np.hypot(lc["bv_err"], lc["bv_sys_err"])
    assert abs(bv_pull.mean()) < 1.0 and 0.7 < bv_pull.std() < 1.3
    # The check star, reduced like the target, is on its catalogue values after transformation.
    k = arch.lightcurve(band="V", star="K1")
    cat = varstar.read_target(tmp_path / "target.toml").star("K1").catalog
    assert abs(k["mag"].mean() - cat["V"]) < 3 * math.hypot(k["cal_err"].iloc[0], 0.004)
    assert abs(k["bv"].mean() - (cat["B"] - cat["V"])) < 0.02


def test_transform_command_reapplies_and_keeps_history(tmp_path):
    sc = _red_target_scenario(seed=78)
    arch, _ = _ingest(tmp_path, sc, None)
    lc0 = arch.lightcurve()
    assert not lc0["transformed"].any() and lc0["bv"].isna().all()
    eps, mu = _truth_coefficients(sc)
    transform_archive(arch.path, Coefficients(epsilon_v=eps, mu_bv=mu, source="truth"), 10 / 1440)
    lc1 = arch.lightcurve()
    assert lc1["transformed"].mean() > 0.97
    transform_archive(arch.path, Coefficients(epsilon_v=eps + 0.05, mu_bv=mu, source="other"), 10 / 1440)
    lc2 = arch.lightcurve()
    hist = arch.transformations()
    assert hist["source"].tolist() == ["truth", "other"]
    # The untransformed values never change; the standard ones follow the coefficients:
    # dV = d(eps) * (c_T - c_tie), about 0.05 * 0.8 for this red target.
    assert np.array_equal(lc0["mag"].to_numpy(), lc2["mag_untransformed"].to_numpy())
    dv = (lc2["mag"] - lc1["mag"])[lc1["band"] == "V"].mean()
    assert dv == pytest.approx(0.05 * 0.8, abs=0.01)
    assert (lc2["epsilon_v"][lc2["transformed"]] == eps + 0.05).all()


def test_transformation_table_and_setups_file(tmp_path):
    (tmp_path / "setups.toml").write_text('[setups.cam]\nepsilon_v = 0.04\nepsilon_v_err = 0.005\nmu_bv = 1.02\nmu_bv_err = 0.01\n')
    coeffs, gap = resolve_transformation({"setup": "cam", "setups": "setups.toml"}, tmp_path / "target.toml")
    assert (coeffs.epsilon_v, coeffs.mu_bv, coeffs.source) == (0.04, 1.02, "setups.toml:cam")
    assert gap == pytest.approx(15 / 1440)
    with pytest.raises(InputError, match="'epsilon_v' is given without 'mu_bv'"):
        resolve_transformation({"epsilon_v": 0.03}, tmp_path / "target.toml")
    with pytest.raises(InputError, match="no setup 'nope'"):
        read_setup(tmp_path / "setups.toml", "nope")
    with pytest.raises(InputError, match="unknown key 'epsilon'"):
        resolve_transformation({"epsilon": 0.03, "mu_bv": 1.0}, tmp_path / "target.toml")


def test_coefficients_without_their_pair_refused_at_init(tmp_path):
    text = (DEMO / "target.toml").read_text() + "\n[transformation]\nepsilon_v = 0.05\n"
    (tmp_path / "t.toml").write_text(text)
    rc = main(["init", str(tmp_path / "a.h5"), str(tmp_path / "t.toml")])
    assert rc != 0 and not (tmp_path / "a.h5").exists()


def test_standard_field_with_too_few_stars_is_refused(tmp_path):
    files = standard_field_files()
    lines = files["standards.toml"].split("[[stars]]")
    (tmp_path / "s.toml").write_text("[[stars]]".join(lines[:4]))  # header + three stars
    ids = {f"S0{k}" for k in (1, 2, 3)}
    csv = [ln for ln in files["standards.csv"].splitlines() if ln.startswith("jd") or ln.split(",")[2] in ids]
    (tmp_path / "s.csv").write_text("\n".join(csv) + "\n")
    with pytest.raises(InputError, match="at least 4"):
        fit_standard_field([tmp_path / "s.csv"], tmp_path / "s.toml")


def test_b_and_v_that_never_overlap_are_refused_and_nothing_written(tmp_path):
    text = (DEMO / "target.toml").read_text() + "\n[transformation]\nepsilon_v = 0.05\nmu_bv = 0.95\nmax_gap_minutes = 5\n"
    (tmp_path / "t.toml").write_text(text)
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(tmp_path / "t.toml"))
    night = pd.read_csv(DEMO / "night-2026-09-12.csv")
    jd0 = night["jd"].min()
    # V only in the first hour, B only in the last: no pair within 5 minutes.
    keep = ((night["band"] == "V") & (night["jd"] < jd0 + 1 / 24)) | ((night["band"] == "B") & (night["jd"] > jd0 + 3 / 24))
    night[keep].to_csv(tmp_path / "split.csv", index=False)
    before = path.read_bytes()
    with pytest.raises(InputError, match="never come within 5 min"):
        varstar.ingest(path, [tmp_path / "split.csv"])
    assert path.read_bytes() == before


def test_cli_coefficients_transform_colour(tmp_path, capsys):
    for name in ("standards.csv", "standards.toml"):
        (tmp_path / name).write_text((DEMO / name).read_text())
    rc = main(["coefficients", str(tmp_path / "standards.csv"), str(tmp_path / "standards.toml"), "--k2-bv", "-0.03",
               "--save", str(tmp_path / "setups.toml"), "--setup", "cam", "-o", str(tmp_path / "fits.png"), "--json"])
    out = json.loads(capsys.readouterr().out)
    assert rc == 0
    assert {"epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "n_stars"} <= set(out)
    truth = json.loads((DEMO / "truth.json").read_text())["transformation"]
    assert abs(out["mu_bv"] - truth["mu"]) < 3 * out["mu_bv_err"]
    assert abs(out["epsilon_v"] - truth["epsilon"]) < 0.02  # k''_V of the camera (-0.004) is outside the model
    path = tmp_path / "a.h5"
    assert main(["init", str(path), str(DEMO / "target.toml")]) == 0
    assert main(["ingest", str(path), str(DEMO / "night-2026-09-11.csv")]) == 0
    capsys.readouterr()
    assert main(["transform", str(path), "--coefficients", str(tmp_path / "setups.toml"), "--json"]) == 0
    res = json.loads(capsys.readouterr().out)
    assert res["nights"][0]["n_transformed"] == res["nights"][0]["n_points"]
    assert main(["colour", str(path), "--json", "-o", str(tmp_path / "bv.png"), "--diagram", str(tmp_path / "cmd.png")]) == 0
    col = json.loads(capsys.readouterr().out)
    assert col["dereddened"] is False and "lower bound" in col["caution"]
    assert 5000 < col["teff_min_k"] < col["teff_mean_k"] < col["teff_max_k"] < 9000
    assert {r["star"] for r in col["diagram"]["stars"]} >= {"C1", "C2", "K1"}
    assert (tmp_path / "cmd.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
