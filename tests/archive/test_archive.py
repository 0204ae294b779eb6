"""The archive: creation, layout as documented, all-or-nothing changes, the writer lock."""

from __future__ import annotations

import multiprocessing as mp
import re
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest

import varstar
from varstar.archive import tables
from varstar.archive.layout import SCHEMA_VERSION, TABLES
from varstar.archive.transaction import lock_path, transaction, writer_lock
from varstar.errors import ArchiveError

from helpers import DEMO, REPO as ROOT


@pytest.fixture()
def empty(tmp_path):
    path = tmp_path / "t.h5"
    varstar.create_archive(path, varstar.read_target(DEMO / "target.toml"))
    return path


def test_create_writes_a_plain_documented_layout(empty):
    with h5py.File(empty, "r") as f:
        assert f.attrs["format"] == "varstar-archive"
        assert int(f.attrs["schema_version"]) == SCHEMA_VERSION
        assert "[target]" in f["target"].attrs["toml"]
        for table, cols in TABLES.items():
            assert set(f[table].keys()) == set(cols), table
        assert list(f["stars"]["id"].asstr()[()])[:2] == ["V1", "C1"]
    arch = varstar.open_archive(empty)
    assert arch.target.name.startswith("Wren-Hollow 7")
    assert arch.nights().empty and arch.lightcurve().empty
    assert arch.summary()["n_nights"] == 0


def test_documentation_lists_every_table_and_column():
    # docs/archive-format.md is the layout for people; it must not drift from the code.
    doc = (ROOT / "docs" / "archive-format.md").read_text()
    assert f"schema {SCHEMA_VERSION}" in doc
    for table, cols in TABLES.items():
        section = re.search(rf"### `/{table}`(.*?)(?=\n### |\n## |\Z)", doc, re.S)
        assert section, table
        for col in cols:
            assert f"`{col}`" in section.group(1), (table, col)


def test_create_never_overwrites(empty, tmp_path):
    before = empty.read_bytes()
    with pytest.raises(ArchiveError, match="already exists"):
        varstar.create_archive(empty, varstar.read_target(DEMO / "target.toml"))
    assert empty.read_bytes() == before
    with pytest.raises(ArchiveError, match="does not exist"):
        varstar.create_archive(tmp_path / "no" / "x.h5", varstar.read_target(DEMO / "target.toml"))


def test_open_refuses_foreign_and_newer_files(tmp_path, empty):
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["x"] = 1
    with pytest.raises(ArchiveError, match="not a varstar archive"):
        varstar.open_archive(other)
    (tmp_path / "text.h5").write_text("hello")
    with pytest.raises(ArchiveError, match="not a readable HDF5"):
        varstar.open_archive(tmp_path / "text.h5")
    with h5py.File(empty, "r+") as f:
        f.attrs["schema_version"] = SCHEMA_VERSION + 1
    with pytest.raises(ArchiveError, match="newer than this varstar"):
        varstar.open_archive(empty)
    with pytest.raises(ArchiveError, match="no such archive"):
        varstar.open_archive(tmp_path / "missing.h5")


def test_failure_in_the_middle_of_a_write_leaves_the_archive_as_it_was(empty, monkeypatch):
    # An error after some tables were appended (here: the fourth append) must leave
    # the file byte-for-byte unchanged and no temporary file behind.
    varstar.ingest(empty, [DEMO / "night-2026-09-11.csv"])
    before = empty.read_bytes()
    real = tables.append
    calls = {"n": 0}

    def failing(root, table, columns):
        calls["n"] += 1
        if calls["n"] == 4:
            raise OSError(28, "No space left on device")
        return real(root, table, columns)

    monkeypatch.setattr(tables, "append", failing)
    with pytest.raises(ArchiveError, match="disk full"):
        varstar.ingest(empty, [DEMO / "night-2026-09-12.csv"])
    assert calls["n"] == 4
    assert empty.read_bytes() == before
    assert sorted(p.name for p in empty.parent.iterdir()) == ["t.h5", "t.h5.lock"]
    assert len(varstar.open_archive(empty).nights()) == 1


def test_exception_inside_a_transaction_rolls_back(empty):
    before = empty.read_bytes()
    with pytest.raises(RuntimeError):
        with transaction(empty) as f:
            tables.append(f, "bands", {"name": ["Q"]})
            raise RuntimeError("boom")
    assert empty.read_bytes() == before


def _hold_lock(path: str, ready, release) -> None:
    with writer_lock(Path(path)):
        ready.set()
        release.wait(10)


def test_second_writer_waits_then_names_the_holder(empty):
    ctx = mp.get_context("fork")
    ready, release = ctx.Event(), ctx.Event()
    proc = ctx.Process(target=_hold_lock, args=(str(empty), ready, release))
    proc.start()
    try:
        assert ready.wait(10)
        before = empty.read_bytes()
        with pytest.raises(ArchiveError, match=rf"another varstar process is changing this archive \(pid {proc.pid} "):
            varstar.ingest(empty, [DEMO / "night-2026-09-11.csv"], timeout_s=0.3)
        assert empty.read_bytes() == before
    finally:
        release.set()
        proc.join(10)
    # Once released, the same ingest goes through.
    res = varstar.ingest(empty, [DEMO / "night-2026-09-11.csv"], timeout_s=5)
    assert [n["night"] for n in res.nights] == ["2026-09-11"]
    assert lock_path(empty).exists()


def test_lightcurve_selection_and_errors(empty):
    varstar.ingest(empty, [DEMO / "night-2026-09-19.csv"])
    arch = varstar.open_archive(empty)
    v = arch.lightcurve(band="V")
    assert set(v["band"]) == {"V"} and set(v["star"]) == {"V1"}
    assert (v["quality"] == 0).all()
    assert np.all(np.diff(v["bjd_tdb"]) > 0)
    k = arch.lightcurve(band="B", star="K1", include_flagged=True)
    assert set(k["star"]) == {"K1"} and (k["quality"] != 0).any()
    tokens = {t for f in k.loc[k["quality"] != 0, "flags"] for t in f.split(";")}
    assert "" not in tokens
    assert tokens <= {"too_few_comparisons", "zero_point_error", "zero_point_jump", "upstream_flag", "no_zero_point"}
    assert (k.loc[k["quality"] == 0, "flags"] == "").all()
    with pytest.raises(ArchiveError, match="no observations in band 'R'"):
        arch.lightcurve(band="R")
    with pytest.raises(ArchiveError, match="no star 'Z9'"):
        arch.lightcurve(star="Z9")
    with pytest.raises(ArchiveError, match="no night '2020-01-01'"):
        arch.night_report("2020-01-01")
    s = arch.summary()
    assert s["bands"]["V"]["n_points"] == len(v)
    assert s["nights"][0]["label"] == "2026-09-19"


def test_comparison_star_light_curve_is_refused_with_a_reason(empty):
    with pytest.raises(ArchiveError, match="'C1' is a comparison star"):
        varstar.open_archive(empty).lightcurve(star="C1")


def test_lightcurve_columns_subset_equals_the_full_table(demo_archive_path):
    """Reading only some columns gives exactly those columns of the full table, in the same order."""
    arch = varstar.open_archive(demo_archive_path)
    for kw in ({}, {"band": "V"}, {"include_flagged": True}, {"standard": False}):
        full = arch.lightcurve(**kw)
        cols = ["night", "mag", "bjd_tdb", "flags", "frame", "airmass"]
        part = arch.lightcurve(columns=cols, **kw)
        assert list(part.columns) == cols
        pd.testing.assert_frame_equal(part, full[cols])
    assert (arch.lightcurve(include_flagged=True, columns=["flags"])["flags"] != "").any()
    with pytest.raises(ArchiveError, match="unknown light-curve column"):
        arch.lightcurve(columns=["mag", "colour"])
