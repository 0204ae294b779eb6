"""Damaged archives, misfiled codes, and the files beside an archive (issue 11, items 3, 7, 9 and 10).

* Damage (item 3): bytes of an archive overwritten at many places (fixed seed).
  Every command must answer in words (``error: ...`` and exit 3, or its normal
  output); a writer that refuses leaves the file byte for byte as it was;
  ``varstar verify`` fails whenever any reader fails, and names what it cannot
  read.  HDF5 loops forever on some damaged text heaps and crashes when it writes
  into a file whose free-space record is damaged: both are reproduced here.
* Codes (item 7): band codes are 8-bit and star codes 16-bit; a value that does
  not fit is refused instead of wrapping, and ``verify`` decodes every night's
  codes against the names its reduction report recorded.
* Files beside the archive (item 9): ``init`` never deletes or truncates a file
  that merely has the journal's or the lock's name.
* Journals (item 10): a committed journal with one changed byte, at each kind
  of position, is kept aside (never deleted) and the archive refused until the
  user has checked it.

The archives are made from the invented demo field (``tests/conftest.py``) and
the simulator, with fixed seeds.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import io
import json
import shutil
import struct
import subprocess
import sys
import textwrap
from dataclasses import replace
from pathlib import Path

import h5py
import numpy as np
import pytest

import varstar
from varstar.archive import tables
from varstar.archive.transaction import open_read
from varstar.archive.verify import verify
from varstar.archive.layout import TABLES, code_capacity
from varstar.cli import main
from varstar.errors import ArchiveError
from varstar.target import Star

TX = sys.modules["varstar.archive.transaction"]  # ``varstar.archive.transaction`` is also a function's name
JR = sys.modules["varstar.archive.journal"]
SEED = 20261111


# --------------------------------------------------------------------------- helpers
def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def run(*argv) -> tuple[int, str, str]:
    """``varstar ARGV`` in this process: exit code, stdout, stderr (an escaping exception fails the test)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main([str(a) for a in argv])
    return rc, out.getvalue(), err.getvalue()


def shifted_night(src: Path, dst: Path, days: float) -> Path:
    """A demo night moved ``days`` later: a night the demo archive does not hold, for writers to add."""
    lines = src.read_text().splitlines()
    head = lines[0].split(",")
    jd = head.index("jd")
    out = [lines[0]]
    for line in lines[1:]:
        cells = line.split(",")
        cells[jd] = f"{float(cells[jd]) + days:.6f}"
        out.append(",".join(cells))
    dst.write_text("\n".join(out) + "\n")
    return dst


def damage(path: Path, offset: int, data: bytes) -> None:
    with open(path, "r+b") as fh:
        fh.seek(offset)
        fh.write(data)


def one_error_line(err: str, path: Path) -> None:
    """A refusal: one ``error:`` line, and no traceback; one about the archive's bytes names the archive."""
    assert "Traceback" not in err and "Exception ignored" not in err, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    if any(w in err for w in ("HDF5", "damaged", "could not read", "verification failed")):
        assert str(path) in lines[0], err


# --------------------------------------------------------------------------- item 3: damaged archives
@pytest.fixture(scope="module")
def three_nights(demo_data, tmp_path_factory) -> Path:
    """An archive of the first three demo nights (2026-09-11, -12, -19); copy it before changing it."""
    path = tmp_path_factory.mktemp("three") / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    varstar.ingest(path, demo_data.nights[:3])
    return path


@pytest.fixture(scope="module")
def new_night(demo_data, tmp_path_factory) -> Path:
    return shifted_night(demo_data.nights[0], tmp_path_factory.mktemp("night") / "night-later.csv", 40.0)


def _damages(size: int, n: int, seed: int) -> list[tuple[int, bytes]]:
    """``n`` damages of an archive of ``size`` bytes: a place after the superblock, a length and a pattern."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        offset = int(rng.integers(48, size))  # past HDF5's 48-byte superblock
        length = int(rng.choice([1, 16, 512, 4096, 8192]))
        kind = int(rng.integers(3))
        data = (b"\xff" * length, bytes(length), rng.bytes(length))[kind]
        out.append((offset, data[: max(0, size - offset)]))
    return out


def _try_commands(path: Path, commands: list[tuple[str, list, bool]]) -> dict[str, tuple[int, str]]:
    """Run each command on ``path``; check the promises; return each one's exit code and stderr."""
    got = {}
    for name, argv, writes in commands:
        before = sha(path)
        rc, out, err = run(*argv)
        assert rc in (0, 3), (name, rc, err)
        if rc:
            one_error_line(err, path)
        else:
            assert "Traceback" not in err, err
        if rc or not writes:  # a reader, or a writer that refused: the file as it was
            assert sha(path) == before, f"{name} (exit {rc}) changed the archive"
        got[name] = (rc, err)  # (after a writer's change the file is still damaged where it was)
    return got


FAST_FAMILY = 20
SLOW_FAMILY = 24


def test_every_command_on_a_damaged_archive_answers_in_words(three_nights, tmp_path):
    # Generated: FAST_FAMILY damages (fixed seed) x 6 commands.  Promises: no exception
    # escapes main(); exit 0 or one error line naming the archive (exit 3); a refused writer
    # leaves the file unchanged; verify fails whenever a reader fails (it reads everything).
    size = three_nights.stat().st_size
    tried = verify_failed = reader_failed = writer_refused = 0
    for k, (offset, data) in enumerate(_damages(size, FAST_FAMILY, SEED)):
        path = tmp_path / f"d{k}" / "a.h5"
        path.parent.mkdir()
        shutil.copyfile(three_nights, path)
        damage(path, offset, data)
        readers = [
            ("verify", ["verify", path], False),
            ("summary", ["summary", path], False),
            ("report", ["report", path, "2026-09-19"], False),
            ("export", ["export", path, "-o", path.parent / "lc.csv"], False),
            ("history", ["period", path, "--history"], False),
        ]
        got = _try_commands(path, readers + [("remove-night", ["remove-night", path, "2026-09-12"], True)])
        tried += 1
        failed = [n for n, _, _ in readers[1:] if got[n][0]]
        if failed:
            reader_failed += 1
            assert got["verify"][0] == 3, (offset, len(data), failed, got[failed[0]])
        verify_failed += got["verify"][0] == 3
        writer_refused += got["remove-night"][0] == 3
    assert tried == FAST_FAMILY
    # the family exercises the refusals, not only harmless damage
    assert verify_failed >= FAST_FAMILY // 3 and reader_failed >= FAST_FAMILY // 4 and writer_refused >= FAST_FAMILY // 4, (
        verify_failed, reader_failed, writer_refused)


@pytest.mark.slow
def test_ingest_and_the_analysis_commands_on_a_damaged_archive_answer_in_words(three_nights, new_night, tmp_path):
    # Generated: SLOW_FAMILY other damages x ingest and the slower commands (plots, period,
    # timings, colour, predict, upgrade, transform); same promises.
    coefficients = tmp_path / "coefficients.toml"
    coefficients.write_text("[transformation]\nepsilon_v = -0.05\nmu_bv = 1.02\n")
    size = three_nights.stat().st_size
    tried = refused = 0
    for k, (offset, data) in enumerate(_damages(size, SLOW_FAMILY, SEED + 1)):
        path = tmp_path / f"d{k}" / "a.h5"
        path.parent.mkdir()
        shutil.copyfile(three_nights, path)
        damage(path, offset, data)
        got = _try_commands(path, [
            ("plot", ["plot", path, "-o", path.parent / "lc.png"], False),
            ("period", ["period", path, "--no-store", "--single", "--band", "V"], False),
            ("predict", ["predict", path, "--from", "2026-11-01", "--to", "2026-11-03"], False),
            ("timings", ["timings", path, "--no-store"], False),
            ("upgrade", ["upgrade", path], True),
            ("ingest", ["ingest", path, new_night], True),
            ("transform", ["transform", path, "--coefficients", coefficients], True),
            ("colour", ["colour", path], False),
        ])
        tried += 1
        refused += any(rc for rc, _ in got.values())
    assert tried == SLOW_FAMILY and refused >= SLOW_FAMILY // 4, refused


def _first_chunk(path: Path, dataset: str) -> tuple[int, int]:
    with h5py.File(path, "r") as f:
        info = f[dataset].id.get_chunk_info(0)
        return info.byte_offset, info.size


def test_verify_and_readers_name_the_damaged_column_rows_and_nights(three_nights, tmp_path):
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    offset, size = _first_chunk(path, "points/mag")
    damage(path, offset + size // 2, b"\xff" * 64)  # inside the gzip stream of rows 0..16383
    rep = verify(path)
    assert not rep.ok
    [problem] = [p for p in rep.problems if p.startswith("/points/mag")]
    with h5py.File(path, "r") as f:
        n_points = f["points/mag"].shape[0]
    assert n_points < 16_384  # the demo's points fit one chunk
    assert f"{n_points:,} row(s) cannot be read (rows 0-{n_points - 1}" in problem
    assert "nights 2026-09-11, 2026-09-12" in problem and "HDF5:" in problem
    for argv in (["summary", path], ["export", path, "-o", tmp_path / "x.csv"], ["verify", path]):
        rc, out, err = run(*argv)
        assert rc == 3
        one_error_line(err, path)
    rc, _, err = run("summary", path)
    assert "could not read /points/mag" in err and f"varstar verify {path}" in err
    # a writer that must rewrite the damaged column refuses and changes nothing
    before = sha(path)
    rc, _, err = run("remove-night", path, "2026-09-12")
    assert rc == 3 and "/points/" in err and "nothing was written" in err
    assert sha(path) == before


def _heap_collections(path: Path) -> list[int]:
    blob = path.read_bytes()
    out, at = [], blob.find(b"GCOL")
    while at >= 0:
        out.append(at)
        at = blob.find(b"GCOL", at + 1)
    return out


def _heap_object(path: Path, dataset: str, row: int) -> tuple[int, int]:
    """Where row ``row`` of a text column lives: (its heap collection, its object header), in file bytes.

    A stored text value is a 16-byte reference (length u32, collection address u64,
    object index u32; HDF5 file format specification, "Global Heap ID"); the object
    is found by walking its collection.
    """
    with h5py.File(path, "r") as f:
        ds = f[dataset]
        start = row // ds.chunks[0] * ds.chunks[0]
        _, raw = ds.id.read_direct_chunk((start,))  # text columns are stored unfiltered
    _, coll, index = struct.unpack_from("<IQI", raw, 16 * (row - start))
    blob = path.read_bytes()
    p = 16
    while True:
        idx, _, _, size = struct.unpack_from("<HH4sQ", blob, coll + p)
        if idx == index:
            return coll, coll + p
        p += 16 + ((size + 7) & ~7)


def test_heap_walk_accepts_sound_collections_and_finds_stalling_ones(three_nights):
    # The walk of HDF5's global heap collection (HDF5 file format specification, "Global
    # Heap"): 16-byte header, then objects of a 16-byte header and 8-byte aligned data.
    blob = three_nights.read_bytes()
    starts = _heap_collections(three_nights)
    assert starts
    for at in starts:
        assert JR.heap_collection_problem(memoryview(blob)[at:], len(blob) - at) is None
    at = starts[0]
    size = struct.unpack_from("<Q", blob, at + 8)[0]
    coll = bytearray(blob[at:at + size])
    first = coll[16:32]
    zeroed = coll[:16] + bytes(16) + coll[32:]  # object index 0 of size 0: HDF5's walk stands still
    assert "empty object header at byte 16" in JR.heap_collection_problem(zeroed, size)
    huge = coll[:16] + first[:8] + struct.pack("<Q", size) + coll[32:]
    assert "runs past the collection's end" in JR.heap_collection_problem(huge, size)
    assert "a size of" in JR.heap_collection_problem(coll[:8] + struct.pack("<Q", 10**12) + coll[16:], size)


def test_a_zeroed_text_heap_is_refused_instead_of_hanging(three_nights, tmp_path):
    # 16 zero bytes over an object header of the heap holding the exposures' frame ids:
    # HDF5 alone loops forever on it.  Run in a child with a time limit, so a regression
    # fails instead of hanging the test session.
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    coll, header = _heap_object(path, "exposures/frame", 0)
    damage(path, header, bytes(16))
    code = textwrap.dedent(f"""
        import json, sys
        from varstar.cli import main
        from varstar.archive.verify import verify
        rep = verify({str(path)!r})
        rc = main(["export", {str(path)!r}, "-o", {str(tmp_path / "x.csv")!r}])
        print(json.dumps({{"problems": list(rep.problems), "rc": rc}}))
    """)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    res = json.loads(done.stdout.strip().splitlines()[-1])
    assert res["rc"] == 3 and "Traceback" not in done.stderr
    assert "could not read /exposures/frame" in done.stderr and f"global heap collection at byte {coll}" in done.stderr
    assert any(p.startswith("/exposures/frame:") and "empty object header" in p for p in res["problems"])


def test_a_damaged_free_space_record_stops_writers_before_they_start(three_nights, new_night, tmp_path):
    # HDF5 reads the record of free space (kept in the file) only when it writes; with a
    # damaged section list it failed inside the change and then crashed while closing.
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    blob = path.read_bytes()
    sections = blob.rfind(b"FSSE")  # a free-space section list (HDF5 file format specification)
    assert sections > 0
    damage(path, sections + 40, bytes([blob[sections + 40] ^ 0xFF]))
    before = sha(path)
    for argv in (["ingest", path, new_night], ["remove-night", path, "2026-09-12"]):
        rc, out, err = run(*argv)
        assert rc == 3, (argv, err)
        one_error_line(err, path)
        assert "record of its free space is damaged" in err and "Nothing was written" in err
        assert sha(path) == before
    rc, out, err = run("summary", path)  # readers do not need it
    assert rc == 0 and "2026-09-19" in out
    rep = verify(path)
    assert any("record of its free space is damaged" in p for p in rep.problems)


def test_damage_in_the_superblock_is_one_message_too(three_nights, tmp_path):
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    damage(path, 0, b"\xff" * 8)
    for argv in (["summary", path], ["verify", path], ["ingest", path, tmp_path / "none.csv"]):
        rc, _, err = run(*argv)
        assert rc == 3
        one_error_line(err, path)
        assert "not a readable HDF5 archive" in err or "verification failed" in err


# --------------------------------------------------------------------------- item 7: codes
@pytest.fixture
def scratch_tables(tmp_path):
    f = h5py.File(tmp_path / "t.h5", "w")
    tables.create_tables(f)
    yield f
    f.close()


def _points_row(**over) -> dict:
    row = {c: [0] for c in TABLES["points"]}
    row.update({k: [v] for k, v in over.items()})
    return row


@pytest.mark.parametrize("column, value", [("star", 65_536), ("star", -1), ("band", 256), ("band", -1),
                                           ("night", 2**31), ("quality", 256.0), ("night", float("nan"))])
def test_integer_columns_refuse_values_that_would_wrap(scratch_tables, column, value):
    # numpy's astype wraps: 65,536 becomes star 0, -1 becomes star 65,535 (common practice
    # of C integer conversion); the archive must refuse instead.
    with pytest.raises(ArchiveError, match=rf"/points/{column}: value .* does not fit the column's type"):
        tables.append(scratch_tables, "points", _points_row(**{column: value}))
    assert tables.n_rows(scratch_tables, "points") == 0  # nothing written: the check comes first


def test_integer_columns_keep_every_value_that_fits(scratch_tables):
    cap_s, cap_b = code_capacity("star"), code_capacity("band")
    assert (cap_s, cap_b) == (65_536, 256)
    tables.append(scratch_tables, "points", _points_row(star=cap_s - 1, band=cap_b - 1, night=2**31 - 1))
    got = tables.read(scratch_tables, "points", ["star", "band", "night"])
    assert (int(got["star"][0]), int(got["band"][0]), int(got["night"][0])) == (65_535, 255, 2**31 - 1)


def _with_bands(demo_data, path: Path, n: int) -> Path:
    """A new demo archive whose /bands already holds ``n`` invented band names."""
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    with TX.transaction(path) as f:
        for k in range(n):
            tables.code_of(f, "bands", "name", f"X{k:03d}", add=True)
    return path


def test_the_band_that_would_be_257th_is_refused_and_nothing_is_written(demo_data, tmp_path):
    # Before: with 256 bands stored, a new band got code 256, stored as 0 (the first band),
    # and verify said OK.  The demo night brings B and V: B becomes the 256th band, V the 257th.
    path = _with_bands(demo_data, tmp_path / "a.h5", 255)
    before = sha(path)
    rc, _, err = run("ingest", path, demo_data.nights[0])
    assert rc == 3
    one_error_line(err, path)
    assert "cannot add band 'V'" in err and "256" in err and "nothing was written" in err
    assert sha(path) == before


def test_the_256th_band_is_still_stored_and_decoded(demo_data, tmp_path):
    path = _with_bands(demo_data, tmp_path / "a.h5", 254)
    rc, _, err = run("ingest", path, demo_data.nights[0])
    assert rc == 0, err
    arch = varstar.open_archive(path)
    with open_read(path) as f:
        names = list(tables.read(f, "bands", ["name"])["name"])
    assert len(names) == 256 and names[-2:] == ["B", "V"]
    lc = arch.lightcurve()
    assert set(lc["band"]) == {"B", "V"} and len(lc) > 100
    rep = verify(path)
    assert rep.ok and rep.checked["names_ok"] == 1, rep.problems


def test_more_stars_than_star_codes_is_refused_before_anything_is_created(demo_data, tmp_path):
    # Before: with 65,536 invented stars ahead of the target in the file, the target's
    # points were stored under star code 0.  (The target object is built directly: parsing a
    # file of 65,537 stars is the slow part and is not what is tested here.)
    base = varstar.read_target(demo_data.folder / "target.toml")
    fillers = tuple(Star(f"Z{k}", "check") for k in range(code_capacity("star") - len(base.stars) + 1))
    big = replace(base, stars=fillers + base.stars)
    path = tmp_path / "a.h5"
    with pytest.raises(ArchiveError, match=r"lists 65,537 stars; an archive tells at most 65,536 apart"):
        varstar.create_archive(path, big)
    assert not path.exists() and not (tmp_path / "a.h5.lock").exists()
    just = replace(base, stars=fillers[1:] + base.stars)  # exactly 65,536: every code fits
    varstar.create_archive(path, just)
    with h5py.File(path, "r") as f:
        ids = f["stars/id"].asstr()[()]
    assert len(ids) == 65_536 and ids[-len(base.stars)] == base.stars[0].id


def test_verify_decodes_every_nights_codes_against_its_report(three_nights, tmp_path):
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    assert verify(path).checked["names_ok"] == 3
    with h5py.File(path, "r+") as f:  # the two band names swapped: every code now leads to the other band
        names = list(f["bands/name"].asstr()[()])
        f["bands/name"][0], f["bands/name"][1] = names[1], names[0]
    rep = verify(path)
    bad = [p for p in rep.problems if "codes do not lead to the names they were stored for" in p]
    assert len(bad) == 3, rep.problems  # the counts can agree; each night's calibration error still tells
    assert all("calibration error" in p or "decode to bands" in p for p in bad)


def test_verify_finds_stars_that_are_not_the_target_descriptions(three_nights, tmp_path):
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    with h5py.File(path, "r+") as f:
        ids = list(f["stars/id"].asstr()[()])
        f["stars/id"][0], f["stars/id"][1] = ids[1], ids[0]  # the target's points now decode to C1
    rep = verify(path)
    assert any("/stars does not begin with the stars of the original target description" in p
               and "row 0 holds 'C1'" in p for p in rep.problems), rep.problems
    assert any("/stars does not list the stars of the target description in force with their roles" in p
               for p in rep.problems), rep.problems


def test_verify_finds_an_archive_whose_band_codes_wrapped(three_nights, tmp_path):
    # What the earlier varstar wrote with 258 bands: /bands holds 258 names, and the night
    # of the 258th band ('R', code 257) was stored under code 257 mod 256 = 1, i.e. 'V'.
    path = tmp_path / "a.h5"
    shutil.copyfile(three_nights, path)
    with h5py.File(path, "r+") as f:
        names = list(f["bands/name"].asstr()[()])
        extra = [f"X{k:03d}" for k in range(2, 257)] + ["R"]
        ds = f["bands/name"]
        ds.resize((len(names) + len(extra),))
        ds[len(names):] = extra
        lab = f["nights/label"][2].decode()
        rep = json.loads(f["nights/report"].asstr()[2])
        rep["bands"]["R"] = rep["bands"].pop(names[1])
        f["nights/report"][2] = json.dumps(rep)
    rep = verify(path)
    assert any("/bands holds 258 names but band codes can tell only 256 apart" in p for p in rep.problems)
    assert any(p.startswith(f"night {lab}: its exposures decode to bands") and "R:" in p for p in rep.problems), rep.problems
    rc, _, err = run("remove-night", path, "2026-09-11")  # and writers refuse it
    assert rc == 3 and "band codes can tell only 256 apart" in err


# --------------------------------------------------------------------------- item 9: files beside the archive
def _journal_of_another_archive(demo_data, folder: Path, monkeypatch) -> bytes:
    """The committed journal a killed writer leaves (its apply fails), as bytes."""
    path = folder / "other.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    with monkeypatch.context() as m:
        m.setattr(JR, "apply_journal", _fail_apply)
        with pytest.raises(ArchiveError, match="committed in other.h5.journal"):
            varstar.ingest(path, [demo_data.nights[1]])
    blob = JR.journal_path(path).read_bytes()
    assert JR.inspect_journal(JR.journal_path(path)).state == JR.COMMITTED
    return blob


def _fail_apply(fd, j):
    raise OSError(errno.EIO, "input/output error (simulated)")


@pytest.mark.parametrize("kind", ["text", "directory", "symlink", "committed", "damaged", "lock"])
def test_init_never_removes_a_file_that_only_has_the_journals_name(kind, demo_data, tmp_path, monkeypatch):
    target = demo_data.folder / "target.toml"
    path = tmp_path / "t.h5"
    jp = tmp_path / "t.h5.journal"
    mine = tmp_path / "notes.txt"
    mine.write_text("my notes\n")
    if kind == "text":
        jp.write_text("not a journal\n")
    elif kind == "directory":
        jp.mkdir()
        (jp / "inside.txt").write_text("x")
    elif kind == "symlink":
        jp.symlink_to(mine)
    elif kind in ("committed", "damaged"):
        (tmp_path / "other").mkdir()
        blob = bytearray(_journal_of_another_archive(demo_data, tmp_path / "other", monkeypatch))
        if kind == "damaged":
            blob[len(blob) // 2] ^= 0x01
        jp.write_bytes(bytes(blob))
    elif kind == "lock":
        jp = tmp_path / "t.h5.lock"  # the writer lock's name: it was truncated and written
        jp.write_text("my lock notes\n")
    state = (jp.is_dir(), jp.is_symlink(), None if jp.is_dir() else jp.read_bytes())
    rc, _, err = run("init", path, target)
    assert rc == 3
    one_error_line(err, path)
    assert jp.name in err and ("nothing was created" in err or "nothing was changed" in err)
    assert not path.exists()
    assert (jp.is_dir(), jp.is_symlink(), None if jp.is_dir() else jp.read_bytes()) == state
    assert mine.read_text() == "my notes\n"


def test_init_removes_only_a_torn_journal_of_a_gone_archive(demo_data, tmp_path, monkeypatch):
    (tmp_path / "other").mkdir()
    blob = _journal_of_another_archive(demo_data, tmp_path / "other", monkeypatch)
    jp = tmp_path / "t.h5.journal"
    jp.write_bytes(blob[: len(blob) // 3])  # its writer died while writing it: nothing was committed
    rc, _, err = run("init", tmp_path / "t.h5", demo_data.folder / "target.toml")
    assert rc == 0, err
    assert not jp.exists() and verify(tmp_path / "t.h5").ok


def test_a_writer_never_removes_a_users_file_with_the_journals_name(demo_data, tmp_path):
    # The same fault in recovery: any file at the journal's path that was not a committed
    # journal used to be deleted by the next writer.
    path = tmp_path / "t.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    jp = tmp_path / "t.h5.journal"
    jp.write_text("my journal of observing nights\n")
    before = sha(path)
    rc, out, err = run("summary", path)  # nothing of ours is pending: readers read on
    assert rc == 0 and "0 nights" in out
    rc, _, err = run("ingest", path, demo_data.nights[0])
    assert rc == 3
    one_error_line(err, path)
    size = jp.stat().st_size
    assert f"{jp} is a file of {size} bytes that is not a varstar journal" in err and "Rename or move t.h5.journal" in err
    assert jp.read_text() == "my journal of observing nights\n" and sha(path) == before


def test_a_writer_leaves_temporary_looking_files_that_are_not_its_own(demo_data, tmp_path):
    path = tmp_path / "t.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    keep = [tmp_path / ".t.h5.backup.tmp", tmp_path / ".t.h5.12345.tmp"]  # the second: not HDF5
    for k in keep:
        k.write_text("mine\n")
    varstar.ingest(path, [demo_data.nights[0]])
    assert all(k.read_text() == "mine\n" for k in keep)


# --------------------------------------------------------------------------- item 10: damaged journals
def test_every_single_byte_change_of_a_committed_journal_is_damage_never_incomplete(tmp_path):
    # Exhaustive on a small journal: each byte position, its lowest and its highest bit
    # flipped.  A torn journal (every proper prefix) stays "incomplete".
    j = JR.Journal(old_len=8192, new_len=12288, runs=((0, bytes(range(256)) + b"\x00" * 44), (4096, b"\x07" * 200)),
                   tail_sha256=hashlib.sha256(b"tail").digest())
    jp = tmp_path / "a.h5.journal"
    JR.write_journal(jp, j)
    blob = jp.read_bytes()
    assert JR.inspect_journal(jp) == JR.JournalFile(JR.COMMITTED, journal=j)
    tried = 0
    for pos in range(len(blob)):
        for mask in (0x01, 0x80):
            bad = bytearray(blob)
            bad[pos] ^= mask
            jp.write_bytes(bytes(bad))
            found = JR.inspect_journal(jp)
            assert found.state == JR.DAMAGED and found.why, (pos, mask, found)
            tried += 1
    assert tried == 2 * len(blob) == 2 * (80 + 2 * 16 + 500 + 40)
    for cut in range(len(blob)):
        jp.write_bytes(blob[:cut])
        assert JR.inspect_journal(jp).state == JR.INCOMPLETE, cut


@pytest.fixture(scope="module")
def killed_writer(demo_data, tmp_path_factory):
    """An archive of one demo night and the committed journal of adding a second (its apply failed)."""
    folder = tmp_path_factory.mktemp("killed")
    path = folder / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    varstar.ingest(path, [demo_data.nights[0]])
    old = path.read_bytes()
    mp = pytest.MonkeyPatch()
    mp.setattr(JR, "apply_journal", _fail_apply)
    try:
        with pytest.raises(ArchiveError, match="committed in a.h5.journal"):
            varstar.ingest(path, [demo_data.nights[1]])
    finally:
        mp.undo()
    jp = JR.journal_path(path)
    j = JR.read_journal(jp)
    assert j is not None and len(j.runs) >= 4
    return path.read_bytes(), jp.read_bytes(), j, old


def _positions(blob: bytes, j) -> dict[str, int]:
    """One byte of each kind of place in a journal file (see the layout in varstar/archive/journal.py)."""
    n = len(j.runs)
    index = 80
    data = index + 16 * n
    trailer = len(blob) - 40
    return {
        "hdr-magic": 0, "hdr-magic-last": 7, "hdr-version": 8, "hdr-reserved": 12, "hdr-old_len": 16,
        "hdr-new_len": 24, "hdr-n_runs": 32, "hdr-data_len": 40, "hdr-data_len-high": 47, "hdr-tail": 48,
        "hdr-tail-last": 79, "index-first-offset": index, "index-first-length": index + 8,
        "index-last-length": data - 8, "run-first": data, "run-middle": (data + trailer) // 2,
        "run-last": trailer - 1, "digest-first": trailer, "digest-last": trailer + 31, "end-mark": trailer + 32,
        "end-mark-last": len(blob) - 1,
    }


@pytest.mark.parametrize("written", ["not written in", "half written in"])
def test_a_committed_journal_with_one_changed_byte_is_kept_aside_and_the_archive_refused(
        written, killed_writer, demo_data, tmp_path):
    # Generated: one byte changed at each kind of place of a real committed journal, with
    # the archive as a killed writer leaves it before writing the change in, and halfway
    # through.  Before the fix the journal was deleted without a word.
    disk, blob, j, old = killed_writer
    if written == "half written in":
        buf = bytearray(disk)
        for off, data in j.runs[: len(j.runs) // 2]:
            buf[off:off + len(data)] = data
        disk = bytes(buf)
    positions = _positions(blob, j)
    tried = 0
    for name, pos in positions.items():
        folder = tmp_path / name
        folder.mkdir()
        path, jp = folder / "a.h5", folder / "a.h5.journal"
        path.write_bytes(disk)
        bad = bytearray(blob)
        bad[pos] ^= 0x10
        jp.write_bytes(bytes(bad))
        rc, _, err = run("summary", path)  # a reader finds it first
        assert rc == 3, (name, err)
        one_error_line(err, path)
        kept = TX.damaged_journals(path)
        assert len(kept) == 1 and kept[0].read_bytes() == bytes(bad), name  # kept whole, never deleted
        assert not jp.exists() and path.read_bytes() == disk
        assert f"kept as {kept[0].name}" in err and f"varstar verify {path}" in err and f"delete {kept[0].name}" in err
        if name.startswith(("run-", "digest", "end", "hdr-tail", "hdr-reserved", "hdr-version")):  # index readable
            expect = "was not written into the archive" if written == "not written in" else "in part"
            assert expect in err, (name, err[:900])
        rc, _, err = run("ingest", path, demo_data.nights[2])  # every writer refuses until the user acts
        assert rc == 3 and kept[0].name in err and path.read_bytes() == disk
        if name in ("hdr-magic", "run-middle", "end-mark-last"):  # (verify reads everything: a few suffice)
            rc, out, _ = run("verify", path)
            assert rc == 3 and kept[0].name in out
        tried += 1
    assert tried == len(positions) == 21
    if written == "not written in":
        # the way out the message gives: verify passes apart from the journal, delete it, carry on
        kept[0].unlink()
        assert verify(path).ok and len(varstar.open_archive(path).nights()) == 1


def test_a_sound_committed_journal_is_still_completed(killed_writer, tmp_path):
    disk, blob, j, _ = killed_writer
    path = tmp_path / "a.h5"
    path.write_bytes(disk)
    JR.journal_path(path).write_bytes(blob)
    assert len(varstar.open_archive(path).nights()) == 2
    assert not JR.journal_path(path).exists() and not TX.damaged_journals(path) and verify(path).ok


def test_verify_finds_a_damaged_journal_first_keeps_it_and_checks_the_rest(killed_writer, tmp_path):
    disk, blob, j, _ = killed_writer
    path = tmp_path / "a.h5"
    path.write_bytes(disk)
    bad = bytearray(blob)
    bad[len(bad) // 2] ^= 0x04
    JR.journal_path(path).write_bytes(bytes(bad))
    rep = verify(path)
    kept = TX.damaged_journals(path)
    assert len(kept) == 1 and kept[0].read_bytes() == bytes(bad) and not JR.journal_path(path).exists()
    assert [p for p in rep.problems if kept[0].name in p] == list(rep.problems)  # the archive itself is sound
    assert rep.checked["checksums_ok"] == 6 and rep.checked["nights"] == 1
