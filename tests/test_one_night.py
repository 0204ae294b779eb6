"""Every command on a one-night archive: the first thing every new user has.

Each command either answers or refuses in words (an ``error:`` line and a
non-zero exit), never with a traceback, and a refused command leaves the
archive's bytes as they were.  The nights are the demo's six (invented field)
plus two cut from them: a V-only night and a night of only 12 exposures.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from helpers import run

import varstar


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _cut(src: Path, dst: Path, keep) -> Path:
    lines = src.read_text().splitlines()
    header = lines[0].split(",")
    i_band, i_frame = header.index("band"), header.index("frame")
    rows = [ln for ln in lines[1:] if keep(ln.split(",")[i_band], ln.split(",")[i_frame])]
    dst.write_text("\n".join([lines[0], *rows]) + "\n")
    return dst


def _nights(demo_data, folder: Path) -> dict[str, Path]:
    out = {p.stem: p for p in demo_data.nights}
    first = demo_data.nights[2]  # a long-format night
    assert "frame" in first.read_text().splitlines()[0]
    out["v-only"] = _cut(first, folder / "night-v-only.csv", lambda band, frame: band == "V")
    frames = sorted({ln.split(",")[-1] for ln in first.read_text().splitlines()[1:]})[:12]
    out["12-exposures"] = _cut(first, folder / "night-12.csv", lambda band, frame: frame in frames)
    return out


COMMANDS = [
    ("summary",),
    ("report", "{night}"),
    ("verify",),
    ("export", "-o", "{tmp}/lc.csv"),
    ("plot", "-o", "{tmp}/lc.png"),
    ("colour",),
    ("period", "--no-store"),
    ("period", "--band", "V", "--no-store"),
    ("period",),
    ("timings", "--no-store"),
    ("timings",),
    ("timings", "--update"),
    ("predict", "--from", "2026-09-20", "--to", "2026-09-22"),
]


@pytest.mark.slow
def test_every_command_on_a_one_night_archive_answers_or_refuses_in_words(capsys, demo_data, tmp_path):
    tried = 0
    for name, csv in _nights(demo_data, tmp_path).items():
        path = tmp_path / f"{name}.h5"
        varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
        varstar.ingest(path, [csv])
        label = str(varstar.open_archive(path).nights()["label"].iloc[0])
        for cmd in COMMANDS:
            argv = [a.format(night=label, tmp=tmp_path) for a in cmd]
            before = _digest(path)
            rc, out, err = run(capsys, argv[0], path, *argv[1:])  # an exception here fails the test
            tried += 1
            where = f"{name}: varstar {' '.join(argv)}"
            if rc == 0:
                assert out.strip(), where
            else:
                assert err.startswith("error:") and err.count("\n") == 1, (where, err)
                assert "Traceback" not in err and _digest(path) == before, where
    assert tried == 8 * len(COMMANDS)


def test_timings_of_one_extremum_give_o_minus_c_without_an_ephemeris_fit(capsys, demo_data, tmp_path):
    """Night 2026-09-12 covers one maximum in B and V: both are timed against the ephemeris in
    force; a new ephemeris needs two cycles, so --update is refused in words (nothing stored)."""
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    varstar.ingest(path, [demo_data.folder / "night-2026-09-12.csv"])
    rc, out, err = run(capsys, "timings", path, "--no-store")
    assert rc == 0, err
    rows = [ln.split() for ln in out.splitlines() if ln.startswith("2026-09-12")]
    assert sorted(r[1] for r in rows) == ["B", "V"] and all(r[3] == "3" for r in rows)  # a cycle number is whole
    assert "no ephemeris fit: 2 timings at 1 cycle" in out
    before = _digest(path)
    rc, out, err = run(capsys, "timings", path, "--update")
    assert rc != 0 and "2 or more distinct cycles" in err and _digest(path) == before


def test_period_of_a_night_shorter_than_the_fitted_period_is_refused(capsys, demo_data, tmp_path):
    """Night 2026-09-19 (0.3 d) of a 0.46-d star: the fit runs to a period longer than the
    light curve; no whole cycle is observed, so no period is reported (common practice)."""
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    varstar.ingest(path, [demo_data.folder / "night-2026-09-19.csv"])
    before = _digest(path)
    rc, out, err = run(capsys, "period", path)
    assert rc != 0 and "no whole cycle is observed" in err and "(1 night)" in err
    assert _digest(path) == before
