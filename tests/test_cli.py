"""Tests of the command line (varstar.cli), run in-process through ``main([...])``.

The data are two nights of the invented demo field simulated with its fixed
seed by :mod:`varstar.simulate` (an evening without clouds and the evening with
a passing cloud), so the checks compare what the commands print with the
simulation's truth: which comparison star secretly varies, which frames were
under cloud, how many rows and exposures each file has.

The contract checked is the README's: every command takes ``--json`` and then
prints exactly one strict JSON object (RFC 8259: no NaN / Infinity) on stdout
and nothing else; errors print one ``error: ...`` line on stderr naming the
file, line or key, exit non-zero, and leave the archive byte for byte as it was
with no temporary files beside it.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

import varstar
from helpers import DEMO, REPO, ok, one_json, run, strict_loads

from varstar.cli import build_parser
from varstar.errors import ArchiveError, InputError, OutputError
from varstar.archive.layout import SCHEMA_VERSION
from varstar.demo import FRAMES_NIGHT
from varstar.export import LIGHTCURVE_COLUMNS
from varstar.simulate import demo_scenario, simulate, write_series

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
FRAME_RE = re.compile(r"(?:^|[\s:])(\d{8}-\d{3}) \[")


# --------------------------------------------------------------------------- helpers


def sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def snapshot(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` (hidden ones included) with its SHA-256."""
    return {str(p.relative_to(folder)): ("<dir>" if p.is_dir() else sha256(p)) for p in sorted(folder.rglob("*"))}


def exposures_in(csv: Path) -> int:
    df = pd.read_csv(csv, comment="#")
    return int(df[["frame", "band"]].drop_duplicates().shape[0])


def night_blocks(text: str) -> dict[str, str]:
    """Split a text report into blocks, one per 'Night YYYY-MM-DD' heading."""
    blocks: dict[str, list[str]] = {}
    current = None
    for line in text.splitlines():
        m = re.match(r"Night (\d{4}-\d{2}-\d{2})\b", line)
        if m:
            current = m.group(1)
            blocks[current] = []
        if current is not None:
            blocks[current].append(line)
    return {k: "\n".join(v) for k, v in blocks.items()}


def flagged_frames_in_text(block: str) -> list[str]:
    frames = []
    for line in block.splitlines():
        if line.strip().startswith("flagged:"):
            frames += FRAME_RE.findall(line)
    return frames


# --------------------------------------------------------------------------- data


@pytest.fixture(scope="module")
def series(tmp_path_factory):
    """Two nights of the demo field (clear 2026-09-12, cloudy 2026-09-19), with truth."""
    sc = demo_scenario()
    # Keep the demo's second and third nights; the cloud passage belongs to the third (now index 1).
    sc = dataclasses.replace(
        sc, nights=sc.nights[1:3], clouds=(dataclasses.replace(sc.clouds[0], night=1),), wide_form_night=None
    )
    sim = simulate(sc)
    folder = tmp_path_factory.mktemp("series")
    write_series(sim, sc, folder)
    info = sim.info
    (cloud,) = info["clouds"]
    nights = {ev: folder / f"night-{ev}.csv" for ev in sim.evenings}
    return SimpleNamespace(
        folder=folder,
        toml=folder / "target.toml",
        nights=nights,
        clear=sim.evenings[0],
        cloudy=cloud["night"],
        cloud_frames=set(cloud["frames"]),
        variable=[v["id"] for v in info["variable_comparisons"]],
        target_id=info["target"]["id"],
        field=sc.field_name,
        star_ids=[s.id for s in sc.stars],
        truth=sim.truth,
    )


@pytest.fixture(scope="module")
def one_night_archive(series, tmp_path_factory):
    """An archive holding the cloudy night only (copy it before changing it)."""
    folder = tmp_path_factory.mktemp("one")
    path = folder / "a.h5"
    varstar.create_archive(path, varstar.read_target(series.toml))
    varstar.ingest(path, [series.nights[series.cloudy]])
    return path


@pytest.fixture(scope="module")
def full_archive(series, tmp_path_factory):
    """An archive holding both nights, for the read-only commands; and the ingest reports."""
    folder = tmp_path_factory.mktemp("full")
    path = folder / "a.h5"
    varstar.create_archive(path, varstar.read_target(series.toml))
    reports = {}
    for label in (series.cloudy, series.clear):
        res = varstar.ingest(path, [series.nights[label]])
        reports.update({r["night"]: r for r in res.nights})
    return SimpleNamespace(path=path, reports=reports)


@pytest.fixture
def archive_copy(one_night_archive, tmp_path):
    dst = tmp_path / "a.h5"
    shutil.copyfile(one_night_archive, dst)
    return dst


# --------------------------------------------------------------------------- one real process


def test_help_and_error_exit_in_a_fresh_process(series, archive_copy, tmp_path):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    # --help: usage on stdout, every command listed, and no heavy library imported
    # (ARCHITECTURE.md: heavy imports live inside the functions that need them).
    p = subprocess.run(
        [sys.executable, "-X", "importtime", "-m", "varstar.cli", "--help"],
        capture_output=True, text=True, env=env, timeout=120,
    )
    assert p.returncode == 0
    assert p.stdout.startswith("usage: varstar")
    for cmd in ("init", "ingest", "summary", "report", "plot", "export", "demo"):
        assert re.search(rf"^\s+{cmd}\s", p.stdout, re.M), cmd
    assert "Traceback" not in p.stderr
    imported = {ln.rsplit("|", 1)[-1].strip() for ln in p.stderr.splitlines() if ln.startswith("import time:")}
    assert imported, "no -X importtime output"
    assert not imported & {"astropy", "matplotlib", "h5py", "pandas", "scipy"}, imported & {"astropy", "matplotlib", "h5py", "pandas", "scipy"}

    # An expected mistake deep in the pipeline: one 'error:' line, nothing else, archive untouched.
    lines = series.nights[series.clear].read_text().splitlines()
    bad = tmp_path / "bad.csv"
    bad.write_text("\n".join([lines[0], lines[1], lines[2].replace(",C1,", ",Q7,")]) + "\n")
    before = snapshot(tmp_path)
    p = subprocess.run(
        [sys.executable, "-m", "varstar.cli", "ingest", str(archive_copy), str(bad), "--json"],
        capture_output=True, text=True, env=env, timeout=120,
    )
    assert p.returncode == InputError.exit_code != 0
    # with --json, scripts read the error from stdout too: one JSON object (README, "Exit codes")
    assert one_json(p.stdout) == {"error": p.stderr[len("error: "):-1], "exit_code": p.returncode}
    assert p.stderr.count("\n") == 1 and p.stderr.startswith("error: "), p.stderr
    assert "Traceback" not in p.stderr
    assert str(bad) in p.stderr and "line 3" in p.stderr and "Q7" in p.stderr
    assert snapshot(tmp_path) == before


# --------------------------------------------------------------------------- init


def test_init_text(capsys, series, tmp_path):
    out = ok(capsys, "init", tmp_path / "t.h5", series.toml)
    assert out == f"created {tmp_path / 't.h5'} for {series.field} ({len(series.star_ids)} stars)\n"
    arch = varstar.open_archive(tmp_path / "t.h5")
    assert arch.target.star_ids == tuple(series.star_ids)
    assert arch.summary()["n_nights"] == 0
    assert not list(tmp_path.glob(".*.tmp"))


def test_init_json(capsys, series, tmp_path):
    obj = one_json(ok(capsys, "init", tmp_path / "t.h5", series.toml, "--json"))
    assert obj["archive"] == str(tmp_path / "t.h5")
    assert obj["target"]["name"] == series.field
    assert [s["id"] for s in obj["target"]["stars"]] == series.star_ids
    roles = {s["id"]: s["role"] for s in obj["target"]["stars"]}
    assert roles[series.target_id] == "target"
    assert all(roles[v] == "comparison" for v in series.variable)  # nothing says it varies
    assert (tmp_path / "t.h5").exists()


# --------------------------------------------------------------------------- ingest


def test_ingest_text_reports_rejected_comparison_and_cloud_frames(capsys, series, tmp_path):
    arch = tmp_path / "t.h5"
    varstar.create_archive(arch, varstar.read_target(series.toml))
    csv = series.nights[series.cloudy]
    out = ok(capsys, "ingest", arch, csv)
    first = out.splitlines()[0]
    m = re.fullmatch(rf"Night {series.cloudy}  \({csv.name}\): (\d+) exposures, (\d+) flagged", first)
    assert m, first
    assert int(m.group(1)) == exposures_in(csv)
    n_flagged = int(m.group(2))
    assert n_flagged > 0
    for band in ("B", "V"):
        assert re.search(rf"^  {band}: \d+ exposures, \d+ used, \d+ flagged", out, re.M), band
    # Truth: the secretly variable comparison star is named as rejected, in each band.
    for v in series.variable:
        assert out.count(f"rejected {v} (variable)") == 2, out
    # Truth: every frame listed as flagged was under the cloud.
    frames = flagged_frames_in_text(out)
    assert frames and set(frames) <= series.cloud_frames, set(frames) - series.cloud_frames
    assert "check K1:" in out
    assert "nothing new" not in out


def test_ingest_json_lists_nights_bands_rejections_and_flagged_frames(capsys, series, tmp_path):
    arch = tmp_path / "t.h5"
    varstar.create_archive(arch, varstar.read_target(series.toml))
    files = [series.nights[series.clear], series.nights[series.cloudy]]
    obj = one_json(ok(capsys, "ingest", arch, *files, "--json"))
    assert obj["archive"] == str(arch)
    assert obj["skipped"] == []
    nights = {n["night"]: n for n in obj["nights"]}
    assert sorted(nights) == sorted([series.clear, series.cloudy])
    for label, night in nights.items():
        csv = series.nights[label]
        rows = pd.read_csv(csv, comment="#")
        assert night["sources"] == [str(csv)]
        assert night["n_measurements"] == len(rows)
        assert night["n_exposures"] == exposures_in(csv)
        assert set(night["bands"]) == {"B", "V"}
        # BJD_TDB span against the simulation's truth (astropy-based, rounded to 1e-6 d).
        tb = series.truth[series.truth["frame"].str.startswith(label.replace("-", ""))]["bjd_tdb"]
        assert night["bjd_start"] == pytest.approx(tb.min(), abs=2e-6)
        assert night["bjd_end"] == pytest.approx(tb.max(), abs=2e-6)
        n_flag = 0
        for band, b in night["bands"].items():
            assert b["n_exposures"] == int((rows[["frame", "band"]].drop_duplicates()["band"] == band).sum())
            assert b["n_used"] + b["n_flagged"] == b["n_exposures"]
            assert len(b["flagged_frames"]) == b["n_flagged"]
            assert sum(b["flag_reasons"].values()) >= b["n_flagged"]
            assert set(b["flag_reasons"]) <= {"too_few_comparisons", "zero_point_error", "zero_point_jump"}
            for fr in b["flagged_frames"]:
                assert set(fr) == {"frame", "jd_utc", "reasons"} and fr["reasons"]
            kept = set(b["comparisons_kept"])
            rejected = {r["star"] for r in b["comparisons_rejected"]}
            assert not kept & rejected
            assert all(r["reason"] for r in b["comparisons_rejected"])
            n_flag += b["n_flagged"]
            frames = {fr["frame"].split(":")[-1] for fr in b["flagged_frames"]}  # several files: 'file:frame'
            if label == series.cloudy:
                # Truth: the variable comparison is rejected as variable; only cloud frames are flagged,
                # and most of the cloud frames of this band are caught.
                assert {r["star"] for r in b["comparisons_rejected"] if r["status"] == "variable"} == set(series.variable)
                assert frames and frames <= series.cloud_frames
                in_band = {f for f in series.cloud_frames if f in set(rows.loc[rows["band"] == band, "frame"])}
                assert len(frames) >= 0.8 * len(in_band)
            else:
                assert len(frames) <= 0.02 * b["n_exposures"]  # clear night: (almost) nothing flagged
        assert night["n_flagged"] == n_flag


def test_ingest_same_file_twice_changes_nothing(capsys, series, archive_copy, tmp_path):
    csv = series.nights[series.cloudy]  # already in the archive
    before = snapshot(tmp_path)
    out = ok(capsys, "ingest", archive_copy, csv)
    assert out == f"skipped {csv}: already ingested (same content)\nnothing new: the archive is unchanged\n"
    assert snapshot(tmp_path) == before
    obj = one_json(ok(capsys, "ingest", archive_copy, csv, "--json"))
    assert obj["nights"] == []
    assert obj["skipped"] == [{"file": str(csv), "sha256": sha256(csv), "why": "already ingested (same content)"}]
    assert snapshot(tmp_path) == before


def test_ingest_one_file_given_twice_is_taken_once(capsys, series, archive_copy):
    csv = series.nights[series.clear]
    obj = one_json(ok(capsys, "ingest", archive_copy, csv, csv, "--json"))
    assert [n["night"] for n in obj["nights"]] == [series.clear]
    assert [s["file"] for s in obj["skipped"]] == [str(csv)]
    assert varstar.open_archive(archive_copy).summary()["n_nights"] == 2


def test_ingest_is_all_or_nothing_across_files(capsys, series, archive_copy, tmp_path):
    good = series.nights[series.clear]  # a new night for this archive
    bad = tmp_path / "bad.csv"
    lines = good.read_text().splitlines()
    bad.write_text("\n".join([lines[0], lines[1].replace(",V1,", ",NOPE,")]) + "\n")
    before = snapshot(tmp_path)
    rc, out, err = run(capsys, "ingest", archive_copy, good, bad)
    assert rc == InputError.exit_code and out == "" and err.startswith("error: ") and "NOPE" in err
    assert snapshot(tmp_path) == before
    # The good file was not recorded: it goes in now.
    obj = one_json(ok(capsys, "ingest", archive_copy, good, "--json"))
    assert [n["night"] for n in obj["nights"]] == [series.clear]


# --------------------------------------------------------------------------- read-only commands


def test_summary_text_and_json(capsys, series, full_archive):
    path = full_archive.path
    before = sha256(path)
    obj = one_json(ok(capsys, "summary", path, "--json"))
    arch = varstar.open_archive(path)
    assert obj["archive"] == str(path) and obj["schema_version"] == SCHEMA_VERSION
    assert obj["target"]["star"] == series.target_id and obj["target"]["name"] == series.field
    assert obj["n_nights"] == 2
    assert [n["label"] for n in obj["nights"]] == [series.cloudy, series.clear]  # order of ingest
    for n in obj["nights"]:
        assert n["n_exposures"] == full_archive.reports[n["label"]]["n_exposures"]
        assert n["n_flagged"] == full_archive.reports[n["label"]]["n_flagged"]
    assert set(obj["bands"]) == {"B", "V"}
    every = arch.lightcurve(include_flagged=True)
    for band, b in obj["bands"].items():
        lc = arch.lightcurve(band=band)
        assert b["n_points"] == len(lc) > 0
        assert b["n_flagged"] == int(((every["band"] == band) & (every["quality"] != 0)).sum()) > 0
        assert b["mag_min"] == lc["mag"].min() and b["mag_max"] == lc["mag"].max()
        assert b["bjd_first"] == lc["bjd_tdb"].min() and b["bjd_last"] == lc["bjd_tdb"].max()
        assert b["median_mag_err"] == pytest.approx(lc["mag_err"].median(), rel=1e-12)

    text = ok(capsys, "summary", path)
    assert f"{series.field}  (RA " in text and f"star {series.target_id})" in text
    assert f"schema {SCHEMA_VERSION}, 2 nights" in text
    for n in obj["nights"]:
        assert f"  {n['label']}: {n['n_exposures']} exposures, {n['n_flagged']} flagged" in text
    for band, b in obj["bands"].items():
        assert b["n_standard"] == 0  # no coefficients in this archive: nothing on the standard system
        assert (
            f"  {band}: {b['n_points']} points ({b['n_standard']} on the standard system; {b['n_flagged']} left out: their exposure or measurement is flagged), "
            f"{b['mag_min']:.3f} .. {b['mag_max']:.3f} mag" in text
        )
    assert sha256(path) == before  # reading never changes the archive


def test_summary_of_an_empty_archive(capsys, series, tmp_path):
    varstar.create_archive(tmp_path / "e.h5", varstar.read_target(series.toml))
    obj = one_json(ok(capsys, "summary", tmp_path / "e.h5", "--json"))
    assert obj["n_nights"] == 0 and obj["nights"] == [] and obj["bands"] == {}
    assert "0 nights" in ok(capsys, "summary", tmp_path / "e.h5")


def test_report_text_and_json(capsys, series, full_archive):
    stored = one_json(ok(capsys, "report", full_archive.path, series.cloudy, "--json"))
    # The stored report is the one ingest printed (through strict JSON: NaN -> null).
    from varstar.export import to_json

    assert stored == strict_loads(to_json(full_archive.reports[series.cloudy]))
    assert stored["night"] == series.cloudy
    text = ok(capsys, "report", full_archive.path, series.cloudy)
    assert text.splitlines()[0].startswith(f"Night {series.cloudy}  (night-{series.cloudy}.csv): {stored['n_exposures']} exposures")
    for v in series.variable:
        assert f"rejected {v} (variable)" in text
    frames = flagged_frames_in_text(text)
    assert frames and set(frames) <= series.cloud_frames
    clear = ok(capsys, "report", full_archive.path, series.clear)
    assert clear.startswith(f"Night {series.clear}")


def test_plot_text_and_json(capsys, series, full_archive, tmp_path):
    arch = varstar.open_archive(full_archive.path)
    png = tmp_path / "lc.png"
    out = ok(capsys, "plot", full_archive.path, "-o", png)
    n_all = len(arch.lightcurve())
    assert out == f"wrote {png} ({n_all} points)\n"
    assert png.read_bytes()[:8] == PNG_MAGIC

    obj = one_json(ok(capsys, "plot", full_archive.path, "-o", tmp_path / "v.png", "--band", "V", "--json"))
    assert obj == {"plot": str(tmp_path / "v.png"), "n_points": len(arch.lightcurve(band="V"))}
    obj = one_json(ok(capsys, "plot", full_archive.path, "-o", tmp_path / "f.png", "--show-flagged", "--json"))
    assert obj["n_points"] == len(arch.lightcurve(include_flagged=True)) > n_all
    obj = one_json(ok(capsys, "plot", full_archive.path, "-o", tmp_path / "k.svg", "--star", "K1", "--json"))
    assert obj["n_points"] == len(arch.lightcurve(star="K1")) > 0
    assert b"<svg" in (tmp_path / "k.svg").read_bytes()[:2000]
    obj = one_json(ok(capsys, "plot", full_archive.path, "-o", tmp_path / "n.png", "--night", series.clear, "--json"))
    lc = arch.lightcurve()
    assert obj["n_points"] == int((lc["night"] == series.clear).sum()) > 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["f.png", "k.svg", "lc.png", "n.png", "v.png"]


def test_plot_by_night_and_one_night_with_its_check_stars(capsys, series, full_archive, tmp_path, monkeypatch):
    import varstar.plots as plots

    drawn = {}
    for name in ("nights_figure", "lightcurve_figure"):
        real = getattr(plots, name)

        def spy(*a, _real=real, _name=name, **kw):
            fig = _real(*a, **kw)
            drawn[_name] = (kw, fig)
            return fig

        monkeypatch.setattr(plots, name, spy)
    ok(capsys, "plot", full_archive.path, "-o", tmp_path / "b.png", "--by-night", "2")
    kw, fig = drawn["nights_figure"]
    n_bands = len(set(varstar.open_archive(full_archive.path).lightcurve()["band"]))
    assert kw["max_nights"] == 2 and len([a for a in fig.axes if a.get_visible()]) == 2 * n_bands
    ok(capsys, "plot", full_archive.path, "-o", tmp_path / "n.png", "--night", series.clear)
    kw, fig = drawn["lightcurve_figure"]
    assert set(kw["checks"]["star"]) == {"K1"} and set(kw["checks"]["night"]) == {series.clear}
    assert any("check star" in a.get_ylabel() for a in fig.axes)


def test_export_text_and_json(capsys, series, full_archive, tmp_path):
    arch = varstar.open_archive(full_archive.path)
    csv = tmp_path / "obs.csv"
    lc = arch.lightcurve()
    out = ok(capsys, "export", full_archive.path, "-o", csv)
    assert out == f"wrote {csv} ({len(lc)} observations)\n"
    back = pd.read_csv(csv)
    assert tuple(back.columns) == LIGHTCURVE_COLUMNS
    assert len(back) == len(lc)
    assert np.abs(back["bjd_tdb"].to_numpy() - lc["bjd_tdb"].to_numpy()).max() <= 0.5e-8 + 1e-9
    np.testing.assert_allclose(back["mag"], lc["mag"], rtol=1e-9)
    np.testing.assert_allclose(back["mag_err"], lc["mag_err"], rtol=1e-9)
    assert back["star"].eq(series.target_id).all() and (back["quality"] == 0).all()
    assert set(back["night"]) == {series.clear, series.cloudy}

    obj = one_json(ok(capsys, "export", full_archive.path, "-o", tmp_path / "all.csv", "--include-flagged", "--json"))
    every = pd.read_csv(tmp_path / "all.csv", keep_default_na=False)
    assert obj == {"csv": str(tmp_path / "all.csv"), "n_rows": len(every)}
    assert len(every) == len(arch.lightcurve(include_flagged=True)) > len(lc)
    bad = every[every["quality"] != 0]
    assert len(bad) and (bad["flags"] != "").all()
    # Flagged target points come from cloud frames (truth).
    assert set(bad.loc[bad["quality"] == 1, "frame"]) <= series.cloud_frames

    obj = one_json(ok(capsys, "export", full_archive.path, "-o", tmp_path / "k1.csv", "--star", "K1", "--band", "B", "--json"))
    k1 = pd.read_csv(tmp_path / "k1.csv")
    assert obj["n_rows"] == len(k1) == len(arch.lightcurve(band="B", star="K1")) > 0
    assert set(k1["star"]) == {"K1"} and set(k1["band"]) == {"B"}
    assert not list(tmp_path.glob(".*.tmp"))


# --------------------------------------------------------------------------- mistakes


def _csv_lines(series, label=None) -> list[str]:
    return series.nights[label or series.clear].read_text().splitlines()


def _write(path: Path, lines: list[str]) -> Path:
    path.write_text("\n".join(lines) + "\n")
    return path


def _set_field(line: str, col: int, value: str) -> str:
    parts = line.split(",")
    parts[col] = value
    return ",".join(parts)


# Column positions of the generated long-form files: jd,band,star,mag,mag_err,airmass,exptime,flag,frame
JD, BAND, STAR, MAG, ERR, AIRMASS, EXPTIME, FLAG, FRAME = range(9)


def _case(name: str, series, arch: Path, d: Path):
    """(argv, expected error class, fragments the message must contain) for one mistake."""
    L = _csv_lines(series)
    assert L[0] == "jd,band,star,mag,mag_err,airmass,exptime,flag,frame"
    new = d / "new.csv"
    if name == "unknown star id":
        f = _write(new, [L[0], L[1], _set_field(L[2], STAR, "X9"), L[3]])
        return ["ingest", arch, f], InputError, [str(f), "line 3", "X9"]
    if name == "missing column":
        f = _write(new, [",".join(ln.split(",")[:ERR] + ln.split(",")[ERR + 1:]) for ln in L[:6]])
        return ["ingest", arch, f], InputError, [str(f), "line 1", "mag_err"]
    if name == "non-numeric mag":
        f = _write(new, L[:3] + [_set_field(L[3], MAG, "bright")] + L[4:8])
        return ["ingest", arch, f], InputError, [str(f), "line 4", "'mag'", "bright"]
    if name == "NaN mag":
        f = _write(new, L[:2] + [_set_field(L[2], MAG, "NaN")] + L[3:8])
        return ["ingest", arch, f], InputError, [str(f), "line 3", "'mag'", "NaN"]
    if name == "infinite mag_err":
        f = _write(new, L[:2] + [_set_field(L[2], ERR, "inf")] + L[3:8])
        return ["ingest", arch, f], InputError, [str(f), "line 3", "'mag_err'"]
    if name == "absurd exptime":
        f = _write(new, L[:4] + [_set_field(L[4], EXPTIME, "1e9")] + L[5:8])
        return ["ingest", arch, f], InputError, [str(f), "line 5", "exptime"]
    if name == "MJD instead of JD":
        mjd = f"{float(L[1].split(',')[JD]) - 2400000.5:.6f}"
        f = _write(new, [L[0], _set_field(L[1], JD, mjd)])
        return ["ingest", arch, f], InputError, [str(f), "line 2", "'jd'", "modified JD"]
    if name == "band without catalogue values":
        first = [ln for ln in L[1:] if ln.split(",")[FRAME] == L[1].split(",")[FRAME]]
        r_rows = [_set_field(_set_field(ln, BAND, "R"), FRAME, "R-001") for ln in first]
        f = _write(new, [L[0]] + first + r_rows)
        return ["ingest", arch, f], InputError, [str(f), f"line {2 + len(first)}", "band 'R'", "catalogue"]
    if name == "empty file":
        new.write_text("")
        return ["ingest", arch, new], InputError, [str(new), "empty"]
    if name == "not UTF-8":
        new.write_bytes(b"jd,band,star,mag,mag_err\n2461300.7,V,V1,\xff\xfe,0.01\n")
        return ["ingest", arch, new], InputError, [str(new), "UTF-8"]
    if name == "TOML without [target]":
        text = series.toml.read_text()
        start = text.index("[target]")
        end = text.index("[site]")
        bad = d / "bad.toml"
        bad.write_text(text[:start] + text[end:])
        return ["init", d / "new.h5", bad], InputError, [str(bad), "[target]"]
    if name == "TOML with one comparison star":
        bad = d / "one.toml"
        bad.write_text(
            '[target]\nname = "Invented field"\nra = 341.76\ndec = 18.61\n\n'
            "[site]\nlatitude = 34.2\nlongitude = -108.4\nelevation = 2050\n\n"
            '[[stars]]\nid = "V1"\nrole = "target"\n\n'
            '[[stars]]\nid = "C1"\nrole = "comparison"\nV = 11.4\nB = 11.9\n'
        )
        return ["init", d / "new.h5", bad], InputError, [str(bad), "comparison", "found 1"]
    if name == "init into missing folder":
        return ["init", d / "no-such-folder" / "t.h5", series.toml], ArchiveError, [str(d / "no-such-folder" / "t.h5"), "does not exist"]
    if name == "init with missing TOML":
        return ["init", d / "t.h5", d / "missing.toml"], InputError, [str(d / "missing.toml"), "not found"]
    if name == "init onto existing path":
        return ["init", arch, series.toml], ArchiveError, [str(arch), "already exists"]
    if name == "ingest into missing archive":
        return ["ingest", d / "nope.h5", series.nights[series.clear]], ArchiveError, [str(d / "nope.h5"), "no such archive"]
    if name == "ingest of missing file":
        return ["ingest", arch, d / "missing.csv"], InputError, [str(d / "missing.csv"), "not found"]
    if name == "night already in archive":
        Lc = _csv_lines(series, series.cloudy)
        f = _write(d / "again.csv", ["# exported again with a comment line: new bytes, same night"] + Lc)
        return ["ingest", arch, f], InputError, [series.cloudy, "already in", str(arch)]
    if name == "--column without =":
        return ["ingest", arch, series.nights[series.clear], "--column", "jd"], InputError, ["--column", "'jd'"]
    if name == "--column with empty side":
        return ["ingest", arch, series.nights[series.clear], "--column", "jd="], InputError, ["--column", "'jd='"]
    if name == "--column naming a missing file column":
        f = series.nights[series.clear]
        return ["ingest", arch, f, "--column", "jd=JD_UTC"], InputError, [str(f), "line 1", "JD_UTC"]
    if name == "export to missing folder":
        out = d / "no-such-folder" / "obs.csv"
        return ["export", arch, "-o", out], OutputError, [str(out)]
    if name == "export of unknown star":
        return ["export", arch, "-o", d / "x.csv", "--star", "Z9"], ArchiveError, ["Z9", "V1"]
    if name == "plot with unknown band":
        return ["plot", arch, "-o", d / "lc.png", "--band", "R"], ArchiveError, [str(arch), "band 'R'", "B, V"]
    if name == "plot of unknown night":
        return ["plot", arch, "-o", d / "lc.png", "--night", "2026-01-01"], ArchiveError, [str(arch), "2026-01-01"]
    if name == "plot to unknown image format":
        return ["plot", arch, "-o", d / "lc.xyz"], OutputError, [str(d / "lc.xyz"), "xyz"]
    if name == "report of unknown night":
        return ["report", arch, "2026-01-01"], ArchiveError, [str(arch), "2026-01-01", series.cloudy]
    # "no such night" is the archive lacking what was asked for: the same code in every command
    if name == "remove-night of unknown night":
        return ["remove-night", arch, "2026-01-01", "--reason", "x"], ArchiveError, [str(arch), "2026-01-01"]
    if name == "colour of unknown night":
        return ["colour", arch, "--night", "2026-01-01"], ArchiveError, [str(arch), "2026-01-01"]
    if name == "timings of unknown night":
        return ["timings", arch, "--night", "2026-01-01"], ArchiveError, [str(arch), "2026-01-01"]
    if name == "unknown description version":
        return ["edit-target", arch, "--show", "9"], ArchiveError, [str(arch), "no description 9"]
    if name == "edit-target without a change":
        return ["edit-target", arch], InputError, ["--set"]
    if name == "summary of a file that is not an archive":
        return ["summary", series.nights[series.clear]], ArchiveError, [str(series.nights[series.clear]), "HDF5"]
    raise AssertionError(name)


MISTAKES = [
    "unknown star id",
    "missing column",
    "non-numeric mag",
    "NaN mag",
    "infinite mag_err",
    "absurd exptime",
    "MJD instead of JD",
    "band without catalogue values",
    "empty file",
    "not UTF-8",
    "TOML without [target]",
    "TOML with one comparison star",
    "init into missing folder",
    "init with missing TOML",
    "init onto existing path",
    "ingest into missing archive",
    "ingest of missing file",
    "night already in archive",
    "--column without =",
    "--column with empty side",
    "--column naming a missing file column",
    "export to missing folder",
    "export of unknown star",
    "plot with unknown band",
    "plot of unknown night",
    "plot to unknown image format",
    "report of unknown night",
    "remove-night of unknown night",
    "colour of unknown night",
    "timings of unknown night",
    "unknown description version",
    "edit-target without a change",
    "summary of a file that is not an archive",
]


@pytest.mark.parametrize("as_json", [False, True], ids=["text", "json"])
@pytest.mark.parametrize("mistake", MISTAKES)
def test_mistakes_give_one_error_line_and_change_nothing(capsys, series, archive_copy, tmp_path, mistake, as_json):
    argv, error_class, fragments = _case(mistake, series, archive_copy, tmp_path)
    if as_json:
        argv = argv + ["--json"]
    archive_before = sha256(archive_copy)
    before = snapshot(tmp_path)
    rc, out, err = run(capsys, *argv)
    assert rc == error_class.exit_code != 0, (rc, err)
    if as_json:  # the error as one JSON object on stdout as well
        assert one_json(out) == {"error": err[len("error: "):-1], "exit_code": rc}, out
    else:
        assert out == "", out
    assert err.startswith("error: ") and err.endswith("\n") and err.count("\n") == 1, err
    assert "Traceback" not in err
    for frag in fragments:
        assert frag in err, (frag, err)
    # Nothing changed: the archive byte for byte, no temporary, lock or output file appeared.
    assert sha256(archive_copy) == archive_before
    assert snapshot(tmp_path) == before


def test_advice_in_night_conflict_error_names_a_real_command(capsys, series, archive_copy, tmp_path):
    argv, _, _ = _case("night already in archive", series, archive_copy, tmp_path)
    rc, _, err = run(capsys, *argv)
    assert rc != 0
    suggested = re.findall(r"'varstar ([a-z-]+)", err)
    assert "ingest all files of a night together" in err
    sub = next(a for a in build_parser()._actions if a.dest == "command")
    for cmd in suggested:
        assert cmd in sub.choices, f"error suggests 'varstar {cmd}', which does not exist"


# --------------------------------------------------------------------------- demo


@pytest.fixture(scope="module")
def demo_truth():
    return json.loads((DEMO / "truth.json").read_text())


def _check_demo_folder(folder: Path, demo_truth) -> dict:
    files = {p.name for p in folder.iterdir()}
    h5 = [f for f in files if f.endswith(".h5")]
    assert len(h5) == 1
    cloudy = demo_truth["clouds"][0]["night"]
    assert {"lightcurve.png", "observations.csv", "summary.json", f"night-{cloudy}.png", "archive.html",
            f"night-{cloudy}.html"} <= files
    assert b'id="verdict"' in (folder / f"night-{cloudy}.html").read_bytes()
    assert (folder / "lightcurve.png").read_bytes()[:8] == PNG_MAGIC
    assert (folder / f"night-{cloudy}.png").read_bytes()[:8] == PNG_MAGIC
    assert not [f for f in files if f.endswith(".tmp")]
    # The demo regenerates the shipped series byte for byte.
    shipped = {p.name for p in DEMO.iterdir() if p.suffix in (".csv", ".json", ".toml")}
    assert {p.name for p in (folder / "data").iterdir()} == shipped | {"frames"}  # and the night of FITS frames
    frames = sorted(p.name for p in (folder / "data" / "frames").iterdir())
    assert frames[-1] == "truth.csv" and len(frames) == 61 and all(f.endswith(".fits") for f in frames[:-1])
    for name in shipped:
        assert (folder / "data" / name).read_bytes() == (DEMO / name).read_bytes(), name
    result = strict_loads((folder / "summary.json").read_text())
    summary = result["summary"]
    # The standard-system steps ran: coefficients fitted from the standard field, a colour summary.
    assert {"coefficients.png", "colour.png", "setups.toml"} <= files
    assert any(f.startswith("colour-magnitude-") and f.endswith(".png") for f in files)
    assert abs(result["coefficients"]["mu_bv"] - demo_truth["transformation"]["mu"]) < 0.03
    assert result["colour"]["teff_min_k"] < result["colour"]["teff_max_k"]
    assert all(b["n_standard"] > 0.9 * b["n_points"] for b in summary["bands"].values())
    labels = sorted([*demo_truth["files"]["nights"], FRAMES_NIGHT])
    assert sorted(n["label"] for n in summary["nights"]) == labels
    obs = pd.read_csv(folder / "observations.csv")
    assert len(obs) == sum(b["n_points"] for b in summary["bands"].values())
    arch = varstar.open_archive(folder / h5[0])
    assert len(arch.lightcurve()) == len(obs)
    return summary


def test_demo_text(capsys, demo_truth, tmp_path):
    out_dir = tmp_path / "demo"
    out = ok(capsys, "demo", "--out", out_dir)
    _check_demo_folder(out_dir, demo_truth)
    # Truth: the secretly variable comparison star is named as rejected.
    for v in demo_truth["variable_comparisons"]:
        assert f"rejected {v['id']} (variable)" in out
    # Truth: the cloudy night's report lists flagged frames, all of them under the cloud.
    blocks = night_blocks(out)
    assert sorted(blocks) == sorted([*demo_truth["files"]["nights"], FRAMES_NIGHT])
    assert f"drew 60 FITS frames of night {FRAMES_NIGHT}" in out
    cloud = demo_truth["clouds"][0]
    frames = flagged_frames_in_text(blocks[cloud["night"]])
    assert frames and set(frames) <= set(cloud["frames"])
    assert f"Demo results are in {out_dir}" in out


def test_demo_json(capsys, demo_truth, tmp_path):
    out_dir = tmp_path / "demo"
    obj = one_json(ok(capsys, "demo", "--out", out_dir, "--json"))
    summary = _check_demo_folder(out_dir, demo_truth)
    assert obj["folder"] == str(out_dir)
    assert sorted(obj["nights"]) == sorted([*demo_truth["files"]["nights"], FRAMES_NIGHT])
    assert all(Path(p).exists() and Path(p).parent == out_dir for p in obj["files"])
    assert {Path(p).name for p in obj["files"]} >= {"lightcurve.png", "observations.csv", "summary.json"}
    assert obj["summary"]["n_nights"] == len(demo_truth["files"]["nights"]) + 1
    # Truth of the simulation: every timed maximum (B and V, on the standard system, seven nights) lies within
    # 3 sigma of epoch + E period (the truth's epoch rounded to 1e-4 d counted in); a mean curve that ignored
    # the nights' shared calibration errors put the V maxima 1.5 min (5 sigma) early here.
    truth = demo_truth["target"]
    for t in obj["timings"]["timings"]:
        n = round((t["bjd_tdb"] - truth["epoch"]) / truth["period"])
        off = t["bjd_tdb"] - (truth["epoch"] + n * truth["period"])
        assert abs(off) < 3 * math.hypot(t["err"], 0.5e-4 / math.sqrt(3)), (t["band"], t["night"], off * 1440)
    assert obj["summary"]["bands"] == summary["bands"]


def test_demo_into_non_empty_folder_fails_cleanly(capsys, tmp_path):
    out_dir = tmp_path / "busy"
    out_dir.mkdir()
    (out_dir / "keep.txt").write_text("mine")
    before = snapshot(tmp_path)
    for extra in ([], ["--json"]):
        rc, out, err = run(capsys, "demo", "--out", out_dir, *extra)
        assert rc == OutputError.exit_code != 0
        assert out == ("" if not extra else json.dumps({"error": err[len("error: "):-1], "exit_code": rc}, ensure_ascii=False) + "\n")
        assert err.startswith("error: ") and err.count("\n") == 1 and str(out_dir) in err
        assert snapshot(tmp_path) == before


def test_demo_out_onto_a_file_fails_cleanly(capsys, tmp_path):
    target = tmp_path / "results"
    target.write_text("not a folder")
    before = snapshot(tmp_path)
    rc, out, err = run(capsys, "demo", "--out", target)
    assert rc != 0 and out == ""
    assert err.startswith("error: ") and err.count("\n") == 1 and str(target) in err
    assert snapshot(tmp_path) == before


def test_ingest_replace_swaps_a_night_ingested_from_a_cut_file(capsys, demo_data, tmp_path):
    """A night first ingested from a file cut short is replaced whole by the complete file with
    --replace; without it the complete file is refused in words and the archive is unchanged."""
    full = demo_data.folder / "night-2026-09-12.csv"
    cut = tmp_path / "cut.csv"
    cut.write_text("".join(full.read_text().splitlines(keepends=True)[:1000]))
    path = tmp_path / "a.h5"
    ok(capsys, "init", path, demo_data.folder / "target.toml")
    ok(capsys, "ingest", path, cut)
    n_cut = varstar.open_archive(path).lightcurve().shape[0]
    before = path.read_bytes()
    rc, out, err = run(capsys, "ingest", path, full)
    assert rc != 0 and "--replace" in err and path.read_bytes() == before
    out = ok(capsys, "ingest", path, full, "--replace")
    assert "replaced the stored night 2026-09-12" in out
    arch = varstar.open_archive(path)
    assert list(arch.nights()["label"]) == ["2026-09-12"] and arch.lightcurve().shape[0] > n_cut
    assert ok(capsys, "verify", path).split(":")[1].strip().startswith("OK")
