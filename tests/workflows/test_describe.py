"""Changing an archive's target description: the history, the re-reduced nights, atomicity, the command.

The reference for a re-reduction is the other way to the same result: a new
archive created with the edited description and the same files ingested into it
must hold exactly the light curve the edited archive holds.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest

import varstar
from varstar.errors import InputError
from varstar.inputs import load_toml
from varstar.workflows.describe import describe_changes, edit_target, edit_toml

from helpers import one_json, run

TOML = """# my field
[target]
name = "Field A"  # kept
ra = 10.0
dec = 20.0

[site]
latitude = 50.0
longitude = 10.0
elevation = 100.0

[[stars]]
id = "V1"
role = "target"

[[stars]]
id = "C1"
role = "comparison"
V = 12.0
"""


def _copy(src: Path, tmp_path: Path) -> Path:
    path = tmp_path / "a.h5"
    shutil.copyfile(src, path)
    return path


def _bytes(path: Path) -> bytes:
    return path.read_bytes()


# --------------------------------------------------------------------------- the text


def test_edit_toml_sets_keys_by_path_and_stars_by_id_keeping_comments():
    out = edit_toml(TOML, ["stars.C1.V=12.31", "stars.C1.V_err=0.02", 'reduction.exclude=["C1"]', "target.name=Field B"])
    d = load_toml(out, "edited")
    assert d["stars"][1] == {"id": "C1", "role": "comparison", "V": 12.31, "V_err": 0.02}
    assert d["reduction"]["exclude"] == ["C1"]
    assert d["target"]["name"] == "Field B"  # not TOML: taken as text
    assert "# my field" in out and "# kept" in out  # the observer's comments stay


def test_edit_toml_adds_and_replaces_a_whole_star_and_removes_keys():
    out = edit_toml(TOML, ['stars.K1={role = "check", V = 13.0}'], ["stars.C1.V"])
    d = load_toml(out, "edited")
    assert d["stars"][2] == {"id": "K1", "role": "check", "V": 13.0}
    assert "V" not in d["stars"][1]


@pytest.mark.parametrize(
    "sets, unsets, match",
    [
        (["stars.C9.V=12"], [], "no star 'C9'.*stars.C9="),
        (["stars.C1.id=C2"], [], "id names it everywhere"),
        (["novalue"], [], "expected KEY=VALUE"),
        (["target..name=x"], [], "empty part"),
        (["target.name.x=1"], [], "'name' is a value"),
        ([], ["stars.C1"], "reduction.exclude"),
        ([], ["nothing.here"], "no table 'nothing'"),
        ([], ["target.colour"], "no key 'colour'"),
    ],
)
def test_edit_toml_refuses_what_it_cannot_do_with_the_key_named(sets, unsets, match):
    with pytest.raises(InputError, match=match):
        edit_toml(TOML, sets, unsets)


def test_describe_changes_lists_each_key_in_words():
    new = edit_toml(TOML, ["stars.C1.V=12.5", 'stars.K1={role = "check"}', "reduction.clip_sigma=4.0"], ["target.ra"])
    lines = describe_changes(TOML, new)
    assert "stars.C1.V: 12.0 -> 12.5" in lines
    assert "stars.K1: new star" in lines and 'stars.K1.role = "check" (new)' in lines
    assert "reduction.clip_sigma = 4.0 (new)" in lines
    assert "target.ra (removed; was 10.0)" in lines
    assert describe_changes(TOML, TOML) == []


# --------------------------------------------------------------------------- the archive


def test_a_name_change_reduces_no_night_and_keeps_the_history(demo_archive_path, tmp_path):
    path = _copy(demo_archive_path, tmp_path)
    lc0 = varstar.open_archive(path).lightcurve(include_flagged=True)
    res = edit_target(path, sets=['target.name="Renamed field"'], note="a better name")
    assert res.changed and res.description == 1 and res.rereduced == () and res.unchanged_nights == ()
    a = varstar.open_archive(path)
    assert a.target.name == "Renamed field" and a.summary()["target"]["name"] == "Renamed field"
    hist = a.descriptions()
    assert list(hist["description"]) == [0, 1] and hist["note"].iloc[1] == "a better name"
    assert "Renamed field" not in hist["toml"].iloc[0] and "Renamed field" in hist["toml"].iloc[1]
    assert a.lightcurve(include_flagged=True).equals(lc0)
    assert varstar.verify(path).ok


def test_a_change_that_changes_no_result_rewrites_no_night(demo_archive_path, tmp_path):
    # A table of one's own is kept in the description; the reduction is rerun (it might read it) and gives
    # the stored result bit for bit, so no night is rewritten: the nights' checksums stay the same.
    path = _copy(demo_archive_path, tmp_path)
    with h5py.File(path, "r") as f:
        digests = f["digests"]["sha256"].asstr()[()].tolist()
    res = edit_target(path, sets=["mine.telescope=\"35 cm\""])
    assert res.rereduced == () and len(res.unchanged_nights) == 6
    with h5py.File(path, "r") as f:
        assert f["digests"]["sha256"].asstr()[()].tolist() == digests


def test_excluding_a_comparison_star_rereduces_every_night_as_a_new_archive_would(demo_archive_path, demo_data, tmp_path):
    path = _copy(demo_archive_path, tmp_path)
    before = varstar.open_archive(path)
    raw0, nights0 = before.raw(), before.nights()
    res = edit_target(path, sets=['reduction.exclude=["C3"]'], note="C3 looks variable")
    assert res.description == 1 and len(res.rereduced) == 6 and res.unchanged_nights == ()
    a = varstar.open_archive(path)
    # raw data never changes; the nights keep their numbers and ingest dates
    key = ["source", "line", "frame", "jd", "band", "star", "mag", "mag_err", "flag", "night"]
    order = ["source", "line", "star"]
    assert a.raw().sort_values(order)[key].reset_index(drop=True).equals(raw0.sort_values(order)[key].reset_index(drop=True))
    cols = ["night", "night_number", "ingested_utc", "n_exposures"]
    assert a.nights()[cols].sort_values("night").reset_index(drop=True).equals(nights0[cols])
    c3 = a.comparisons()
    assert (c3.loc[c3["star"] == "C3", "status"] == "excluded").all()
    assert all(a.night_report(lab)["description"] == 1 for lab in nights0["night"])
    assert a.descriptions()["rereduced"].iloc[1] == ", ".join(nights0["night"])
    assert varstar.verify(path).ok

    # Reference: a fresh archive with the edited description, the same files ingested.
    fresh_toml = tmp_path / "edited.toml"
    fresh_toml.write_text(a.descriptions()["toml"].iloc[1])
    fresh = tmp_path / "fresh.h5"
    varstar.create_archive(fresh, varstar.read_target(fresh_toml))
    varstar.ingest(fresh, demo_data.nights)
    cols = ["bjd_tdb", "band", "star", "mag", "mag_err", "cal_err", "quality"]
    got = a.lightcurve(include_flagged=True)[cols].reset_index(drop=True)
    want = varstar.open_archive(fresh).lightcurve(include_flagged=True)[cols].reset_index(drop=True)
    assert got.equals(want)


def test_a_dry_run_and_a_refused_change_leave_the_archive_byte_identical(demo_archive_path, tmp_path):
    path = _copy(demo_archive_path, tmp_path)
    before = _bytes(path)
    res = edit_target(path, sets=['reduction.exclude=["C3"]'], dry_run=True)
    assert res.dry_run and res.description is None and len(res.rereduced) == 6
    assert _bytes(path) == before
    # a star the archive knows cannot leave the description
    text = varstar.open_archive(path).target.source_text
    without_k1 = text[: text.index('[[stars]]\nid = "K1"')] + text[text.index("[ephemeris]"):]
    with pytest.raises(InputError, match="K1 are in the archive.*keep its \\[\\[stars\\]\\] table"):
        edit_target(path, text=without_k1)
    without_c7 = text[: text.index('[[stars]]\nid = "C7"')] + text[text.index('[[stars]]\nid = "K1"'):]
    with pytest.raises(InputError, match=r"C7 are in the archive.*edit-target .* --set 'reduction.exclude=\[\"C7\"\]'"):
        edit_target(path, text=without_c7)
    # a description the reader refuses
    with pytest.raises(InputError, match="C1'.V"):
        edit_target(path, sets=["stars.C1.V=bright"])
    assert _bytes(path) == before


def test_a_description_that_makes_the_nights_implausible_is_refused_unless_accepted(demo_archive_path, tmp_path):
    path = _copy(demo_archive_path, tmp_path)
    before = _bytes(path)
    ra = varstar.open_archive(path).target.ra_deg
    shifted = f"target.ra={(ra + 180.0) % 360.0}"  # the field now sets when the nights were observed
    with pytest.raises(InputError, match="cannot be reduced under the new description.*below the horizon"):
        edit_target(path, sets=[shifted])
    assert _bytes(path) == before
    res = edit_target(path, sets=[shifted], accept_unusual=True)
    assert len(res.rereduced) == 6
    a = varstar.open_archive(path)
    rep = a.night_report(res.rereduced[0])
    assert rep["accepted_unusual"] and "below the horizon" in " ".join(rep["accepted_unusual"])
    assert varstar.verify(path).ok


def test_a_new_ephemeris_joins_the_history_and_stale_timings_go(demo_archive_path, tmp_path):
    path = _copy(demo_archive_path, tmp_path)
    a = varstar.open_archive(path)
    a.time_extrema()
    n_timings = len(a.timings())
    assert n_timings > 0
    eph = a.ephemerides()
    res = edit_target(path, sets=["ephemeris.period=0.4617", "stars.C2.V_err=0.02"])
    a = varstar.open_archive(path)
    assert len(a.ephemerides()) == len(eph) + 1 and float(a.ephemerides()["period"].iloc[-1]) == 0.4617
    assert a.ephemerides()["source"].iloc[-1] == "target description 1 [ephemeris]"
    # C2's catalogue error enters every night's calibration error: every night changes, its timings go
    assert len(res.rereduced) == 6 and res.timings_removed == n_timings and a.timings().empty
    assert any("varstar timings" in n for n in res.notes)
    assert varstar.verify(path).ok


def test_ingest_after_an_edit_uses_and_records_the_new_description(demo_data, tmp_path):
    path = tmp_path / "b.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    varstar.ingest(path, demo_data.nights[:1])
    edit_target(path, sets=['reduction.exclude=["C3"]'])
    res = varstar.ingest(path, demo_data.nights[1:2])
    rep = res.nights[0]
    assert rep["description"] == 1
    assert any(r["star"] == "C3" and r["status"] == "excluded" for b in rep["bands"].values()
               for r in b["comparisons_rejected"])


# --------------------------------------------------------------------------- the command


def test_edit_target_command(capsys, demo_archive_path, tmp_path):
    path = _copy(demo_archive_path, tmp_path)
    rc, out, err = run(capsys, "edit-target", path, "--set", 'reduction.exclude=["C3"]', "--note", "C3 varies", "--dry-run")
    assert rc == 0 and "dry run" in out and "6 nights would be reduced again" in out
    rc, out, err = run(capsys, "edit-target", path, "--set", 'stars.C9={role = "check", V = 12.5}', "--json")
    res = one_json(out)
    assert rc == 0 and res["description"] == 1 and "stars.C9: new star" in res["changes"]
    assert set(varstar.open_archive(path).star_ids()) >= {"C9"} and varstar.verify(path).ok
    rc, out, _ = run(capsys, "edit-target", path, "--history")
    assert rc == 0 and len(out.strip().splitlines()) == 2
    rc, out, _ = run(capsys, "edit-target", path, "--show")
    assert rc == 0 and 'id = "C9"' in out
    rc, out, _ = run(capsys, "edit-target", path, "--show", "0")
    assert rc == 0 and 'id = "C9"' not in out
    rc, out, err = run(capsys, "edit-target", path, "--show", "5", "--json")
    assert rc == 3 and "no description 5" in one_json(out)["error"]
    rc, out, err = run(capsys, "edit-target", path)
    assert rc == 2 and "--set" in err
    new = tmp_path / "new.toml"
    new.write_text(varstar.open_archive(path).target.source_text.replace("Wren-Hollow 7", "Wren-Hollow Seven"))
    rc, out, err = run(capsys, "edit-target", path, new)
    assert rc == 0 and "target.name" in out and varstar.open_archive(path).target.name.startswith("Wren-Hollow Seven")
