"""Hostile but honest input: the input-parsing cases of issue 11, each a reproduction and a family.

The data are the shipped demo files (``demo_series/``: an invented field from
:mod:`varstar.simulate`, fixed seed; ``tests/simulate/test_simulate.py`` keeps them equal
to the generator) and small tables and TOML files written here.  The contract
is the README's: a bad input gets one ``error: ...`` line on stderr naming the
file (and the line or key), a non-zero exit, no traceback, and nothing written
(no new archive, an existing one byte for byte as it was).  Commands run
in-process through ``varstar.cli.main``.

Families (each counts the inputs it tried and checks the count, so that a
family that silently shrinks fails too):

* every numeric key of a target file and of a coefficients file (setups and
  ``[transformation]`` forms) with every kind of bad value: an integer too
  large for a float, NaN, infinities, text, a boolean, an array, a table, and
  a negative or fractional number where the key refuses one;
* deep nesting of each kind TOML has (arrays, inline tables, dotted keys,
  table headers), in a target and in a coefficients file;
* a measurement file cut at every byte of its last line (long and wide form);
* ids with every control character, line and paragraph separator, as a star
  id, a band and a frame id (one rule for every id), and printable ids that
  must pass everywhere.

The cost of pathological input is checked here by what is read, not by time
(times are in ``benchmarks/bench_bad_input.py``): a stream that counts the
bytes taken shows that a bad header or early garbage stops the reading.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import re
import shutil
import unicodedata
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from helpers import run

import varstar
from varstar.ensemble import EnsembleSettings
from varstar.errors import InputError, ReductionError
from varstar.measurements import CHUNK_BYTES, MAX_LINE_BYTES, parse_measurements, parse_stream, read_measurement_file
from varstar.workflows.reduce import reduce_night
from varstar.inputs import MAX_TOML_DEPTH, id_problem
from varstar.target import parse_target, read_target

from helpers import DEMO
NIGHT = DEMO / "night-2026-09-19.csv"
WIDE = DEMO / "night-2026-10-10-wide.csv"
HUGE = "1" + "0" * 400  # the issue's value: 1 followed by 400 zeros


# --------------------------------------------------------------------------- helpers


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def clean_failure(rc: int, out: str, err: str, *names: str) -> list[str]:
    """What is wrong with a refusal (empty if it is as the README says)."""
    problems = []
    if rc in (0, 1):
        problems.append(f"exit {rc}")
    if out:
        problems.append(f"stdout {out[:80]!r}")
    if not (err.startswith("error: ") and err.endswith("\n") and err.count("\n") == 1):
        problems.append(f"stderr is not one error line: {err[:300]!r}")
    if "Traceback" in err:
        problems.append("traceback")
    for n in names:
        if n not in err:
            problems.append(f"{n!r} not named in {err[:300]!r}")
    return problems


def names_key(err: str, key: str) -> bool:
    """The key appears as a whole word (``epsilon_v`` is not found inside ``epsilon_v_err``)."""
    return re.search(rf"(?<![A-Za-z0-9_]){re.escape(key)}(?![A-Za-z0-9_])", err) is not None


# --------------------------------------------------------------------------- item 4: every numeric TOML key

SETTINGS = {f.name: getattr(EnsembleSettings(), f.name) for f in dataclasses.fields(EnsembleSettings)}
COEFFICIENTS = {"epsilon_v": "-0.045", "epsilon_v_err": "0.006", "mu_bv": "1.083", "mu_bv_err": "0.010",
                "k2_bv": "-0.03", "k2_bv_err": "0.01", "max_gap_minutes": "15.0"}
# Keys that refuse a negative number (all the others accept one): errors, extinction, counts, limits,
# a period, an epoch (a BJD), right ascension (README: 0 <= ra < 360).
REFUSE_NEGATIVE = {"ra", "ebv", "ebv_err", "V_err", "B_err", "epsilon_v_err", "mu_bv", "mu_bv_err", "k2_bv_err",
                   "max_gap_minutes", "epoch", "period", "epoch_err", "period_err", "quadratic_err", *SETTINGS}
WHOLE = {k for k, v in SETTINGS.items() if isinstance(v, int)}
BAD_VALUES = {"huge integer": HUGE, "nan": "nan", "inf": "inf", "-inf": "-inf", "text": '"twelve"',
              "boolean": "true", "array": "[1.0]", "table": "{ value = 1.0 }"}


def full_target() -> str:
    """The demo target with every optional numeric key given a valid value."""
    text = (DEMO / "target.toml").read_text()
    text = text.replace("dec = 18.60830\n", "dec = 18.60830\nebv = 0.05\nebv_err = 0.01\n")
    text = text.replace('kind = "maximum"\n', 'kind = "maximum"\nquadratic = 0.0\nepoch_err = 0.0005\n'
                        'period_err = 0.000002\nquadratic_err = 0.0\n')
    text += "\n[transformation]\n" + "".join(f"{k} = {v}\n" for k, v in COEFFICIENTS.items())
    text += "\n[reduction]\n" + "".join(f"{k} = {v!r}\n" for k, v in SETTINGS.items())
    return text


# (table as the message names it, where the table starts in the text, keys)
TARGET_KEYS = [
    ("[target]", "[target]", ["ra", "dec", "ebv", "ebv_err"]),
    ("[site]", "[site]", ["latitude", "longitude", "elevation"]),
    ("'C1'", 'id = "C1"', ["V", "B", "V_err", "B_err"]),
    ("[ephemeris]", "[ephemeris]", ["epoch", "period", "quadratic", "epoch_err", "period_err", "quadratic_err"]),
    ("[transformation]", "[transformation]", list(COEFFICIENTS)),
    ("[reduction]", "[reduction]", list(SETTINGS)),
]


def with_value(text: str, start: str, key: str, literal: str) -> str:
    """``text`` with the first ``key = ...`` line after ``start`` set to ``literal``."""
    at = text.index(start)
    m = re.compile(rf"^{re.escape(key)} = [^\n]*$", re.M).search(text, at)
    assert m is not None and "\n[" not in text[at + len(start):m.start()], (start, key)
    return text[:m.start()] + f"{key} = {literal}" + text[m.end():]


def bad_values(key: str) -> dict[str, str]:
    vals = dict(BAD_VALUES)
    if key in REFUSE_NEGATIVE:
        vals["negative"] = "-1.0"
    if key in WHOLE:
        vals["fraction"] = "1.5"
    return vals


def test_every_numeric_key_of_a_target_file_refuses_every_bad_value(capsys, tmp_path):
    good = full_target()
    (tmp_path / "good.toml").write_text(good)
    rc, _, err = run(capsys, "init", tmp_path / "good.h5", tmp_path / "good.toml")
    assert rc == 0, err  # the file is valid as it stands: each refusal below is the bad value's
    problems, tried = [], 0
    for table, start, keys in TARGET_KEYS:
        for key in keys:
            for kind, literal in bad_values(key).items():
                tried += 1
                path = tmp_path / f"t{tried}.toml"
                path.write_text(with_value(good, start, key, literal))
                arch = tmp_path / f"a{tried}.h5"
                rc, out, err = run(capsys, "init", arch, path)
                bad = clean_failure(rc, out, err, str(path), table)
                if not names_key(err, key):
                    bad.append(f"key {key} not named")
                if arch.exists() or list(tmp_path.glob(f"a{tried}.h5*")):
                    bad.append("an archive (or a file beside it) was written")
                if bad:
                    problems.append((table, key, kind, bad))
    n_keys = sum(len(k) for _, _, k in TARGET_KEYS)
    expected = n_keys * len(BAD_VALUES) + sum(k in REFUSE_NEGATIVE for _, _, ks in TARGET_KEYS for k in ks) + len(WHOLE)
    assert tried == expected and n_keys == 37, (tried, expected, n_keys)
    assert not problems, problems[:10]


def test_every_numeric_key_of_a_coefficients_file_refuses_every_bad_value(capsys, tmp_path):
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, read_target(DEMO / "target.toml"))
    varstar.ingest(arch, [NIGHT])
    before = digest(arch)
    forms = {
        "[setups.garden]": "[setups.garden]\n" + "".join(f"{k} = {v}\n" for k, v in COEFFICIENTS.items()),
        "[transformation]": "[transformation]\n" + "".join(f"{k} = {v}\n" for k, v in COEFFICIENTS.items()),
    }
    problems, tried = [], 0
    for table, good in forms.items():
        (tmp_path / "good.toml").write_text(good)
        shutil.copy(arch, tmp_path / "copy.h5")
        rc, _, err = run(capsys, "transform", tmp_path / "copy.h5", "--coefficients", tmp_path / "good.toml")
        assert rc == 0, err  # the good file is accepted, so each refusal below is the bad value's
        for key in COEFFICIENTS:
            for kind, literal in bad_values(key).items():
                tried += 1
                path = tmp_path / f"c{tried}.toml"
                path.write_text(with_value(good, table, key, literal))
                rc, out, err = run(capsys, "transform", arch, "--coefficients", path)
                bad = clean_failure(rc, out, err, str(path), table)
                if not names_key(err, key):
                    bad.append(f"key {key} not named")
                if bad:
                    problems.append((table, key, kind, bad))
    assert digest(arch) == before
    assert tried == 2 * (len(COEFFICIENTS) * len(BAD_VALUES) + 5), tried  # 5 keys refuse a negative value
    assert not problems, problems[:10]


def test_the_issue_reproduction_huge_integer_in_transformation(capsys, tmp_path):
    # Issue 11, item 4: OverflowError in setups.coefficients_from_table, for init and for transform.
    text = (DEMO / "target.toml").read_text() + f"\n[transformation]\nepsilon_v = {HUGE}\nmu_bv = 1.0\n"
    (tmp_path / "t.toml").write_text(text)
    rc, out, err = run(capsys, "init", tmp_path / "a.h5", tmp_path / "t.toml")
    assert not clean_failure(rc, out, err, str(tmp_path / "t.toml"), "[transformation].epsilon_v", "401 digits")
    assert not (tmp_path / "a.h5").exists()
    # The same checker for a table handed over from Python (not read from a file).
    from varstar.setups import coefficients_from_table

    with pytest.raises(InputError, match=r"x\.toml: \[transformation\]\.mu_bv: expected a finite number"):
        coefficients_from_table({"epsilon_v": 0.0, "mu_bv": 10**400}, "x.toml: [transformation]", source="x")


def test_huge_integers_are_refused_wherever_they_are(tmp_path):
    # Sibling: a table varstar keeps for other modules ([ephemeris] is read by timings, whose own
    # check would raise OverflowError) or one of the user's own never sees an integer a float cannot hold.
    base = (DEMO / "target.toml").read_text()
    for extra, where in ((f"\n[mine]\nnotes = [1, {HUGE}]\n", "[mine].notes #2"),
                         (f"\n[mine.deeper]\nx = {{ y = {HUGE} }}\n", "[mine.deeper.x].y")):
        with pytest.raises(InputError) as info:
            parse_target(base + extra, source="t.toml")
        assert str(info.value).startswith(f"t.toml: {where}:"), str(info.value)
    text = with_value(base, "[ephemeris]", "period", HUGE)
    with pytest.raises(InputError, match=r"\[ephemeris\]\.period: expected a finite number, got an integer of 401"):
        parse_target(text, source="t.toml")


def test_init_refuses_what_ingest_and_timings_would_refuse_later(capsys, tmp_path):
    # Sibling: [reduction] and [ephemeris] used to be checked only when used (at ingest, at timings);
    # init now checks them, so that no archive is made with a target that cannot be used.
    base = (DEMO / "target.toml").read_text()
    cases = {
        "unknown setting": (base + "\n[reduction]\nclip_sigmas = 3.0\n", "clip_sigmas"),
        "exclude a check star": (base + '\n[reduction]\nexclude = ["K1"]\n', "not a comparison star"),
        "p-value above one": (base + "\n[reduction]\nvariable_p_value = 2.0\n", "variable_p_value"),
        "ephemeris as MJD": (with_value(base, "[ephemeris]", "epoch", "61295.3861"), "MJD"),
        "ephemeris unknown key": (base.replace('kind = "maximum"', 'kind = "maximum"\nperiod_days = 0.4'), "period_days"),
    }
    for name, (text, word) in cases.items():
        path = tmp_path / f"{name.replace(' ', '-')}.toml"
        path.write_text(text)
        rc, out, err = run(capsys, "init", tmp_path / "a.h5", path)
        assert not clean_failure(rc, out, err, str(path), word), (name, err)
        assert not (tmp_path / "a.h5").exists()


# --------------------------------------------------------------------------- item 5: deep nesting


def deep_values(n: int) -> dict[str, str]:
    """A table [deep] whose value is nested ``n`` levels deep, in each way TOML nests."""
    return {
        "arrays": "[deep]\nx = " + "[" * n + "]" * n + "\n",
        "inline tables": "[deep]\nx = " + "{ a = " * (n - 1) + "{}" + " }" * (n - 1) + "\n",
        "dotted keys": "[deep]\n" + ".".join(["a"] * n) + " = 1\n",
        "table header": "[" + ".".join(["deep"] + ["a"] * n) + "]\nx = 1\n",
        "array of tables": "[[" + ".".join(["deep"] + ["a"] * n) + "]]\nx = 1\n",
    }


def test_deep_nesting_is_refused_with_a_message_naming_the_file(capsys, tmp_path):
    # Issue 11, item 5: a value of 5,000 nested arrays raised RecursionError in init.
    base = (DEMO / "target.toml").read_text()
    coeffs = "[transformation]\n" + "".join(f"{k} = {v}\n" for k, v in COEFFICIENTS.items())
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, read_target(DEMO / "target.toml"))
    before = digest(arch)
    problems, tried = [], 0
    for depth in (5000, 300, MAX_TOML_DEPTH + 1):
        for kind, table in deep_values(depth).items():
            for command in ("init", "transform"):
                tried += 1
                path = tmp_path / f"deep{tried}.toml"
                path.write_text((base if command == "init" else coeffs) + "\n" + table)
                new = tmp_path / f"new{tried}.h5"
                argv = ("init", new, path) if command == "init" else ("transform", arch, "--coefficients", path)
                rc, out, err = run(capsys, *argv)
                bad = clean_failure(rc, out, err, str(path), "nested")
                if new.exists():
                    bad.append("an archive was written")
                if bad:
                    problems.append((depth, kind, command, bad, err[:200]))
    assert tried == 30
    assert digest(arch) == before
    assert not problems, problems[:5]
    # Nesting within the limit is kept (a table of one's own, verbatim).
    t = parse_target(base + "\n[mine]\nx = [[1, 2], [3]]\n", source="t.toml")
    assert t.extra["mine"] == {"x": [[1, 2], [3]]}


# --------------------------------------------------------------------------- item 11: a cut last line


def test_the_issue_reproduction_cut_last_line(capsys, tmp_path):
    # Issue 11, item 11: a last line cut to '...,20260919-' was stored as a one-star exposure.
    text = NIGHT.read_text()
    cut = text[: text.rstrip("\n").rfind("-") + 1]
    assert cut.endswith(",20260919-")
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, read_target(DEMO / "target.toml"))
    before = digest(arch)
    src = tmp_path / "night.csv"
    src.write_text(cut)
    rc, out, err = run(capsys, "ingest", arch, src)
    last = cut.count("\n") + 1
    assert not clean_failure(rc, out, err, str(src), f"line {last}", "cut short", "'20260919-'")
    assert digest(arch) == before
    # Complete, or ended with a line end, the same rows are accepted.
    src.write_text(text)
    rc, out, err = run(capsys, "ingest", arch, src)
    assert rc == 0, err


def cut_family(path: Path) -> tuple[int, list]:
    """Cut ``path`` at every byte of its last line; return the count and what went wrong."""
    data = path.read_bytes()
    body = data.rstrip(b"\n")
    start = body.rfind(b"\n") + 1
    last_no = body.count(b"\n") + 1
    header = data.split(b"\n", 1)[0].decode().split(",")
    ids = list(read_target(DEMO / "target.toml").star_ids)
    full = parse_measurements(body, path.name, ids)
    problems = []
    for k in range(start + 1, len(body) + 1):
        piece = body[:k]
        fields = piece[start:].decode().split(",")
        try:
            t = parse_measurements(piece, path.name, ids)
        except InputError as exc:
            msg = str(exc)
            if not msg.startswith(f"{path.name}, line {last_no}:"):
                problems.append((k, "refused naming another place", msg[:200]))
            elif k == len(body):
                problems.append((k, "the complete last line is refused", msg[:200]))
            continue
        # Accepted: the line was whole, or cut inside its last cell (a shorter number or id that still
        # fits its exposure, which no reader can tell from a complete one).
        if k != len(body) and len(fields) != len(header):
            problems.append((k, f"accepted with {len(fields)} of {len(header)} fields", ""))
        if len(t) != len(full) and not (k < len(body) and len(t) == len(full)):
            problems.append((k, f"{len(t)} rows, the complete file {len(full)}", ""))
    return len(body) - start, problems


@pytest.mark.parametrize("path", [NIGHT, WIDE], ids=["long", "wide"])
def test_a_file_cut_anywhere_in_its_last_line_is_refused_or_is_the_same_table(path):
    tried, problems = cut_family(path)
    assert tried > 50, tried
    assert not problems, problems[:5]


def test_cut_inside_the_frame_id_is_refused_at_every_byte(tmp_path):
    # In the long form the last cell is the frame id: every cut inside it names a new exposure of
    # one star, or (cut to a prefix that is another exposure's id) breaks that exposure.
    body = NIGHT.read_bytes().rstrip(b"\n")
    ids = list(read_target(DEMO / "target.toml").star_ids)
    frame_start = body.rfind(b",") + 1
    refused = 0
    for k in range(frame_start, len(body)):
        with pytest.raises(InputError, match=r", line 2009: "):
            parse_measurements(body[:k], "night.csv", ids)
        refused += 1
    assert refused == len(b"20260919-226")


def test_the_complete_file_replaces_an_incomplete_night_on_request(capsys, tmp_path):
    # A night stored from a file that stopped early (here: at a line end, 40 rows short, which no reader
    # can tell) is replaced by the complete file on request, in one atomic change, and the removal is
    # recorded; without the request the complete file is refused with a message that says what to do.
    lines = NIGHT.read_text().splitlines(keepends=True)
    short, full = tmp_path / "night-short.csv", tmp_path / "night.csv"
    short.write_text("".join(lines[:-40]))
    full.write_text("".join(lines))
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, read_target(DEMO / "target.toml"))
    varstar.ingest(arch, [short])
    before = digest(arch)
    rc, out, err = run(capsys, "ingest", arch, full)
    assert not clean_failure(rc, out, err, "2026-09-19", "remove-night")
    assert digest(arch) == before
    res = varstar.ingest(arch, [full], replace=True)
    assert res.replaced == ("2026-09-19",) and res.to_dict()["replaced"] == ["2026-09-19"]
    a = varstar.open_archive(arch)
    assert a.nights()["label"].tolist() == ["2026-09-19"]
    raw = a.raw()
    assert len(raw) == len(lines) - 1 and set(raw["source"]) == {"night.csv"}
    with h5py_file(arch) as f:
        removals = f["removals"]
        assert [s.decode() if isinstance(s, bytes) else s for s in removals["label"][()]] == ["2026-09-19"]
        reason = removals["reason"][()][0]
        assert "replaced by a new ingest of night.csv" in (reason.decode() if isinstance(reason, bytes) else reason)
    assert varstar.verify(arch).ok
    # The same content again: with replace the night is replaced again (nothing skipped), without it skipped.
    assert varstar.ingest(arch, [full]).skipped[0]["why"].startswith("already ingested")


def h5py_file(path: Path):
    import h5py

    return h5py.File(path, "r")


# --------------------------------------------------------------------------- item 13: cost of bad input


class CountingStream(io.BytesIO):
    """A byte stream that counts what was taken from it."""

    taken = 0

    def read(self, n: int = -1) -> bytes:
        block = super().read(n)
        self.taken += len(block)
        return block


def test_a_header_of_100000_unknown_columns_is_refused_from_the_first_line():
    # Issue 11, item 13: pandas parsed every row before the header was checked (50 s).
    header = "jd,band,star,mag,mag_err," + ",".join(f"x{i}" for i in range(100_000))
    row = "2461303.598653,V,V1,-7.2,0.006" + "," * 100_000
    data = (header + "\n" + "\n".join([row] * 200) + "\n").encode()
    stream = CountingStream(data)
    with pytest.raises(InputError) as info:
        parse_stream(stream, "wide.csv", ["V1", "C1"])
    msg = str(info.value)
    assert msg.startswith("wide.csv, line 1: unknown column 'x0' and 99999 more"), msg[:200]
    assert len(msg) < 400  # the message does not list 100,000 names
    assert len(data) > 10 * CHUNK_BYTES and stream.taken <= 2 * CHUNK_BYTES


@pytest.mark.parametrize("kind", ["lines", "binary", "one line", "NUL"])
def test_garbage_costs_what_is_read_up_to_its_first_fault(kind):
    # Issue 11, item 13: 200 MB of garbage were read whole (2.3 GB, 8.5 s) to report line 2.
    # Here 40 MB: the reader must stop within the first pieces.
    rng = np.random.default_rng(11)
    n = 40 * 2**20
    if kind == "binary":
        data = rng.integers(0, 256, n, dtype=np.uint8).tobytes()
    else:
        raw = rng.integers(32, 127, n, dtype=np.uint8)
        if kind in ("lines", "NUL"):
            raw[79::80] = ord("\n")
        if kind == "NUL":
            raw[1000] = 0
        data = b"jd,band,star,mag,mag_err\n" + raw.tobytes()
    stream = CountingStream(data)
    with pytest.raises(InputError) as info:
        parse_stream(stream, "junk.csv", ["V1", "C1"])
    msg = str(info.value)
    want = {"lines": "junk.csv, line 2:", "binary": "not UTF-8", "one line": "longer than", "NUL": "NUL"}[kind]
    assert want in msg, msg[:200]
    limit = MAX_LINE_BYTES + 2 * CHUNK_BYTES if kind == "one line" else 2 * CHUNK_BYTES
    assert stream.taken <= limit, (stream.taken, limit)


@pytest.mark.parametrize("at", [0, 3])
def test_a_row_of_a_million_fields_is_named_before_pandas_reads_it(monkeypatch, at):
    # Sibling found by the property tests: pandas takes the extra leading cells of a first row with
    # too many fields for an index, at a cost that grows with their number (minutes for a million).
    # The count of fields is checked first; pandas must not even be called on such a piece.
    lines = NIGHT.read_bytes().split(b"\n")[:20]
    data = b"\n".join(lines[: at + 1] + [b"," * 2**20] + lines[at + 1:]) + b"\n"
    import varstar.measurements as m

    original = m.pd.read_csv

    def guarded(buf, *args, **kw):
        if len(buf.getvalue()) > 2**19:
            raise AssertionError("pandas was asked to read the piece with the row of a million fields")
        return original(buf, *args, **kw)

    monkeypatch.setattr(m.pd, "read_csv", guarded)
    with pytest.raises(InputError, match=rf"^x\.csv, line {at + 2}: 1048577 fields, but the header has 9"):
        parse_measurements(data, "x.csv", list(read_target(DEMO / "target.toml").star_ids))


def test_a_device_is_read_only_as_far_as_its_first_fault(capsys, tmp_path):
    # Sibling: a character device (endless) given as a measurement file or as a target file.
    if not Path("/dev/zero").exists():
        pytest.skip("no /dev/zero")
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, read_target(DEMO / "target.toml"))
    rc, out, err = run(capsys, "ingest", arch, "/dev/zero")
    assert not clean_failure(rc, out, err, "/dev/zero", "NUL")
    rc, out, err = run(capsys, "init", tmp_path / "b.h5", "/dev/zero")
    assert not clean_failure(rc, out, err, "/dev/zero", "MiB")


def test_a_long_table_read_in_pieces_equals_the_table_read_whole(tmp_path):
    # The piecewise reader must not change what a valid table says: the demo night repeated over
    # many pieces (frames renamed per copy) gives the rows of one whole parse, line numbers included.
    text = NIGHT.read_text()
    header, rows = text.split("\n", 1)
    copies = []
    for k in range(20):
        copies.append(re.sub(r",20260919-(\d{3})$", rf",c{k}-\1", rows.rstrip("\n"), flags=re.M))
    path = tmp_path / "long.csv"
    path.write_text(header + "\n# comment\n\n" + "\n".join(copies) + "\n")
    assert path.stat().st_size > 1.5 * CHUNK_BYTES
    ids = list(read_target(DEMO / "target.toml").star_ids)
    got, sha = read_measurement_file(path, ids)
    assert sha == hashlib.sha256(path.read_bytes()).hexdigest()
    whole = pd.read_csv(path, comment="#", skip_blank_lines=True)
    assert len(got) == len(whole)
    assert np.array_equal(got["mag"].to_numpy(), whole["mag"].to_numpy())
    assert np.array_equal(got["jd"].to_numpy(), whole["jd"].to_numpy())
    assert got["frame"].tolist() == whole["frame"].tolist()
    n = len(rows.rstrip("\n").split("\n"))
    assert got["line"].tolist() == [4 + i for i in range(20 * n)]


def test_a_target_of_many_stars_costs_what_the_night_holds():
    # Issue 11, item 13: a target file with 70,000 stars made each ingest take 77 s (the night report
    # scanned the points once per check star). Here 3,000 extra check stars and 3,000 extra comparison
    # stars that the night does not measure: the reduction must be the same as with the plain target,
    # value for value, and the report must not grow with the target.
    base = (DEMO / "target.toml").read_text()
    head, sep, tail = base.partition("# An older ephemeris")
    extra = "".join(f'\n[[stars]]\nid = "X{i}"\nrole = "check"\n' for i in range(3000))
    extra += "".join(f'\n[[stars]]\nid = "Y{i}"\nrole = "comparison"\nV = 14.0\nB = 14.6\n' for i in range(3000))
    big = parse_target(head + extra + "\n" + sep + tail, source="big.toml")
    plain = parse_target(base, source="target.toml")
    table = varstar.read_measurements(NIGHT, plain.star_ids)
    a, b = reduce_night(plain, table), reduce_night(big, table)
    for col in ("mag", "mag_err", "cal_err", "bjd_tdb", "quality"):
        assert np.array_equal(a.points[col].to_numpy(), b.points[col].to_numpy()), col
    assert np.array_equal(a.exposures["zero_point"].to_numpy(), b.exposures["zero_point"].to_numpy(), equal_nan=True)
    pd.testing.assert_frame_equal(a.ensembles, b.ensembles)
    for band in ("B", "V"):  # the parts of the report about the stars measured do not grow
        ra, rb = a.report["bands"][band], b.report["bands"][band]
        assert rb["check_stars"] == ra["check_stars"] and set(rb["check_stars"]) == {"K1"}
        assert rb["ensemble"]["stars"] == ra["ensemble"]["stars"]
        # every comparison star of the file is still accounted for (listed as without data)
        assert len(rb["comparisons_rejected"]) == len(ra["comparisons_rejected"]) + 3000
    # every comparison star keeps a row per band; those the night lacks say so as before
    y = b.comparisons[b.comparisons["star"] == "Y7"]
    assert y["status"].tolist() == ["too_few_points"] * 2 and np.isinf(y["mean_err"]).all()
    # the ensemble summary still indexes the stars of the target file
    idx = [s["index"] for s in b.report["bands"]["V"]["ensemble"]["stars"]]
    assert idx == list(range(9))


# --------------------------------------------------------------------------- messages


@pytest.mark.parametrize("case", ["one band", "whole night"])
def test_a_reduction_error_names_the_file_and_the_band(capsys, tmp_path, case):
    # Issue 11, messages: "fewer than 2 comparison stars have usable data in this band (0 of 7)"
    # named neither the file nor the band.  Here only C3 of the seven comparison stars is left in V
    # (B keeps them all), or in the whole night (then the message also says the others are missing).
    lines = NIGHT.read_text().splitlines(keepends=True)
    gone = tuple(f",{b},C{k}," for b in (("V",) if case == "one band" else ("V", "B")) for k in (1, 2, 4, 5, 6, 7))
    src = tmp_path / "night.csv"
    src.write_text(lines[0] + "".join(ln for ln in lines[1:] if not any(g in ln for g in gone)))
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, read_target(DEMO / "target.toml"))
    before = digest(arch)
    rc, out, err = run(capsys, "ingest", arch, src)
    assert rc == ReductionError.exit_code, err
    words = ["fewer than 2 comparison stars", "(1 of 7)"] if case == "one band" else \
        ["fewer than 2 comparison stars", "(1 of 1)", f"6 comparison star(s) of {DEMO / 'target.toml'}"]
    # the archive's copy of the target is what ingest reads: its name ends in ':/target'
    words = [w.replace(str(DEMO / "target.toml"), f"{arch}:/target") for w in words]
    assert not clean_failure(rc, out, err, f"{src}, band ", *words), err
    assert digest(arch) == before


# --------------------------------------------------------------------------- one rule for every id

SEPARATORS = [chr(c) for c in range(0x110000) if unicodedata.category(chr(c)) in ("Cc", "Zl", "Zp")]
PRINTABLE = ["é", "中", "\u00a0", "\u2009", "🌟", "V'", "a b", "\u200d", "Ω"]


def long_table(frame: str = "f1", band: str = "V") -> bytes:
    rows = [f"2461303.6,{band},{s},-7.0,0.01,{frame}" for s in ("V1", "C1", "C2")]
    return ("jd,band,star,mag,mag_err,frame\n" + "\n".join(rows) + "\n").encode()


def test_one_rule_for_every_id():
    # Issue 11, messages: frame ids accepted control characters that star ids refused.
    ids = ["V1", "C1", "C2"]
    base = (DEMO / "target.toml").read_text()
    tried = 0
    for ch in SEPARATORS:
        if ch == "\x00":
            continue  # a NUL makes the whole table "not a text table" (no id at all)
        tried += 1
        text_id = f"a{ch}b"
        assert id_problem(text_id), repr(ch)
        for kind, data in (("frame", long_table(frame=text_id)), ("band", long_table(band=text_id))):
            if ch in "\n\r":
                continue  # a line end splits the row: refused for its fields, not as an id
            with pytest.raises(InputError) as info:
                parse_measurements(data, "n.csv", ids)
            msg = str(info.value)
            assert msg.startswith("n.csv, line 2:") and f"'{kind}'" in msg and f"U+{ord(ch):04X}" in msg, (repr(ch), msg)
        toml_id = "a\\u%04X" % ord(ch) + "b" if ord(ch) <= 0xFFFF else "a\\U%08X" % ord(ch) + "b"
        with pytest.raises(InputError, match=rf"t\.toml: \[\[stars\]\] #2: 'id' .* contains U\+{ord(ch):04X}, a control"):
            parse_target(base.replace('id = "C1"', f'id = "{toml_id}"', 1), source="t.toml")
    assert tried == len(SEPARATORS) - 1 == 66, tried
    # The rule's pattern is exactly these categories (checked against the Unicode database).
    from varstar.inputs import _NOT_IN_TEXT

    assert [chr(c) for c in range(0x110000) if _NOT_IN_TEXT.match(chr(c))] == SEPARATORS
    for text_id in PRINTABLE:  # inside the id: blanks at either end are not part of it
        assert id_problem(f"x{text_id}y") is None
        t = parse_measurements(long_table(frame=f"x{text_id}y"), "n.csv", ids)
        assert set(t["frame"]) == {f"x{text_id}y"}
        t = parse_target(base.replace('id = "C1"', f'id = "C1{text_id}z"', 1), source="t.toml")
        assert t.star_ids[1] == f"C1{text_id}z"


def test_python_api_numbers_refuse_huge_integers_in_words():
    """The same rule from Python as from files: an integer too large for a float is an InputError
    (the siblings of the TOML check in timings and transform)."""
    from varstar.timings import ephemeris_from_table
    from varstar.transform import Coefficients

    with pytest.raises(InputError, match=r"\[ephemeris\]\.epoch"):
        ephemeris_from_table({"epoch": 10**400, "period": 0.5, "kind": "minimum"}, "t.toml: [ephemeris]")
    with pytest.raises(InputError, match="epsilon_v must be a number"):
        Coefficients(epsilon_v=10**400, mu_bv=1.0)
