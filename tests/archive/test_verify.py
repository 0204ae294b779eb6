"""Archive integrity: per-night checksums, ``varstar verify``, ``remove-night`` and schema upgrades.

Each damage below is made on purpose with h5py (as a disk error or a careless
script would) and ``verify`` must name it in words; each check would pass if the
corresponding part of verify were missing.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest

from helpers import one_json, run

import varstar  # noqa: E402
from varstar.archive import tables  # noqa: E402
from varstar.archive.verify import upgrade, verify  # noqa: E402
from varstar.archive.layout import ADDED_IN, RETYPED_IN, SCHEMA_VERSION  # noqa: E402
from varstar.errors import ArchiveError  # noqa: E402


@pytest.fixture(scope="module")
def three_nights(demo_data, tmp_path_factory):
    """An archive of three demo nights (plus the files, for re-ingest)."""
    path = tmp_path_factory.mktemp("three") / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    nights = [p for p in demo_data.nights if "2026-09-" in p.name][:3]
    for p in nights:
        varstar.ingest(path, [p])
    return path, nights


@pytest.fixture
def arch(three_nights, tmp_path):
    src, nights = three_nights
    dst = tmp_path / "a.h5"
    shutil.copyfile(src, dst)
    return dst, nights


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_fresh_archive_verifies(capsys, arch):
    path, _ = arch
    rep = verify(path)
    assert rep.ok and rep.checked["checksums_ok"] == 3 * 6  # 3 nights x 6 checksummed tables
    rc, out, err = run(capsys, "verify", path)
    assert rc == 0 and "OK" in out and err == ""
    rc, out, _ = run(capsys, "verify", path, "--json")
    assert one_json(out)["ok"] is True


def _poke(path: Path, table: str, column: str, row: int, value) -> None:
    with h5py.File(path, "r+") as f:
        f[table][column][row] = value


@pytest.mark.parametrize(
    "damage, expected",
    [
        # a raw magnitude changed: checksum of its night and the point no longer follow from it
        (("raw", "mag", 5, 99.0), "the data in /raw changed since ingest"),
        (("exposures", "zero_point", 3, 1.234), "the data in /exposures changed since ingest"),
        (("points", "mag", 0, 20.0), "differ from raw magnitude minus the exposure's zero point"),
        (("points", "exposure", 0, 10**6), "/points/exposure points outside its table"),
        (("nights", "n_points", 1, 7), "/nights says 7 light-curve points"),
    ],
)
def test_verify_names_each_damage(capsys, arch, damage, expected):
    path, _ = arch
    _poke(path, *damage)
    rep = verify(path)
    assert not rep.ok and any(expected in p for p in rep.problems), rep.problems
    rc, out, err = run(capsys, "verify", path)
    assert rc == 3 and expected in out and err.startswith("error: ") and err.count("\n") == 1


def test_verify_finds_a_half_written_row(arch):
    path, _ = arch
    with h5py.File(path, "r+") as f:
        ds = f["raw"]["mag"]
        ds.resize((ds.shape[0] - 1,))
    rep = verify(path)
    assert any("different lengths" in p and "/raw" in p for p in rep.problems)


def test_verify_of_something_else(tmp_path):
    p = tmp_path / "x.h5"
    p.write_bytes(b"not hdf5 at all")
    assert not verify(p).ok and "not a readable HDF5" in verify(p).problems[0]


def test_remove_night_then_ingest_it_again(capsys, arch):
    path, nights = arch
    a = varstar.open_archive(path)
    lc_before = a.lightcurve(include_flagged=True)
    label = str(a.nights()["label"].iloc[1])  # the middle night: later rows must be renumbered
    rc, out, err = run(capsys, "remove-night", path, label, "--reason", "wrong filter in the header", "--json")
    assert rc == 0, err
    res = one_json(out)
    assert res["night"] == label and res["n_points"] > 0
    assert label not in set(a.nights()["label"])
    assert verify(path).ok  # references renumbered, checksums of the other nights unchanged
    lc = a.lightcurve(include_flagged=True)
    # the other nights' points are untouched, and still match their exposures
    kept = lc_before[lc_before["night"] != label].reset_index(drop=True)
    assert len(lc) == len(kept) < len(lc_before)
    np.testing.assert_array_equal(lc["mag"].to_numpy(), kept["mag"].to_numpy())
    np.testing.assert_array_equal(lc["frame"].to_numpy(), kept["frame"].to_numpy())
    with h5py.File(path, "r") as f:
        rem = tables.read(f, "removals")
    assert list(rem["label"]) == [label] and rem["reason"][0] == "wrong filter in the header"
    # the same file can be ingested again (its checksum left with the night), under a new night number
    again = [p for p in nights if label in p.name]
    varstar.ingest(path, again)
    assert verify(path).ok
    with h5py.File(path, "r") as f:
        numbers = tables.read(f, "nights", ["night"])["night"]
    assert len(set(numbers.tolist())) == 3 and rem["night"][0] not in numbers
    assert len(varstar.open_archive(path).lightcurve(include_flagged=True)) == len(lc_before)


def test_remove_unknown_night_changes_nothing(capsys, arch):
    path, _ = arch
    before = digest(path)
    rc, out, err = run(capsys, "remove-night", path, "2030-01-01")
    # the archive lacks what was asked for: 3, as in every command (README, "Exit codes")
    assert rc == 3 and "no night '2030-01-01'" in err and digest(path) == before


def _make_schema_1(path: Path) -> None:
    """Turn an archive into what schema 1 wrote: no newer tables, version 1."""
    with h5py.File(path, "r+") as f:
        for t in ADDED_IN[2] + ADDED_IN[3]:
            del f[t]
        for t, col in RETYPED_IN[2]:  # schema 1 kept these as variable-length text
            values = f[t][col][()].astype(str)
            del f[t][col]
            f[t].create_dataset(col, data=np.array(values, dtype=object), dtype=h5py.string_dtype("utf-8"),
                                maxshape=(None,), chunks=(1024,))
        f.attrs["schema_version"] = 1


def test_older_schema_reads_refuses_changes_and_upgrades_with_a_backup(capsys, arch):
    path, nights = arch
    _make_schema_1(path)
    old_bytes = path.read_bytes()
    a = varstar.open_archive(path)
    assert len(a.lightcurve()) > 0  # reading works
    labels_before = list(a.nights()["label"])
    rep = verify(path)
    assert rep.ok and any("varstar upgrade" in n for n in rep.notes)
    # any change is refused until the observer asks for the upgrade
    rc, _, err = run(capsys, "remove-night", path, str(a.nights()["label"].iloc[0]))
    assert rc == 3 and "schema 1 is older" in err and "varstar upgrade" in err
    assert path.read_bytes() == old_bytes
    rc, out, err = run(capsys, "upgrade", path, "--json")
    assert rc == 0, err
    res = one_json(out)
    assert res["upgraded"] and res["from_schema"] == 1 and res["schema_version"] == SCHEMA_VERSION
    assert Path(res["backup"]).read_bytes() == old_bytes  # the backup is the old file exactly
    assert verify(path).ok and verify(path).checked["checksums_ok"] == 18
    with h5py.File(path, "r") as f:
        assert f["sources"]["sha256"].dtype == np.dtype("S64") and f["nights"]["label"].dtype == np.dtype("S10")
    assert list(varstar.open_archive(path).nights()["label"]) == labels_before
    rc, out, _ = run(capsys, "upgrade", path)
    assert rc == 0 and "nothing to do" in out
    # a second upgrade of another old copy does not overwrite the first backup
    assert upgrade(path)["upgraded"] is False


def test_a_schema_2_archive_upgrades_with_its_description_as_the_first_version(arch):
    path, _ = arch
    with h5py.File(path, "r+") as f:
        del f["descriptions"]
        f.attrs["schema_version"] = 2
        n_digests = f["digests"]["night"].shape[0]
        toml = f["target"].attrs["toml"]
    a = varstar.open_archive(path)
    assert list(a.descriptions()["description"]) == [0] and a.description_in_force() == 0  # read as it is
    res = upgrade(path)
    assert res["upgraded"] and res["tables_added"] == ("descriptions",) and res["nights_checksummed"] == 0
    hist = varstar.open_archive(path).descriptions()
    assert list(hist["description"]) == [0] and hist["toml"].iloc[0] == toml
    with h5py.File(path, "r") as f:
        assert f["digests"]["night"].shape[0] == n_digests  # the checksums are not written twice
    assert verify(path).ok


def test_newer_schema_is_refused(arch):
    path, _ = arch
    with h5py.File(path, "r+") as f:
        f.attrs["schema_version"] = SCHEMA_VERSION + 1
    with pytest.raises(ArchiveError, match="newer than this varstar"):
        upgrade(path)
    assert "newer" in verify(path).problems[0]


def test_public_api_reaches_verify_and_remove_night(arch):
    path, _ = arch
    assert varstar.verify(path).ok
    label = str(varstar.open_archive(path).nights()["label"].iloc[0])
    assert varstar.remove_night(path, label, reason="test")["night"] == label
    assert varstar.verify(path).ok and varstar.upgrade(path)["upgraded"] is False
