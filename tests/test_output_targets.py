"""Where results go: every output option against every kind of target, and user text in figures.

Issue 11, items 6 and 8.

- Item 8: ``-o`` (and ``--phased``, ``--diagram``, ``--csv``, ``--save``) used to
  rename a temporary file over whatever the name pointed at, so a FIFO, a
  symbolic link or a device became a regular file.  The generated test runs
  every command with an output option (read from :func:`varstar.cli.build_parser`)
  against every kind of target: a new file, an existing file, a link to a
  file, a dangling link, a FIFO (read by a thread), ``/dev/null``, ``-``
  (stdout), a folder and a name whose folder is missing.
- Item 6: a target name that matplotlib's mathtext cannot parse
  (``"Star $x^$ in Cyg"``) made ``plot`` and ``period -o`` fail with "unknown
  image format 'png'".  Every text varstar puts in a figure is now drawn
  literally; the archive used by the matrix carries that name, and a sweep of
  hostile names runs through ``plot`` and ``period -o``.

File signatures: PNG (ISO/IEC 15948: the 8-byte signature, a file ends with the
IEND chunk ``00 00 00 00 49 45 4E 44 AE 42 60 82``).  That a shell's ``-``
means standard output, that a write to a FIFO whose reader has gone fails with
EPIPE, and that ``/dev/full`` refuses writes with ENOSPC are common practice
on POSIX systems.
"""

from __future__ import annotations

import errno
import io
import json
import os
import socket
import stat
import subprocess
import sys
import threading
import tomllib
import xml.etree.ElementTree as ET
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

import varstar
from varstar.cli import build_parser, main
from varstar.errors import OutputError
from varstar.export import LIGHTCURVE_COLUMNS, TIMINGS_COLUMNS, check_output_path, is_stdout, write_atomic
from varstar.plots import (
    _own_texts,
    coefficient_figure,
    colour_figure,
    colour_magnitude_figure,
    lightcurve_figure,
    oc_figure,
    periodogram_figure,
    phased_figure,
    save,
)

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
PNG_END = b"\x00\x00\x00\x00IEND\xaeB`\x82"
MATH_NAME = "Star $x^$ in Cyg"  # the name of the issue: an unmatched superscript inside $...$

#: User text matplotlib could misread: mathtext, backslashes, LaTeX specials, unicode, length.
HOSTILE = (
    "$",
    MATH_NAME,
    "$$",
    r"$\frac{1}{0}$ and $\undefinedcommand$",
    "a\\b \\$ c \\",
    "100% {braces} _under^caret #&~",
    "Ωmega Ĉygni — “quoted” ☉ ★",
    "變星 甲",
    "long " * 400,
    "X" * 3000,
)


def _png_complete(data: bytes) -> bool:
    return data.startswith(PNG_MAGIC) and data.endswith(PNG_END)


# --------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="module")
def field(demo_data, tmp_path_factory) -> SimpleNamespace:
    """An archive of the six demo nights whose target is named ``MATH_NAME``, on the standard system."""
    folder = tmp_path_factory.mktemp("output-targets")
    text = (demo_data.folder / "target.toml").read_text(encoding="utf-8")
    lines = [f"name = {json.dumps(MATH_NAME)}" if ln.startswith("name =") else ln for ln in text.splitlines()]
    target = folder / "target.toml"
    target.write_text("\n".join(lines) + "\n", encoding="utf-8")
    archive = folder / "field.h5"
    varstar.create_archive(archive, varstar.read_target(target))
    assert varstar.read_target(target).name == MATH_NAME
    varstar.ingest(archive, demo_data.nights)
    std_csv, std_toml = demo_data.folder / "standards.csv", demo_data.folder / "standards.toml"
    setups = folder / "setups.toml"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(sys, "stdout", io.StringIO())
        assert main(["coefficients", str(std_csv), str(std_toml), "--save", str(setups)]) == 0
        assert main(["transform", str(archive), "--coefficients", str(setups)]) == 0
    n_obs = len(varstar.open_archive(archive).lightcurve())
    # two FITS frames of the invented field (varstar.simulate.write_frames) and a description that can measure them
    from varstar.simulate import frame_target_toml, write_frames

    frames = write_frames(folder / "frames", n_frames=2).folder
    (frames / "truth.csv").unlink()
    frame_toml = folder / "frame-target.toml"
    frame_toml.write_text(frame_target_toml(), encoding="utf-8")
    return SimpleNamespace(archive=archive, std_csv=std_csv, std_toml=std_toml, n_obs=n_obs, frames=frames,
                           frame_toml=frame_toml)


# --------------------------------------------------------------------------- what each output holds


def _check_png(data: bytes, _field) -> None:
    assert _png_complete(data), data[:16]


def _check_lightcurve_csv(data: bytes, fld) -> None:
    df = pd.read_csv(io.BytesIO(data))
    assert list(df.columns) == list(LIGHTCURVE_COLUMNS)
    assert len(df) == fld.n_obs
    assert np.all(np.isfinite(df["mag"]))


def _check_measurement_csv(data: bytes, fld) -> None:
    from varstar.measurements import parse_measurements
    from varstar.photometry import MEASURE_COLUMNS

    df = pd.read_csv(io.BytesIO(data))
    assert list(df.columns) == list(MEASURE_COLUMNS)
    assert len(df) == 2 * len(varstar.read_target(fld.frame_toml).stars)
    parse_measurements(data, "m.csv", varstar.read_target(fld.frame_toml).star_ids)  # what ingest reads


def _check_timings_csv(data: bytes, _field) -> None:
    df = pd.read_csv(io.BytesIO(data))
    assert list(df.columns) == list(TIMINGS_COLUMNS)
    assert len(df) >= 1 and np.all(df["bjd_tdb"] > 2.4e6)


EXISTING_SETUPS = b"# my setups\n\n[setups.keepme]\nepsilon_v = 0.05\nepsilon_v_err = 0.01\nmu_bv = 0.95\nmu_bv_err = 0.01\n"


def _check_setups(data: bytes, _field) -> None:
    doc = tomllib.loads(data.decode("utf-8"))
    fitted = doc["setups"]["default"]
    assert 0.0 < fitted["epsilon_v"] < 0.2 and 0.8 < fitted["mu_bv"] < 1.1  # the demo camera's (truth.json)
    if b"keepme" in data:  # an existing setups file keeps its other setups
        assert doc["setups"]["keepme"]["epsilon_v"] == 0.05


@dataclass(frozen=True)
class Option:
    """One output option of one command: how to run it and what a correct output holds."""

    command: str
    flag: str
    suffix: str
    check: Callable[[bytes, SimpleNamespace], None]
    regular_only: bool = False  # read, then updated: only a regular file will do

    def argv(self, fld, target: str) -> list[str]:
        base = {
            "plot": ["plot", str(fld.archive)],
            "export": ["export", str(fld.archive)],
            "coefficients": ["coefficients", str(fld.std_csv), str(fld.std_toml)],
            "colour": ["colour", str(fld.archive)],
            # a narrow search keeps the test quick; the plot is what is tested here
            "period": ["period", str(fld.archive), "--no-store", "--single", "--band", "V",
                       "--min-period", "0.3", "--max-period", "0.6"],
            "timings": ["timings", str(fld.archive), "--no-store"],
            "measure": ["measure", str(fld.frame_toml), str(fld.frames), "--workers", "1"],
        }[self.command]
        return [*base, self.flag, target]


OPTIONS = (
    Option("plot", "-o", ".png", _check_png),
    Option("export", "-o", ".csv", _check_lightcurve_csv),
    Option("coefficients", "-o", ".png", _check_png),
    Option("coefficients", "--save", ".toml", _check_setups, regular_only=True),
    Option("colour", "-o", ".png", _check_png),
    Option("colour", "--diagram", ".png", _check_png),
    Option("period", "-o", ".png", _check_png),
    Option("period", "--phased", ".png", _check_png),
    Option("timings", "-o", ".png", _check_png),
    Option("timings", "--csv", ".csv", _check_timings_csv),
    Option("measure", "-o", ".csv", _check_measurement_csv),
)
SLOW_COMMANDS = {"colour", "period"}  # about 0.4 s a run each; still run in CI

KINDS = ("new", "existing", "symlink", "dangling", "fifo", "devnull", "stdout", "directory", "missing_parent")


def _file_options_of_parser() -> set[tuple[str, str]]:
    """(command, option) of every option of the CLI that takes a file to write."""
    parser = build_parser()
    sub = next(a for a in parser._actions if a.choices and "plot" in a.choices)
    found = set()
    for name, sp in sub.choices.items():
        for action in sp._actions:
            if action.dest in ("output", "phased", "diagram", "csv", "save") and action.option_strings:
                found.add((name, action.option_strings[0]))
    return found


def test_the_matrix_covers_every_output_option_of_the_cli():
    assert {(o.command, o.flag) for o in OPTIONS} == _file_options_of_parser()
    assert len(OPTIONS) * len(KINDS) == 99  # the combinations the matrix below runs


# --------------------------------------------------------------------------- the matrix


class FifoReader:
    """Reads a FIFO to its end in a thread; :meth:`finish` returns what came (None if no writer ever opened it)."""

    def __init__(self, path: Path):
        self.path, self.data, self.opened = path, b"", threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        with open(self.path, "rb") as f:  # blocks until a writer opens the FIFO
            self.opened.set()
            self.data = f.read()

    def finish(self, timeout: float = 20.0) -> bytes | None:
        """Call after the writer is done: the bytes read, or None when nobody opened the FIFO to write."""
        released = False
        if not self.opened.wait(timeout=0.5):
            os.close(os.open(self.path, os.O_WRONLY | os.O_NONBLOCK))  # let the waiting reader go
            released = True
        self.thread.join(timeout)
        assert not self.thread.is_alive()
        return None if released else self.data


def _listing(folder: Path) -> dict[str, str]:
    out = {}
    for p in sorted(folder.rglob("*")):
        st = os.lstat(p)
        kind = "link" if stat.S_ISLNK(st.st_mode) else "fifo" if stat.S_ISFIFO(st.st_mode) else "dir" if p.is_dir() else "file"
        out[str(p.relative_to(folder))] = kind
    return out


def _device(path: Path, major: int, minor: int, system: str) -> str:
    """A character device to write to without risking the system's own.

    As root a writer that replaced its target would replace ``/dev/null``
    itself (the fault of the issue), so root gets a private node with the same
    numbers; other users get the system's node, which they cannot replace.
    """
    if os.geteuid() != 0:
        return system
    try:
        os.mknod(path, 0o666 | stat.S_IFCHR, os.makedev(major, minor))
    except OSError:
        pytest.skip(f"root without mknod: {system} itself would be at risk")
    return str(path)


def _null_device(path: Path) -> str:
    return _device(path, 1, 3, "/dev/null")  # Linux's numbers for the null device (common practice)


def _prepare(kind: str, opt: Option, tmp: Path) -> tuple[str, dict]:
    """Make the target of ``kind`` under ``tmp``; returns the name to pass and what to check afterwards."""
    out, elsewhere = tmp / "out", tmp / "elsewhere"
    out.mkdir()
    elsewhere.mkdir()
    old = EXISTING_SETUPS if opt.regular_only else b"old content that must be replaced\n"
    info: dict = {}
    if kind == "new":
        target = out / f"result{opt.suffix}"
    elif kind == "existing":
        target = out / f"result{opt.suffix}"
        target.write_bytes(old)
        target.chmod(0o640)
    elif kind == "symlink":
        real = elsewhere / f"real{opt.suffix}"
        real.write_bytes(old)
        target = out / f"link{opt.suffix}"
        target.symlink_to(Path("..") / "elsewhere" / real.name)  # relative, resolved from the link's folder
        info["real"] = real
    elif kind == "dangling":
        target = out / f"link{opt.suffix}"
        target.symlink_to(Path("..") / "elsewhere" / f"created{opt.suffix}")
        info["real"] = elsewhere / f"created{opt.suffix}"
    elif kind == "fifo":
        target = out / f"pipe{opt.suffix}"
        os.mkfifo(target)
        info["reader"] = FifoReader(target)
    elif kind == "devnull":
        return _null_device(out / "null"), info
    elif kind == "stdout":
        return "-", info
    elif kind == "directory":
        target = out / "a-folder"
        target.mkdir()
    elif kind == "missing_parent":
        target = out / "no-such-folder" / f"result{opt.suffix}"
    else:  # pragma: no cover
        raise AssertionError(kind)
    return str(target), info


def _expect_refusal(kind: str, opt: Option) -> bool:
    return kind in ("directory", "missing_parent") or (opt.regular_only and kind in ("fifo", "devnull", "stdout"))


def _cases():
    for opt in OPTIONS:
        for kind in KINDS:
            marks = [pytest.mark.slow] if opt.command in SLOW_COMMANDS else []
            yield pytest.param(opt, kind, id=f"{opt.command}{opt.flag}-{kind}", marks=marks)


@pytest.mark.parametrize("opt, kind", list(_cases()))
def test_every_output_option_against_every_kind_of_target(opt, kind, field, tmp_path, capsysbinary):
    target, info = _prepare(kind, opt, tmp_path)
    before = _listing(tmp_path)
    rc = main(opt.argv(field, target))
    out, err = capsysbinary.readouterr()
    reader = info.get("reader")
    fifo_data = reader.finish() if reader else None
    assert b"Traceback" not in err
    if _expect_refusal(kind, opt):
        assert rc == 2, err
        lines = err.decode().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: ") and target in lines[0], err
        why = {"directory": "is a folder", "missing_parent": "no-such-folder does not exist"}.get(kind, "must be a regular file")
        assert why in lines[0], lines[0]
        assert out == b""  # nothing printed, nothing written
        assert _listing(tmp_path) == before
        if kind == "fifo":
            assert fifo_data is None  # the FIFO was never opened for writing
        return
    assert rc == 0, err
    if kind == "stdout":
        opt.check(out, field)  # the result alone on stdout; the words went to stderr
        assert b"wrote -" in err or b"saved" in err
        return
    assert f"wrote {target}".encode() in out or b"saved as setup" in out, out[-300:]
    if kind == "devnull":
        assert stat.S_ISCHR(os.lstat(target).st_mode)  # still a device, not replaced by a file
        assert _listing(tmp_path) == before
        return
    if kind == "fifo":
        assert stat.S_ISFIFO(os.lstat(target).st_mode)  # still a FIFO, not replaced by a file
        opt.check(fifo_data, field)
        assert _listing(tmp_path) == before
        return
    if kind in ("symlink", "dangling"):
        link = Path(target)
        assert link.is_symlink() and os.readlink(link) == str(Path("..") / "elsewhere" / info["real"].name)
        data = info["real"].read_bytes()
        opt.check(data, field)
        expected = dict(before, **{f"elsewhere/{info['real'].name}": "file"})
        assert _listing(tmp_path) == expected  # no temporary file left in either folder
        return
    data = Path(target).read_bytes()
    assert data != b"old content that must be replaced\n"
    opt.check(data, field)
    if kind == "existing":
        assert stat.S_IMODE(os.stat(target).st_mode) == 0o640  # the replaced file's permissions are kept
    assert _listing(tmp_path) == dict(before, **{f"out/result{opt.suffix}": "file"})


# --------------------------------------------------------------------------- clashes between outputs


def test_two_outputs_to_stdout_or_stdout_with_json_are_refused_before_any_work(field, tmp_path, capsys):
    base = ["period", str(field.archive), "--single", "--band", "V", "--min-period", "0.3", "--max-period", "0.6"]
    n_before = len(varstar.open_archive(field.archive).periods())
    assert main([*base, "-o", "-", "--phased", "-"]) == 2
    out, err = capsys.readouterr()
    assert out == "" and err.startswith("error: -o and --phased both name standard output")
    assert main([*base, "--json", "-o", "-"]) == 2
    out, err = capsys.readouterr()
    assert "--json" in err and err.count("\n") == 1
    assert json.loads(out) == {"error": err[len("error: "):-1], "exit_code": 2}  # with --json the error is JSON too
    same = tmp_path / "same.png"
    assert main([*base, "-o", str(same), "--phased", str(tmp_path / "." / "same.png")]) == 2
    out, err = capsys.readouterr()
    assert "named by both -o and --phased" in err and not same.exists()
    assert len(varstar.open_archive(field.archive).periods()) == n_before  # refused before the analysis ran


def test_a_bad_second_output_stops_the_command_before_the_first_is_written(field, tmp_path, capsys):
    good = tmp_path / "periodogram.png"
    rc = main(["period", str(field.archive), "--no-store", "--single", "--band", "V", "--min-period", "0.3",
               "--max-period", "0.6", "-o", str(good), "--phased", str(tmp_path / "missing" / "phased.png")])
    out, err = capsys.readouterr()
    assert rc == 2 and "missing does not exist" in err and out == ""
    assert list(tmp_path.iterdir()) == []


def test_dev_stdout_redirected_to_a_file_and_to_a_pipe_in_a_fresh_process(field, tmp_path):
    # /dev/stdout names the file or pipe stdout goes to: written through stdout, the words on stderr,
    # and the file itself is not replaced (the shell's >> keeps appending).  /dev/stdout is a link to
    # /proc/self/fd/1 on Linux; the test names the latter, which a faulty writer cannot replace even as root.
    cmd = [sys.executable, "-m", "varstar.cli", "export", str(field.archive), "-o", "/proc/self/fd/1"]
    dest = tmp_path / "captured.csv"
    dest.write_bytes(b"")
    with open(dest, "ab") as f:
        proc = subprocess.run(cmd, stdout=f, stderr=subprocess.PIPE, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert b"Traceback" not in proc.stderr and b"wrote /proc/self/fd/1" in proc.stderr
    _check_lightcurve_csv(dest.read_bytes(), field)
    proc = subprocess.run(cmd, capture_output=True, timeout=120)
    assert proc.returncode == 0 and b"wrote /proc/self/fd/1" in proc.stderr
    _check_lightcurve_csv(proc.stdout, field)


# --------------------------------------------------------------------------- the writer on its own


def test_write_atomic_through_a_link_to_a_fifo_and_a_link_to_a_folder(tmp_path):
    fifo = tmp_path / "fifo"
    os.mkfifo(fifo)
    link = tmp_path / "to-fifo"
    link.symlink_to(fifo)
    reader = FifoReader(fifo)
    write_atomic(link, b"through the link")
    assert reader.finish() == b"through the link"
    assert link.is_symlink() and stat.S_ISFIFO(os.lstat(fifo).st_mode)
    (tmp_path / "dir").mkdir()
    (tmp_path / "to-dir").symlink_to(tmp_path / "dir")
    with pytest.raises(OutputError, match="to-dir: is a folder"):
        write_atomic(tmp_path / "to-dir", b"x")
    assert list((tmp_path / "dir").iterdir()) == []


def test_write_atomic_refuses_a_socket_a_link_loop_and_a_read_only_file(tmp_path):
    sock_path = tmp_path / "s"
    with socket.socket(socket.AF_UNIX) as s:
        s.bind(str(sock_path))
        with pytest.raises(OutputError, match="s: is a socket"):
            write_atomic(sock_path, b"x")
    assert stat.S_ISSOCK(os.lstat(sock_path).st_mode)
    (tmp_path / "loop-a").symlink_to(tmp_path / "loop-b")
    (tmp_path / "loop-b").symlink_to(tmp_path / "loop-a")
    with pytest.raises(OutputError, match=os.strerror(errno.ELOOP)):
        write_atomic(tmp_path / "loop-a", b"x")
    ro = tmp_path / "kept.csv"
    ro.write_bytes(b"do not overwrite")
    ro.chmod(0o444)
    if os.access(ro, os.W_OK):  # root may write anything: nothing to refuse
        pytest.skip("running as root")
    with pytest.raises(OutputError, match="read-only"):
        write_atomic(ro, b"x")
    assert ro.read_bytes() == b"do not overwrite"


def test_write_atomic_a_file_in_place_of_a_folder_and_a_dangling_link_into_nowhere(tmp_path):
    (tmp_path / "plain").write_bytes(b"a file")
    with pytest.raises(OutputError, match="plain is a file, not a folder"):
        write_atomic(tmp_path / "plain" / "x.csv", b"x")
    (tmp_path / "link.csv").symlink_to(tmp_path / "gone" / "deeper" / "x.csv")
    with pytest.raises(OutputError, match=r"gone does not exist.*link\.csv is a link to"):
        write_atomic(tmp_path / "link.csv", b"x")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link.csv", "plain"]


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="no /dev/full")
def test_write_atomic_device_errors_are_reported_in_words(tmp_path):
    full = _device(tmp_path / "full", 1, 7, "/dev/full")  # Linux's numbers for the full device (common practice)
    with pytest.raises(OutputError, match=f"{full}: cannot write \\({os.strerror(errno.ENOSPC)}\\)"):
        write_atomic(full, b"x" * 10)
    assert stat.S_ISCHR(os.lstat(full).st_mode)


def test_write_atomic_a_fifo_whose_reader_leaves_early(tmp_path):
    fifo = tmp_path / "fifo"
    os.mkfifo(fifo)

    def read_a_little() -> None:
        with open(fifo, "rb") as f:
            f.read(10)

    t = threading.Thread(target=read_a_little, daemon=True)
    t.start()
    with pytest.raises(OutputError, match="reader closed it before all"):
        write_atomic(fifo, b"x" * (4 << 20))  # more than a pipe buffer holds
    t.join(10)
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


def test_stdout_is_recognised_by_dash_only_when_stdout_is_not_a_file(capsys):
    assert is_stdout("-") and is_stdout(Path("-"))
    assert not is_stdout("/dev/null") and not is_stdout("./-")
    check_output_path("-")
    with pytest.raises(OutputError, match="must be a regular file"):
        check_output_path("-", regular=True)


def test_demo_and_setups_write_through_the_one_writer():
    # Every file a command writes goes through export.write_atomic: no other writer in the shells.
    root = Path(varstar.__file__).parent
    offenders = []
    for py in root.rglob("*.py"):
        text = py.read_text(encoding="utf-8")
        name = py.relative_to(root).as_posix()
        for needle in ("os.replace(", ".write_bytes(", ".write_text(", "savefig(", ".to_csv(path", "tempfile."):
            # simulate.write_series fills a scenario folder for scripts and benchmarks; it is no command's output;
            # the archive writes through its own journal (archive/transaction.py); fleet/folder.py stages the new
            # archives of a fleet (each made by the archive's own atomic create) in a hidden folder of the fleet
            allowed = {"export.py": (), "plots.py": (), "simulate/files.py": (), "fleet/folder.py": ("tempfile.",)}
            if name in allowed and allowed[name] and needle not in allowed[name]:
                allowed.pop(name)
            if needle in text and name not in allowed and not name.startswith("archive/"):
                offenders.append(f"{name}: {needle}")
    assert offenders == []
    plots = (root / "plots.py").read_text(encoding="utf-8")
    assert plots.count("savefig(") == 1 and "savefig(buf" in plots  # rendered into memory, then the writer


# --------------------------------------------------------------------------- user text in figures (item 6)


def _small_lc(band: str = "V", night: str = "2026-09-11", n: int = 8) -> pd.DataFrame:
    rng = np.random.default_rng(11)
    t = 2461295.6 + np.sort(rng.uniform(0, 0.2, n))
    return pd.DataFrame({
        "bjd_tdb": t, "band": band, "star": "V1", "mag": 13.0 + 0.3 * np.sin(2 * np.pi * t / 0.46),
        "mag_err": np.full(n, 0.01), "night": night, "quality": np.zeros(n, np.uint8),
        "bv": 0.4 + 0.05 * np.sin(2 * np.pi * t / 0.46), "bv_err": np.full(n, 0.01),
    })


def _every_figure(text: str) -> dict[str, object]:
    """Each figure function with ``text`` in every slot that takes user text (titles, bands, nights, star ids)."""
    lc = _small_lc(band=text[:40], night=text[:40])
    n = len(lc)
    fit = SimpleNamespace(
        used=[True, True, True, False], n_stars=4, star_ids=[text, "S2", text[:10], "S4"],
        x_v=[0.1, 0.5, 0.9, 1.2], y_v=[0.01, 0.03, 0.05, 0.3], xerr_v=[0.01] * 4, yerr_v=[0.01] * 4,
        epsilon_v=0.05, zeta_v=0.005, epsilon_v_err=0.004,
        x_bv=[0.1, 0.5, 0.9, 1.2], y_bv=[0.1, 0.48, 0.86, 1.5], xerr_bv=[0.01] * 4, yerr_bv=[0.01] * 4,
        mu_bv=0.95, zeta_bv=0.0, mu_bv_err=0.006,
    )
    fld = pd.DataFrame({"star": [text, "C2", "K1"], "role": ["comparison", "comparison", "check"],
                        "status": ["kept", "rejected", "kept"], "V": [12.0, 12.5, 13.1], "V_err": [0.01] * 3,
                        "bv": [0.5, 0.7, 0.9], "bv_err": [0.01] * 3})
    freq = np.linspace(0.5, 5.0, 400)
    power = np.exp(-((freq - 2.17) / 0.02) ** 2)
    ph = np.linspace(0, 1, 50, endpoint=False)
    return {
        "lightcurve": lightcurve_figure(lc, title=text),
        "coefficients": coefficient_figure(fit),
        "colour": colour_figure(lc, title=text, phase=np.linspace(0, 1, n), period=0.46),
        "colour_magnitude": colour_magnitude_figure(fld, lc, title=text),
        "periodogram": periodogram_figure(freq, power, best_frequency=2.17, fap_levels={0.01: 0.5},
                                          peaks=[{"frequency": 2.17, "power": 1.0}, {"frequency": 3.17, "power": 0.3,
                                                                                     "relation": text}],
                                          theta=1 - power, title=text, ylabel=text),
        "phased": phased_figure(lc, period=0.46, epoch=2461295.6,
                                model={text[:40]: (ph, 13.0 + 0.3 * np.sin(2 * np.pi * ph))},
                                residuals=np.zeros(n), title=text),
        "oc": oc_figure([0, 10, 20], [0.001, -0.002, 0.0], [0.001] * 3, ["primary", "secondary", "maximum"],
                        reference=text, title=text),
    }


@pytest.mark.filterwarnings("ignore:Glyph .* missing from:UserWarning")
@pytest.mark.filterwarnings("error:constrained_layout not applied:UserWarning")  # a long star id squeezed the panels
def test_every_figure_draws_hostile_text_literally(tmp_path):
    text = " | ".join(HOSTILE[:8]) + " end"
    for name, fig in _every_figure(text).items():
        own = list(_own_texts(fig))
        assert any(t.get_text() == text for t in own) or name == "coefficients", name
        assert own and all(t.get_parse_math() is False and t.get_usetex() is False for t in own), name
        out = tmp_path / f"{name}.png"
        save(fig, out)
        assert _png_complete(out.read_bytes()), name


def _svg_texts(fig) -> list[str]:
    """The strings a figure shows, read back from its SVG with text kept as text (not as glyph outlines)."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "none"}):
        fig.savefig(buf, format="svg")
    root = ET.fromstring(buf.getvalue())
    return ["".join(e.itertext()) for e in root.iter("{http://www.w3.org/2000/svg}text")]


@pytest.mark.filterwarnings("ignore:Glyph .* missing from:UserWarning")
@pytest.mark.parametrize("text", HOSTILE, ids=range(len(HOSTILE)))
def test_each_hostile_title_band_and_night_label_is_shown_as_written(text, tmp_path):
    band = text[:40]
    fig = lightcurve_figure(_small_lc(band=band, night=band), title=text)
    shown = _svg_texts(fig)
    assert text in shown  # the title, character for character (``\$`` stays ``\$``, ``$x^$`` stays ``$x^$``)
    assert f"{band} (mag)" in shown and band in shown  # the axis label and the legend entry
    save(fig, tmp_path / "lc.png")
    assert _png_complete((tmp_path / "lc.png").read_bytes())


@pytest.mark.filterwarnings("ignore:Glyph .* missing from:UserWarning")
def test_control_characters_in_figure_text_do_not_stop_the_figure(tmp_path):
    # The target and star parsers refuse them (below); a script calling the figure functions may not.
    text = "tab\tline\nbell\x07 end"
    fig = lightcurve_figure(_small_lc(band="V\x1b", night="n\x7f"), title=text)
    assert fig.get_suptitle() == text
    save(fig, tmp_path / "lc.png")
    assert _png_complete((tmp_path / "lc.png").read_bytes())


def test_a_binary_image_is_not_sent_to_a_terminal(monkeypatch, tmp_path):
    class Terminal(io.TextIOWrapper):
        def isatty(self) -> bool:
            return True

    term = Terminal(io.BytesIO(), encoding="utf-8")
    monkeypatch.setattr(sys, "stdout", term)
    fig = lightcurve_figure(_small_lc())
    with pytest.raises(OutputError, match="standard output is a terminal"):
        save(fig, "-")
    assert term.buffer.getvalue() == b""
    pipe = io.TextIOWrapper(io.BytesIO(), encoding="utf-8")  # not a terminal: the png goes out
    monkeypatch.setattr(sys, "stdout", pipe)
    save(fig, "-")
    assert _png_complete(pipe.buffer.getvalue())


def test_figures_would_fail_on_the_issue_name_without_literal_text(tmp_path):
    # The reproduction at the level of matplotlib: with mathtext left on, the name cannot be drawn, and
    # save now says what failed instead of "unknown image format".
    fig = lightcurve_figure(_small_lc(), title=MATH_NAME)
    title = next(t for t in _own_texts(fig) if t.get_text() == MATH_NAME)
    title.set_parse_math(True)  # undo what literal_text did, for this one text
    with pytest.raises(OutputError) as exc:
        save(fig, tmp_path / "lc.png")
    msg = str(exc.value)
    assert "unknown image format" not in msg and "could not draw the figure" in msg and "lc.png" in msg
    assert list(tmp_path.iterdir()) == []


def test_unknown_format_is_still_named_and_checked_before_drawing(tmp_path):
    fig = lightcurve_figure(_small_lc())
    with pytest.raises(OutputError, match=r"lc\.xyz: unknown image format 'xyz'"):
        save(fig, tmp_path / "lc.xyz")
    with pytest.raises(OutputError, match="is a folder"):
        save(fig, tmp_path)


def test_issue_reproduction_plot_and_period_of_the_math_name(field, tmp_path, capsys):
    png, pg = tmp_path / "lc.png", tmp_path / "pg.png"
    assert main(["plot", str(field.archive), "-o", str(png)]) == 0
    assert main(["period", str(field.archive), "--no-store", "--single", "--band", "V", "--min-period", "0.3",
                 "--max-period", "0.6", "-o", str(pg)]) == 0
    out, err = capsys.readouterr()
    assert err == "" and f"wrote {png}" in out and f"wrote {pg}" in out
    assert _png_complete(png.read_bytes()) and _png_complete(pg.read_bytes())


# --------------------------------------------------------------------------- hostile target names end to end


def _toml_name_line(name: str) -> str:
    return f"name = {json.dumps(name, ensure_ascii=False)}"  # a JSON string is a TOML basic string here


def test_control_characters_in_a_target_name_are_refused_in_words(demo_data, tmp_path, capsys):
    # The target parser refuses control characters, so they never reach a figure.
    text = (demo_data.folder / "target.toml").read_text(encoding="utf-8")
    for k, name in enumerate(("bell\x07", "line\nend", "tab\there", "esc\x1b[31m")):
        t = tmp_path / f"t{k}.toml"
        t.write_text("\n".join(_toml_name_line(name) if ln.startswith("name =") else ln for ln in text.splitlines()),
                     encoding="utf-8")
        rc = main(["init", str(tmp_path / f"a{k}.h5"), str(t)])
        out, err = capsys.readouterr()
        assert rc == 2 and "control character" in err and str(t) in err and err.count("\n") == 1
        assert not (tmp_path / f"a{k}.h5").exists()


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore:Glyph .* missing from:UserWarning")
@pytest.mark.parametrize("name", HOSTILE, ids=range(len(HOSTILE)))
def test_hostile_target_names_through_plot_and_period(name, demo_data, tmp_path, capsys):
    text = (demo_data.folder / "target.toml").read_text(encoding="utf-8")
    target = tmp_path / "target.toml"
    target.write_text("\n".join(_toml_name_line(name) if ln.startswith("name =") else ln for ln in text.splitlines()),
                      encoding="utf-8")
    arch = tmp_path / "a.h5"
    assert main(["init", "--json", str(arch), str(target)]) == 0
    assert json.loads(capsys.readouterr().out)["target"]["name"] == name.strip()
    assert main(["ingest", str(arch), *map(str, demo_data.nights[:3])]) == 0
    png, pg, ph = tmp_path / "lc.png", tmp_path / "pg.png", tmp_path / "ph.png"
    assert main(["plot", str(arch), "-o", str(png)]) == 0
    assert main(["period", str(arch), "--no-store", "--band", "V", "--single", "--min-period", "0.3",
                 "--max-period", "0.6", "-o", str(pg), "--phased", str(ph)]) == 0
    out, err = capsys.readouterr()
    assert "Traceback" not in err and "error" not in err
    for p in (png, pg, ph):
        assert _png_complete(p.read_bytes()), p
