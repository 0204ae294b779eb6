"""Bad input, tried systematically: property tests through the real command line.

Every example starts from a valid invented night (``varstar.simulate.synthetic_night``
with a fixed seed: an invented field, nothing observed) and its target
description, changes it in one way chosen by hypothesis, and runs
``varstar.cli.main(["ingest", ...])`` or ``main(["init", ...])`` in-process
against a real archive made with ``varstar init``.  The contract checked is the
README's ("Errors print one ``error: ...`` line on stderr naming the file, line
or key, and exit non-zero; an archive is never left half-changed"):

* EITHER the command fails: exit code != 0, exactly one stderr line, starting
  with ``error:``, naming the file (and the line or key where there is one), no
  traceback, the archive byte for byte as it was and no new file beside it
  apart from the writer's lock file;
* OR it succeeds, and the archive's raw table (``open_archive(path).raw()``)
  holds exactly the rows the file says, value for value (floats bit for bit).

Which rows a damaged file "says" is decided by a small reference reader written
here from the README's description of the table (one row per line, ``#``
comments and blank lines skipped, numbers written as decimal numbers, the
plausibility ranges of ``varstar/measurements/``).  Faults injected on
purpose also carry their own expected line and column, so the reference and the
program are each checked against something independent.

Spreadsheet safety of the CSV export follows the OWASP "CSV Injection" guidance
(a cell starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return is read
as a formula; prefix a single quote; from memory) and safe file names follow
Microsoft's "Naming Files, Paths, and Namespaces" (reserved device names CON,
PRN, AUX, NUL, COM0-9, LPT0-9 with or without an extension; from memory).
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import re
import shutil
import tempfile
import unicodedata
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, Phase, assume, given, settings
from hypothesis import strategies as st

from helpers import run

import varstar
from varstar.cli import main
from varstar.export import safe_filename, write_csv
from varstar.simulate import synthetic_night

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]

# The invented night: 6 exposures in each of B and V of 5 stars (target V1,
# comparisons C1-C3, check K1); fixed seeds.
N_EXP, N_STARS, SEED, FIELD_SEED = 6, 5, 11, 5
LONG_HEADER = ["jd", "band", "star", "mag", "mag_err", "airmass", "exptime", "flag", "frame"]
PER_EXPOSURE = ("jd", "band", "airmass", "exptime", "flag", "frame")
REQUIRED_LONG = ("jd", "band", "star", "mag", "mag_err")
RAW_COLUMNS = ["source", "line", "frame", "jd", "band", "star", "mag", "mag_err", "airmass", "exptime_s", "flag"]
# Plausibility limits of varstar/measurements/ (common practice for CCD photometry).
JD_MIN, JD_MAX, MAG_ABS_MAX, MAG_ERR_MAX, AIRMASS_MIN, AIRMASS_MAX, EXPTIME_MAX = (
    2_400_000.5, 2_500_000.5, 50.0, 5.0, 0.99, 40.0, 36_000.0,
)
FLAG_MIN, FLAG_MAX = -(2**31), 2**31 - 1  # the archive stores flags as 32-bit integers

# No shrinking: an ingest takes ~0.4 s, and the failure messages below already say what went wrong.
SETTINGS = {"deadline": None, "derandomize": True, "phases": [Phase.explicit, Phase.generate], "suppress_health_check": [
    HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.data_too_large,
    HealthCheck.large_base_example,
]}


# --------------------------------------------------------------------------- the world


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    """A valid night (long and wide form), its target file and an empty archive made by ``varstar init``."""
    folder = tmp_path_factory.mktemp("props")
    toml_text, df = synthetic_night(
        N_EXP, N_STARS, bands=("B", "V"), seed=SEED, field_seed=FIELD_SEED, missing_fraction=0.0, flag_fraction=0.0
    )
    toml_path = folder / "target.toml"
    toml_path.write_text(toml_text, encoding="utf-8")
    template = folder / "template.h5"
    assert main(["init", str(template), str(toml_path)]) == 0
    target = varstar.read_target(toml_path)
    ids = list(target.star_ids)
    # Two measurements marked bad upstream (flag 1): the target in the 3rd exposure, the check star in the 8th.
    df = df.reset_index(drop=True)
    frames = list(pd.unique(df["frame"]))
    flagged = [
        int(df.index[(df["frame"] == frames[2]) & (df["star"] == "V1")][0]),
        int(df.index[(df["frame"] == frames[7]) & (df["star"] == "K1")][0]),
    ]
    df.loc[flagged, "flag"] = 1
    rows = [
        [repr(float(r.jd)), r.band, r.star, repr(float(r.mag)), repr(float(r.mag_err)), repr(float(r.airmass)),
         f"{r.exptime:g}", str(int(r.flag)), r.frame]
        for r in df.itertuples()
    ]
    long = Table(list(LONG_HEADER), rows)
    # Wide form: one row per exposure; a measurement marked bad is left out (empty cells), as the README says.
    exp = df.drop_duplicates("frame")
    wide_header = ["jd", "band", "exptime", "frame"] + [c for s in ids for c in (s, f"{s}_err")]
    wide_rows = []
    for fr in exp.itertuples():
        cells = [repr(float(fr.jd)), fr.band, f"{fr.exptime:g}", fr.frame]
        sub = df[df["frame"] == fr.frame].set_index("star")
        for s in ids:
            good = s in sub.index and sub.loc[s, "flag"] == 0
            cells += [repr(float(sub.loc[s, "mag"])), repr(float(sub.loc[s, "mag_err"]))] if good else ["", ""]
        wide_rows.append(cells)
    wide = Table(wide_header, wide_rows)
    return World(
        folder=folder, toml_text=toml_text, toml_path=toml_path, archive_bytes=template.read_bytes(),
        ids=ids, bands=sorted(target.catalog_bands()), long=long, wide=wide, target=target,
    )


class World(SimpleNamespace):
    def __repr__(self) -> str:
        return "World(...)"


@contextmanager
def sandbox(world, with_archive: bool = True):
    """A fresh folder for one example (removed afterwards), holding a copy of the empty archive."""
    d = Path(tempfile.mkdtemp(dir=world.folder))
    try:
        arch = d / "night.h5"
        if with_archive:
            arch.write_bytes(world.archive_bytes)
        yield d, arch
    finally:
        shutil.rmtree(d, ignore_errors=True)


def listing(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def assert_clean_failure(rc: int, out: str, err: str, *, names: str, before: dict[str, str], folder: Path, archive: Path) -> str:
    """The failure half of the contract; returns the message after ``error: ``."""
    assert rc != 0, (rc, out[:300])
    assert "Traceback" not in err, err[-2000:]
    assert err.startswith("error: ") and err.endswith("\n") and err.count("\n") == 1, err[:2000]
    msg = err[len("error: "):-1]
    assert names in msg, (names, msg[:500])
    after = listing(folder)
    # The archive byte for byte as it was; nothing new beside it except the writer's lock file.
    assert {k: v for k, v in after.items() if k != archive.name + ".lock"} == before, (sorted(before), sorted(after))
    return msg


def lines_named(msg: str, path: Path) -> list[int]:
    """The line numbers a message gives for ``path`` (``<path>, line N``)."""
    return [int(n) for n in re.findall(re.escape(str(path)) + r", line (\d+)", msg)]


# --------------------------------------------------------------------------- tables and their text


class Table:
    """A measurement table as text cells (a plain class: its repr stays short in hypothesis reports)."""

    def __init__(self, header: list[str], rows: list[list[str]], raw_cells: set[tuple[int, int]] | None = None):
        self.header = header
        self.rows = rows
        self.raw_cells = raw_cells or set()  # (row, column) written as is, unquoted

    def __repr__(self) -> str:  # short: hypothesis prints the drawn tables of a failing example
        return f"Table({self.header}, {len(self.rows)} rows, first {self.rows[:1]}, raw {sorted(self.raw_cells)})"

    def copy(self) -> Table:
        return Table(list(self.header), [list(r) for r in self.rows], set(self.raw_cells))

    def col(self, name: str) -> int:
        return self.header.index(name)


@dataclass
class Layout:
    """How a table is written: none of these change what the file says."""

    crlf: bool = False
    bom: bool = False
    pad: bool = False  # a space after each comma (and around text cells)
    final_newline: bool = True
    extras: tuple[tuple[int, str], ...] = ()  # (insert before row k, or -1 before the header; a comment or blank line)


def csv_line(cells: list[str], pad: bool) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="").writerow(cells)
    line = buf.getvalue()
    if pad:  # re-join with ", " only where the writer did not quote (quoted cells keep their own commas)
        parts = next(csv.reader([line]))
        line = ", ".join(_quote(p) for p in parts)
    return line


def _quote(cell: str) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="").writerow([cell])
    return buf.getvalue()


def serialise(table: Table, layout: Layout) -> tuple[bytes, list[int], int]:
    """Bytes of the file, the 1-based line of each data row, and the header's line."""
    lines: list[str] = []
    before: dict[int, list[str]] = {}
    for k, text in layout.extras:
        before.setdefault(k, []).append(text)
    lines += before.get(-1, [])
    header_line = len(lines) + 1
    lines.append(csv_line(table.header, layout.pad))
    row_lines = []
    for k, row in enumerate(table.rows):
        lines += before.get(k, [])
        row_lines.append(len(lines) + 1)
        lines.append(csv_line(row, layout.pad))
    lines += before.get(len(table.rows), [])
    nl = "\r\n" if layout.crlf else "\n"
    text = nl.join(lines) + (nl if layout.final_newline else "")
    data = text.encode("utf-8")
    return (b"\xef\xbb\xbf" + data if layout.bom else data), row_lines, header_line


# --------------------------------------------------------------------------- the reference reader


_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")  # ASCII digits only
EMPTY, BAD = object(), object()


def ref_number(cell: str):
    """A decimal number as the README shows them (no words like nan/inf, no hex, no digit separators)."""
    s = cell.strip()
    if s == "":
        return EMPTY
    if not _NUMBER.fullmatch(s):
        return BAD
    v = float(s)
    return v if math.isfinite(v) else BAD


@dataclass
class Verdict:
    """What the reference reader makes of a file: the rows, or the places at fault."""

    rows: pd.DataFrame | None = None
    problems: list[frozenset[int] | None] = field(default_factory=list)  # None: the whole file

    @property
    def ok(self) -> bool:
        return not self.problems

    def lines(self) -> set[int]:
        return set().union(*[p for p in self.problems if p is not None]) if self.problems else set()


def reference(data: bytes, ids: list[str], bands: list[str], source_name: str) -> Verdict:
    """Independent reading of a measurement table, from the README's description."""
    v = Verdict()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        return Verdict(problems=[None])
    if "\x00" in text:
        return Verdict(problems=[None])
    kept: list[tuple[int, str]] = []
    for k, line in enumerate(text.split("\n"), start=1):
        line = line.strip("\r")  # carriage returns at either end are line-end blanks (CRLF, LFCR)
        s = line.strip(" \t")
        if not s or s.startswith("#"):
            continue
        kept.append((k, line))
    if not kept:
        return Verdict(problems=[None])
    for k, line in kept:
        if "\r" in line:  # a carriage return inside a line
            v.problems.append(frozenset([k]))
    if v.problems:
        return v

    def fields(k: int, line: str) -> list[str] | None:
        try:
            return next(csv.reader([line], skipinitialspace=True, strict=True))
        except csv.Error:
            return None

    hk, hline = kept[0]
    hline = hline.removeprefix("\ufeff")  # pandas skips a byte-order mark that starts what it reads
    header = fields(hk, hline)
    if header is None:
        return Verdict(problems=[frozenset([hk])])
    header = [h.strip() for h in header]
    hset = set(header)
    if len(hset) != len(header) or "" in hset:
        v.problems.append(frozenset([hk]))
    long = "star" in hset
    if long:
        if not set(REQUIRED_LONG) <= hset or not hset <= set(REQUIRED_LONG + PER_EXPOSURE):
            v.problems.append(frozenset([hk]))
        stars: list[str] = []
    else:
        stars = [h for h in header if h not in PER_EXPOSURE and not h.endswith("_err")]
        errs = [h[:-4] for h in header if h not in PER_EXPOSURE and h.endswith("_err")]
        if (not {"jd", "band"} <= hset or not stars or set(stars) != set(errs) or not set(stars) <= set(ids)):
            v.problems.append(frozenset([hk]))
    if len(kept) == 1:
        v.problems.append(None)
    # One tidy record per measurement: (line, cells by varstar's column name).
    records: list[tuple[int, dict[str, str]]] = []
    for k, line in kept[1:]:
        f = fields(k, line)
        if f is None or len(f) != len(header):
            v.problems.append(frozenset([k]))
            continue
        if v.problems:  # a bad header: only the shape of the rows is still worth checking
            continue
        cells = dict(zip(header, f))
        if long:
            records.append((k, cells))
        else:
            base = {c: cells[c] for c in PER_EXPOSURE if c in cells}
            for s in stars:
                m, e = cells[s], cells[f"{s}_err"]
                if m.strip() == "" and e.strip() == "":
                    continue
                records.append((k, {**base, "star": s, "mag": m, "mag_err": e}))
    if v.problems:
        return v
    if not records:
        return Verdict(problems=[None])

    out = []
    for k, c in records:
        bad = False
        band, star = c["band"].strip(), c["star"].strip()
        bad |= band == "" or band not in bands or star not in ids
        jd = ref_number(c["jd"])
        bad |= jd is EMPTY or jd is BAD or not JD_MIN <= jd <= JD_MAX
        flag = ref_number(c.get("flag", ""))
        flag = 0.0 if flag is EMPTY else flag
        bad |= flag is BAD or (flag is not BAD and (flag != round(flag) or not FLAG_MIN <= flag <= FLAG_MAX))
        good = flag == 0
        mag, err = ref_number(c["mag"]), ref_number(c["mag_err"])
        for val in (mag, err):
            bad |= val is BAD or (val is EMPTY and good)
        bad |= isinstance(mag, float) and abs(mag) > MAG_ABS_MAX
        bad |= isinstance(err, float) and (err > MAG_ERR_MAX or err < 0 or (err == 0 and good))
        am = ref_number(c.get("airmass", ""))
        bad |= am is BAD or (isinstance(am, float) and not AIRMASS_MIN <= am <= AIRMASS_MAX)
        et = ref_number(c.get("exptime", ""))
        bad |= et is BAD or (isinstance(et, float) and not 0 < et <= EXPTIME_MAX)
        frame = c["frame"].strip() if "frame" in c else None
        bad |= frame == ""
        # One rule for every id (varstar.inputs.id_problem): no control character, line or paragraph separator.
        bad |= frame is not None and any(unicodedata.category(ch) in ("Cc", "Zl", "Zp") for ch in frame)
        if bad:
            v.problems.append(frozenset([k]))
            continue
        nan = float("nan")
        out.append({
            "source": source_name, "line": k,
            "frame": frame if frame is not None else f"{jd:.6f}",
            "jd": jd, "band": band, "star": star,
            "mag": mag if isinstance(mag, float) else nan, "mag_err": err if isinstance(err, float) else nan,
            "airmass": am if isinstance(am, float) else nan, "exptime_s": et if isinstance(et, float) else nan,
            "flag": int(flag),
        })
    if v.problems:
        return v
    rows = pd.DataFrame(out, columns=RAW_COLUMNS)
    # One exposure = (frame, band): its rows agree on time, airmass and exposure time, and on whether they give them.
    for _, g in rows.groupby(["frame", "band"], sort=False):
        for col, tol in (("jd", 1e-7), ("airmass", 1e-9), ("exptime_s", 1e-9)):
            vals = g[col].to_numpy()
            fin = np.isfinite(vals)
            if (fin.any() and not fin.all()) or (fin.any() and np.ptp(vals[fin]) > tol):
                v.problems.append(frozenset(g["line"]))
        for _, same in g.groupby("star"):
            if len(same) > 1:
                v.problems.append(frozenset(same["line"]))
    if v.problems:
        return v
    # A last line without a line end that is the only measurement of its exposure, while other exposures have
    # two or more, looks cut short and is refused (varstar/measurements/, validate.check_cut_line).
    last_no = text.count("\n") + 1
    if not data.endswith(b"\n") and kept[-1][0] == last_no and len(kept) > 1:
        key = (rows["frame"].astype(str) + "\x00" + rows["band"]).to_numpy()
        sizes = pd.Series(key).map(pd.Series(key).value_counts()).to_numpy()
        mine = np.flatnonzero(rows["line"].to_numpy() == last_no)
        if mine.size:
            others = sizes[key != key[mine[0]]]
            if sizes[mine[0]] == 1 and others.size and others.max() >= 2:
                return Verdict(problems=[frozenset([last_no])])
    # The archive keeps one time, airmass and exposure time per exposure: its first row's (within the
    # tolerances above, the rows agree; varstar/night.py, reduce_night, takes the first row).
    for col in ("jd", "airmass", "exptime_s"):
        rows[col] = rows.groupby(["frame", "band"], sort=False)[col].transform(lambda x: x.iloc[0])
    v.rows = rows.sort_values(["line", "star"], kind="stable").reset_index(drop=True)
    return v


def stored_raw(archive: Path) -> pd.DataFrame:
    raw = varstar.open_archive(archive).raw()
    return raw[RAW_COLUMNS].sort_values(["line", "star"], kind="stable").reset_index(drop=True)


def assert_same_rows(got: pd.DataFrame, want: pd.DataFrame) -> None:
    assert len(got) == len(want), (len(got), len(want))
    for col in RAW_COLUMNS:
        a, b = got[col].to_numpy(), want[col].to_numpy()
        if col in ("jd", "mag", "mag_err", "airmass", "exptime_s"):
            a, b = a.astype(float), b.astype(float)
            same = (a == b) | (np.isnan(a) & np.isnan(b))  # exactly: bit for bit apart from NaN
        else:
            same = np.asarray([x == y for x, y in zip(a.tolist(), b.tolist())])
        assert same.all(), (col, a[~same][:3].tolist(), b[~same][:3].tolist(), want["line"].to_numpy()[~same][:3].tolist())


# --------------------------------------------------------------------------- strategies


def frame_texts() -> st.SearchStrategy[str]:
    """Free-text exposure ids: any printable text (the one rule for ids: no control character, line or
    paragraph separator), not a comment."""
    return st.text(
        alphabet=st.characters(blacklist_categories=("Cs", "Cc", "Zl", "Zp")), min_size=1, max_size=30
    ).filter(lambda t: t.strip() != "" and not t.lstrip().startswith("#"))


@st.composite
def layouts(draw, n_rows: int) -> Layout:
    extras = draw(st.lists(
        st.tuples(st.integers(-1, n_rows), st.sampled_from(["# comment", "#", "   # indented, note", "", "  ", "\t"])),
        max_size=4,
    ))
    return Layout(
        crlf=draw(st.booleans()), bom=draw(st.booleans()), pad=draw(st.booleans()),
        final_newline=draw(st.booleans()), extras=tuple(extras),
    )


@st.composite
def benign(draw, table: Table, wide: bool, keep: frozenset[str] = frozenset()) -> Table:
    """Changes that keep a table valid: column order, dropped optional columns, row order, number spelling,
    shifted (negative or large) magnitudes, renamed exposures, blanked bad measurements."""
    t = table.copy()
    numeric = {"jd", "mag", "mag_err", "airmass", "exptime"} if not wide else {"jd", "exptime"} | {
        h for h in t.header if h not in PER_EXPOSURE}
    # Magnitudes shifted by a constant (instrumental magnitudes may be large or negative).
    shift = draw(st.sampled_from([0.0, 0.0, -38.5, 41.25, 7.0]))
    if shift:
        mag_cols = [t.col("mag")] if not wide else [t.col(h) for h in t.header if h not in PER_EXPOSURE and not h.endswith("_err")]
        for r in t.rows:
            for j in mag_cols:
                if r[j].strip():
                    r[j] = repr(float(r[j]) + shift)
    # Blank the magnitude of measurements marked bad (allowed: flag != 0).
    if not wide and draw(st.booleans()):
        fj, mj, ej = t.col("flag"), t.col("mag"), t.col("mag_err")
        for r in t.rows:
            if r[fj] != "0":
                r[mj] = r[ej] = ""
    # Rename some exposures (free text, one line), in every row of the exposure.
    if "frame" in t.header and draw(st.booleans()):
        fj = t.col("frame")
        old = sorted({r[fj] for r in t.rows})
        for _ in range(draw(st.integers(1, 3))):
            victim = draw(st.sampled_from(old))
            new = draw(frame_texts())
            taken = {r[fj].strip() for r in t.rows}
            if new.strip() in taken:
                continue
            for r in t.rows:
                if r[fj] == victim:
                    r[fj] = new
    # Spell numbers differently: scientific notation with 17 digits, a leading '+', padding blanks.
    for r in t.rows:
        for j, h in enumerate(t.header):
            if h in numeric and r[j].strip() and draw(st.integers(0, 9)) == 0:
                x = float(r[j])
                r[j] = draw(st.sampled_from([f"{x:.17e}", ("+" + r[j]) if x >= 0 else r[j], f" {r[j]} "]))
    # Drop optional columns (not 'flag' when a bad measurement has no magnitude: that would make it good).
    blank_bad = not wide and any(r[t.col("mag")] == "" for r in t.rows)
    optional = [c for c in ("airmass", "exptime", "frame", "flag")
                if c in t.header and c not in keep and not (c == "flag" and blank_bad)]
    for c in draw(st.lists(st.sampled_from(optional), unique=True, max_size=len(optional))):
        j = t.col(c)
        t.header.pop(j)
        for r in t.rows:
            r.pop(j)
    # Column and row order.
    order = draw(st.permutations(range(len(t.header))))
    t.header = [t.header[j] for j in order]
    t.rows = [[r[j] for j in order] for r in t.rows]
    if draw(st.booleans()):
        t.rows = draw(st.permutations(t.rows))
    return t


@dataclass
class Fault:
    """One injected mistake: where varstar must say it is (row indices, or the header) and which words."""

    kind: str
    rows: frozenset[int] | None  # rows of the table whose line may be named; None: the header line
    words: tuple[str, ...]
    file_level: bool = False


BAD_NUMBERS = ["abc", "nan", "NaN", "-nan", "inf", "-inf", "Infinity", "1e999", "-1e999", "1.2.3", "0x1A", "1_0",
               "\uff11\uff12", "--1", "1e", ".", "+", "12 34", "TRUE", "1,5", "\u00bd"]
OUT_OF_RANGE = {
    "jd": ["0", "-2461300.5", "1e10", "2500000.6", "2400000.4", "61300.125"],
    "mag": ["50.5", "-50.5", "1e300", "-1e300"],
    "mag_err": ["0", "-0.01", "5.0001", "1e300", "-1e-300", "0.0"],
    "airmass": ["0.5", "0", "-1.2", "40.5", "1e300"],
    "exptime": ["0", "-60", "36000.5", "1e300"],
    "flag": ["0.5", "-0.5", "1e300", "-1e300", "4294967296", "2147483648", "-2147483649"],
}


@st.composite
def long_fault(draw, t: Table, kind: str, col: str | None = None) -> tuple[Table, Fault]:
    """One mistake of ``kind`` (in column ``col`` where that applies) in a long-form table, on a good
    measurement, so that it is a mistake whatever the flags."""
    t = t.copy()
    fj = t.col("flag") if "flag" in t.header else None
    good = [i for i, r in enumerate(t.rows) if fj is None or r[fj].strip() in ("0", "")]
    i = draw(st.sampled_from(good))
    row = t.rows[i]

    def pick(options):
        return col if col is not None else draw(st.sampled_from(options))
    if kind == "bad number":
        c = pick([c for c in ("jd", "mag", "mag_err", "airmass", "exptime", "flag") if c in t.header])
        row[t.col(c)] = draw(st.sampled_from(BAD_NUMBERS))
        return t, Fault(kind, frozenset([i]), (f"'{c}'",))
    if kind == "out of range":
        c = pick([c for c in OUT_OF_RANGE if c in t.header])
        row[t.col(c)] = draw(st.sampled_from(OUT_OF_RANGE[c]))
        return t, Fault(kind, frozenset([i]), (f"'{c}'",))
    if kind == "empty cell":
        c = pick([c for c in ("jd", "band", "star", "mag", "mag_err", "frame") if c in t.header])
        row[t.col(c)] = draw(st.sampled_from(["", "  "]))
        return t, Fault(kind, frozenset([i]), ("star",) if c == "star" else (f"'{c}'",))
    if kind == "unknown star":
        row[t.col("star")] = draw(st.sampled_from(["X9", "v1", "C1 C2", "K", "=V1", "C\u0001"]))
        return t, Fault(kind, frozenset([i]), ("unknown star",))
    if kind == "band without catalogue":
        # not "b": a band differing only in case from the description's B is that band (README)
        row[t.col("band")] = draw(st.sampled_from(["R", "Rc", "V'", "Ic"]))
        return t, Fault(kind, frozenset([i]), ("band '",))
    if kind == "duplicate row":
        copy = list(row)
        if draw(st.booleans()):
            mj = t.col("mag")
            copy[mj] = repr(float(copy[mj]) + 0.01) if copy[mj].strip() else "-5.0"
        at = draw(st.integers(0, len(t.rows)))
        t.rows.insert(at, copy)
        first = i + (1 if at <= i else 0)
        return t, Fault(kind, frozenset([first, at]), ("twice",))
    if kind == "drop column":
        c = pick(list(REQUIRED_LONG))
        j = t.col(c)
        t.header.pop(j)
        for r in t.rows:
            r.pop(j)
        return t, Fault(kind, None, () if c == "star" else (c,))
    if kind == "rename column":
        c = draw(st.sampled_from(t.header))
        new = draw(st.sampled_from([c + "_x", " " + c + "2", "Unnamed", "mag err"]))
        assume(new.strip() not in t.header)
        t.header[t.col(c)] = new
        return t, Fault(kind, None, ())
    if kind == "extra field":
        row.append(draw(st.sampled_from(["", "x", "0"])))
        return t, Fault(kind, frozenset([i]), ())
    if kind == "missing field":
        row.pop(draw(st.integers(0, len(row) - 1)))
        return t, Fault(kind, frozenset([i]), ())
    if kind == "unbalanced quote":
        c = pick([c for c in ("band", "star", "frame") if c in t.header])
        j = t.col(c)
        row[j] = '"' + row[j]
        t.raw_cells.add((i, j))
        return t, Fault(kind, frozenset([i]), ())
    if kind == "lone CR":
        c = draw(st.sampled_from(t.header))
        j = t.col(c)
        cell = row[j] if len(row[j]) > 1 else row[j] + "x"
        k = draw(st.integers(1, len(cell) - 1))  # inside the cell, so inside the line
        row[j] = cell[:k] + "\r" + cell[k:]
        t.raw_cells.add((i, j))
        return t, Fault(kind, frozenset([i]), ())
    if kind == "exposure disagrees":
        # Another valid time / airmass / exposure time on one row of an exposure, or one left empty.
        def exposure(r: list[str]) -> tuple[str, str]:  # varstar's exposure: (frame, band), or (jd to 1e-6 d, band)
            first = r[t.col("frame")].strip() if "frame" in t.header else f"{float(r[t.col('jd')]):.6f}"
            return first, r[t.col("band")].strip()

        same = frozenset(k for k, r in enumerate(t.rows) if exposure(r) == exposure(row))
        c = pick([c for c in ("jd", "airmass", "exptime") if c in t.header])
        j = t.col(c)
        x = float(row[j])
        if c == "jd" and "frame" not in t.header:
            # Without frame ids, a different time is another exposure: stay within 1e-6 d, so that it gets
            # the same 6-decimal exposure id, but beyond the 1e-7 d tolerance.
            row[j] = repr(x + 3e-7)
        else:
            row[j] = draw(st.sampled_from([repr(x * 1.01), ""] if c != "jd" else [repr(x + 0.001)]))
        assume(len(same) > 1)
        return t, Fault(kind, same, (f"'{c if c != 'exptime' else 'exptime_s'}'",) if row[j] else ())
    # NUL: not a text table at all.
    c = draw(st.sampled_from(t.header))
    row[t.col(c)] += "\x00"
    return t, Fault(kind, None, ("NUL",), file_level=True)


def serialise_fault(t: Table, layout: Layout) -> tuple[bytes, list[int], int]:
    """Like :func:`serialise`, but cells marked raw (a lone quote or carriage return) are written unquoted."""
    raw = t.raw_cells
    if not raw:
        return serialise(t, layout)
    marker = {}
    t2 = t.copy()
    for n, (i, j) in enumerate(sorted(raw)):
        m = f"\u2063RAW{n}\u2063"
        marker[m] = t.rows[i][j]
        t2.rows[i][j] = m
    data, rows, header = serialise(t2, layout)
    text = data.decode("utf-8")
    for m, cell in marker.items():
        text = text.replace(m, cell)
    return text.encode("utf-8"), rows, header


# --------------------------------------------------------------------------- measurement tables: the properties


def check_ingest(capsys, world, data: bytes, *, expect: str, fault: Fault | None = None,
                 row_lines: list[int] | None = None, header_line: int = 1) -> None:
    """Write ``data``, ingest it, and check the contract.

    ``expect`` is "ok" (must succeed), "error" (must fail cleanly, naming ``fault``'s line and words) or
    "either" (the reference reader decides).
    """
    with sandbox(world) as (d, arch):
        src = d / "night.csv"
        src.write_bytes(data)
        ref = reference(data, world.ids, world.bands, src.name)
        before = listing(d)
        rc, out, err = run(capsys, "ingest", arch, src)
        if rc == 0:
            assert err == "", err[:1000]
            assert set(listing(d)) <= set(before) | {arch.name + ".lock"}, "a temporary file was left behind"
            assert expect != "error", f"accepted a faulty table ({fault})"
            assert ref.ok, f"accepted a table the reference reader refuses at lines {sorted(ref.lines())}"
            assert_same_rows(stored_raw(arch), ref.rows)
            return
        msg = assert_clean_failure(rc, out, err, names=str(src), before=before, folder=d, archive=arch)
        named = lines_named(msg, src)
        shown = [data.split(b"\n")[n - 1][:300] for n in named[:1] if 0 < n <= data.count(b"\n") + 1]
        assert expect != "ok", f"refused a valid table: {msg[:500]} {shown}"
        if rc == 4 and expect == "either":  # a reduction failure (ReductionError) cannot be foreseen here
            return
        assert rc == 2, (rc, msg[:300])  # an InputError
        assert not ref.ok, f"refused a table the reference reader accepts: {msg[:500]} {shown}"
        if fault is not None:
            if fault.file_level:
                assert not named, msg[:300]
            else:
                want = {header_line} if fault.rows is None else {row_lines[k] for k in fault.rows}
                assert named and named[0] in want, (fault, sorted(want), msg[:500])
            for w in fault.words:
                assert w in msg, (w, msg[:500])
        else:
            line_level = [p for p in ref.problems if p is not None]
            if named:
                assert named[0] in ref.lines(), (sorted(ref.lines()), msg[:500])
            elif line_level and len(line_level) == len(ref.problems):
                raise AssertionError(f"the message names no line, expected one of {sorted(ref.lines())}: {msg[:300]}")


@settings(max_examples=25, **SETTINGS)
@given(data=st.data())
def test_valid_long_tables_are_stored_exactly(capsys, world, data):
    t = data.draw(benign(world.long, wide=False), label="table")
    layout = data.draw(layouts(len(t.rows)), label="layout")
    raw, _, _ = serialise(t, layout)
    check_ingest(capsys, world, raw, expect="ok")


@settings(max_examples=12, **SETTINGS)
@given(data=st.data())
def test_valid_wide_tables_are_stored_exactly(capsys, world, data):
    t = data.draw(benign(world.wide, wide=True), label="table")
    layout = data.draw(layouts(len(t.rows)), label="layout")
    raw, _, _ = serialise(t, layout)
    check_ingest(capsys, world, raw, expect="ok")


# Every kind of fault, in every column it applies to (hypothesis alone favours the first choices).
LONG_FAULTS = (
    [("bad number", c) for c in ("jd", "mag", "mag_err", "airmass", "exptime", "flag")]
    + [("out of range", c) for c in OUT_OF_RANGE]
    + [("empty cell", c) for c in ("jd", "band", "star", "mag", "mag_err", "frame")]
    + [("drop column", c) for c in REQUIRED_LONG]
    + [("exposure disagrees", c) for c in ("jd", "airmass", "exptime")]
    + [("unbalanced quote", c) for c in ("band", "star", "frame")]
    + [(k, None) for k in ("unknown star", "band without catalogue", "duplicate row", "rename column", "extra field",
                           "missing field", "lone CR", "NUL")]
)


@pytest.mark.parametrize("kind, col", LONG_FAULTS, ids=[f"{k}-{c}" if c else k for k, c in LONG_FAULTS])
@settings(max_examples=5, **SETTINGS)
@given(data=st.data())
def test_one_fault_in_a_long_table_is_named(capsys, world, kind, col, data):
    keep = frozenset([col]) if col else frozenset()
    t = data.draw(benign(world.long, wide=False, keep=keep), label="table")
    t, fault = data.draw(long_fault(t, kind, col), label="fault")
    layout = data.draw(layouts(len(t.rows)), label="layout")
    raw, row_lines, header_line = serialise_fault(t, layout)
    check_ingest(capsys, world, raw, expect="error", fault=fault, row_lines=row_lines, header_line=header_line)


@st.composite
def wide_fault(draw, t: Table, kind: str) -> tuple[Table, Fault]:
    t = t.copy()
    stars = [h for h in t.header if h not in PER_EXPOSURE and not h.endswith("_err")]
    s = draw(st.sampled_from(stars))
    filled = [i for i, r in enumerate(t.rows) if r[t.col(s)].strip()]
    i = draw(st.sampled_from(filled))
    row = t.rows[i]
    if kind == "bad number":
        c = draw(st.sampled_from([s, f"{s}_err", "jd"]))
        row[t.col(c)] = draw(st.sampled_from(BAD_NUMBERS))
        return t, Fault(kind, frozenset([i]), (f"'{c}'",))  # the file's column, not varstar's 'mag'

    if kind == "out of range":
        c, vals = draw(st.sampled_from([(s, OUT_OF_RANGE["mag"]), (f"{s}_err", OUT_OF_RANGE["mag_err"]),
                                        ("jd", OUT_OF_RANGE["jd"])] + ([("exptime", OUT_OF_RANGE["exptime"])] if "exptime" in t.header else [])))
        row[t.col(c)] = draw(st.sampled_from(vals))
        return t, Fault(kind, frozenset([i]), ())
    if kind == "half measurement":
        c = draw(st.sampled_from([s, f"{s}_err"]))
        row[t.col(c)] = ""
        return t, Fault(kind, frozenset([i]), (f"'{c}'",))
    if kind == "drop error column":
        j = t.col(f"{s}_err")
        t.header.pop(j)
        for r in t.rows:
            r.pop(j)
        return t, Fault(kind, None, (s,))
    if kind == "unknown star column":
        t.header[t.col(s)] = "Z" + s
        t.header[t.col(f"{s}_err")] = "Z" + s + "_err"
        return t, Fault(kind, None, ("Z" + s,))
    if kind == "missing band":
        row[t.col("band")] = ""
        return t, Fault(kind, frozenset([i]), ("'band'",))
    if kind == "extra field":
        row.append("0.1")
        return t, Fault(kind, frozenset([i]), ())
    # The same exposure written twice.
    at = draw(st.integers(0, len(t.rows)))
    t.rows.insert(at, list(row))
    first = i + (1 if at <= i else 0)
    return t, Fault(kind, frozenset([first, at]), ("twice",))


WIDE_FAULTS = ["bad number", "out of range", "half measurement", "drop error column", "unknown star column",
               "missing band", "extra field", "duplicate exposure"]


@pytest.mark.parametrize("kind", WIDE_FAULTS)
@settings(max_examples=8, **SETTINGS)
@given(data=st.data())
def test_one_fault_in_a_wide_table_is_named(capsys, world, kind, data):
    t = data.draw(benign(world.wide, wide=True), label="table")
    t, fault = data.draw(wide_fault(t, kind), label="fault")
    layout = data.draw(layouts(len(t.rows)), label="layout")
    raw, row_lines, header_line = serialise(t, layout)
    check_ingest(capsys, world, raw, expect="error", fault=fault, row_lines=row_lines, header_line=header_line)


class Blob(bytes):
    """Bytes whose repr stays short in hypothesis reports (some are a megabyte long)."""

    def __repr__(self) -> str:
        return f"Blob({len(self)} bytes: {bytes(self[:120])!r}...{bytes(self[-120:])!r})"

    def _repr_pretty_(self, p, cycle) -> None:
        p.text(repr(self))


@st.composite
def damaged_bytes(draw, base: bytes, kind: str) -> bytes:
    """Damage a valid file at the byte level; whether it stays valid is for the reference reader to say."""
    n = len(base)
    if kind == "truncate":
        return base[: draw(st.integers(0, n))]
    if kind == "insert":
        at = draw(st.integers(0, n))
        b = draw(st.sampled_from([b",", b"\n", b"\r", b"\x00", b"#", b'"', b"'", b" ", b"0", b"9", b".", b"-", b"+",
                                  b"e", b"a", b"Z", b"\t", b"\x80", b"\xc3", b"\xff", b"\xfe", b"\xef\xbb\xbf",
                                  b"\xc2\x85", b"\xe2\x80\xa8", b"\xc3\xa9"]))
        return base[:at] + b + base[at:]
    if kind == "delete":
        at = draw(st.integers(0, n - 1))
        return base[:at] + base[at + draw(st.integers(1, 12)):]
    lines = base.split(b"\n")
    k = draw(st.integers(0, len(lines) - 1))
    if kind == "giant line":  # ~1 MB: a comment, a cell of digits, a run of commas, or plain junk
        giant = draw(st.sampled_from([b"#" + b"x" * 2**20, b"2461300.6" + b"0" * 2**20 + b",V,V1,-7,0.01",
                                      b"," * 2**20, b"q" * 2**20]))
        return b"\n".join(lines[:k] + [giant] + lines[k:])
    if kind == "replace line":
        return b"\n".join(lines[:k] + [draw(st.binary(max_size=40))] + lines[k + 1:])
    if kind == "CR only":
        return base.replace(b"\r\n", b"\n").replace(b"\n", b"\r")
    if kind == "comment out a row":
        return b"\n".join(lines[:k] + [b"#" + lines[k]] + lines[k + 1:])
    return draw(st.sampled_from([b"", b"\n", b"\xef\xbb\xbf", b"   \n\n", b"# only a comment\n", b"\r\n"]))


DAMAGE = ["truncate", "insert", "delete", "giant line", "replace line", "CR only", "comment out a row", "empty"]


@pytest.mark.parametrize("kind", DAMAGE)
@settings(max_examples=10, **SETTINGS)
@given(data=st.data())
def test_damaged_bytes_either_fail_cleanly_or_store_what_the_file_says(capsys, world, kind, data):
    t = world.long if data.draw(st.booleans(), label="long") else world.wide
    layout = data.draw(layouts(len(t.rows)), label="layout")
    base, _, _ = serialise(t, layout)
    check_ingest(capsys, world, data.draw(damaged_bytes(base, kind).map(Blob), label="bytes"), expect="either")


# --------------------------------------------------------------------------- target descriptions (TOML)


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return {"nan": "nan", "inf": "inf", "-inf": "-inf"}.get(repr(v), repr(v))
    if isinstance(v, str):
        out = []
        for ch in v:
            if ch in '"\\':
                out.append("\\" + ch)
            elif unicodedata.category(ch) == "Cc":
                out.append(f"\\u{ord(ch):04x}")
            else:
                out.append(ch)
        return '"' + "".join(out) + '"'
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def toml_key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else toml_value(k)


def toml_text(doc: dict) -> str:
    """TOML for a target document (our own writer: plain tables, one array of tables)."""
    lines = []
    for name, val in doc.items():
        if isinstance(val, dict):
            lines.append(f"[{toml_key(name)}]")
            lines += [f"{toml_key(k)} = {toml_value(x)}" for k, x in val.items()]
            lines.append("")
        elif isinstance(val, list) and val and all(isinstance(x, dict) for x in val):
            for x in val:
                lines.append(f"[[{toml_key(name)}]]")
                lines += [f"{toml_key(k)} = {toml_value(y)}" for k, y in x.items()]
                lines.append("")
    scalars = [f"{toml_key(k)} = {toml_value(v)}" for k, v in doc.items()
               if not isinstance(v, dict) and not (isinstance(v, list) and v and all(isinstance(x, dict) for x in v))]
    return "\n".join(scalars + lines)


def _num(v) -> float | None:
    """A TOML number (not a boolean) that is a finite double, else None."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return None
    try:
        f = float(v)
    except OverflowError:
        return None
    return f if math.isfinite(f) else None


_SEXA = re.compile(r"([+-]?)(\d+(?:\.\d*)?):(\d+(?:\.\d*)?)(?::(\d+(?:\.\d*)?))?")


def ref_angle(v, kind: str) -> float | None:
    """Degrees, or sexagesimal 'h:m[:s]' (hours for RA) as our generator writes them."""
    if isinstance(v, str):
        m = _SEXA.fullmatch(v.strip())
        if not m:
            f = ref_number(v)
            deg = f if isinstance(f, float) else None
        else:
            parts = [float(p) for p in m.groups()[1:] if p is not None]
            if any(not 0 <= p < 60 for p in parts[1:]):
                return None
            mag = parts[0] + sum(p / 60.0**k for k, p in enumerate(parts[1:], start=1))
            deg = (mag * 15.0 if kind == "ra" else mag) * (-1 if m.group(1) == "-" else 1)
    else:
        deg = _num(v)
    if deg is None:
        return None
    ok = 0.0 <= deg < 360.0 if kind == "ra" else -90.0 <= deg <= 90.0
    return deg if ok else None


def ref_target(doc: dict) -> dict | None:
    """The README's rules for a target description; the values varstar must keep, or None if invalid."""
    tgt, site, stars = doc.get("target"), doc.get("site"), doc.get("stars")
    if not isinstance(tgt, dict) or not isinstance(site, dict) or not isinstance(stars, list) or not stars:
        return None
    name = tgt.get("name")
    # Free text, but one line of printable text: control characters (and line or paragraph separators,
    # the one rule for ids and names, varstar.inputs.id_problem) cannot be stored or shown safely.
    if not isinstance(name, str) or not name.strip() or any(unicodedata.category(c) in ("Cc", "Zl", "Zp") for c in name):
        return None
    ra, dec = ref_angle(tgt.get("ra"), "ra"), ref_angle(tgt.get("dec"), "dec")
    if ra is None or dec is None:
        return None
    for key, hi in (("ebv", 5.0), ("ebv_err", 1.0)):  # optional colour excess and its error
        if key in tgt and (_num(tgt[key]) is None or not 0 <= _num(tgt[key]) <= hi):
            return None
    if "ebv_err" in tgt and "ebv" not in tgt:
        return None
    for key, lo, hi in (("latitude", -90, 90), ("longitude", -180, 360), ("elevation", -500, 9000)):
        x = _num(site.get(key))
        if x is None or not lo <= x <= hi:
            return None
    ids, roles, cats = [], [], []
    for s in stars:
        if not isinstance(s, dict):
            return None
        sid = s.get("id")
        if not isinstance(sid, str) or not sid.strip() or any(unicodedata.category(c) in ("Cc", "Zl", "Zp") for c in sid):
            return None
        if sid.strip() in ids or s.get("role") not in ("target", "comparison", "check"):
            return None
        cat = {}
        for k, x in s.items():
            if k in ("id", "role", "name", "notes"):
                continue
            band = k.removesuffix("_err")
            if not re.fullmatch(r"[A-Za-z][A-Za-z0-9']{0,7}", band):
                return None
            f = _num(x)
            if f is None or (k.endswith("_err") and not 0 <= f < 5) or (not k.endswith("_err") and not -30 < f < 40):
                return None
            if not k.endswith("_err"):
                cat[k] = f
        if any(k.endswith("_err") and k[:-4] not in s for k in s):
            return None
        ids.append(sid.strip())
        roles.append(s["role"])
        cats.append(cat)
    if roles.count("target") != 1 or roles.count("comparison") < 2:
        return None
    if not any(c for c, r in zip(cats, roles) if r == "comparison"):
        return None
    return {"name": name.strip(), "ra": ra, "dec": dec, "ids": ids, "roles": roles}


WRONG_VALUES = st.one_of(
    st.text(alphabet=st.characters(blacklist_categories=("Cs", "Nd", "No", "Nl")), max_size=12),  # never a number st.booleans(), st.integers(), st.integers(min_value=10**20, max_value=10**400),
    st.floats(), st.lists(st.integers(), max_size=2), st.dictionaries(st.sampled_from(["a", "b"]), st.integers(), max_size=1),
)


@st.composite
def sexagesimal(draw) -> str:
    sign = draw(st.sampled_from(["", "+", "-"]))
    parts = [str(draw(st.integers(0, 400)))]
    for _ in range(draw(st.integers(1, 2))):
        parts.append(draw(st.sampled_from([f"{draw(st.integers(0, 75)):02d}", f"{draw(st.floats(0, 70)):.3f}"])))
    return sign + ":".join(parts)


@st.composite
def target_docs(draw, base: dict, kind: str) -> tuple[dict, tuple[str, ...]]:
    """A target document with one change; and words an error about it must contain."""
    doc = {k: ([dict(s) for s in v] if isinstance(v, list) else dict(v) if isinstance(v, dict) else v)
           for k, v in base.items()}
    stars = doc["stars"]
    if kind == "huge integer":  # TOML integers have no size limit here; beyond a float's range
        where, key = draw(st.sampled_from([("target", "ra"), ("target", "dec"), ("target", "ebv"), ("site", "latitude"),
                                           ("site", "elevation"), ("star", "V"), ("star", "B_err")]))
        big = draw(st.integers(10**309, 10**400)) * draw(st.sampled_from([1, -1]))
        if where == "star":
            s = draw(st.sampled_from([s for s in stars if s.get("role") == "comparison"]))
            s[key] = big
            return doc, (s["id"], key)
        doc[where][key] = big
        return doc, (key,)
    if kind == "delete key":
        table, key = draw(st.sampled_from([("target", "name"), ("target", "ra"), ("target", "dec"), ("site", "latitude"),
                                           ("site", "longitude"), ("site", "elevation")]))
        del doc[table][key]
        return doc, (key,)
    if kind == "wrong type":
        table, key = draw(st.sampled_from([("target", "name"), ("target", "ra"), ("target", "dec"), ("site", "latitude"),
                                           ("site", "longitude"), ("site", "elevation"), ("target", "ebv")]))
        doc[table][key] = draw(WRONG_VALUES)
        return doc, (key,)
    if kind == "coordinate":
        key = draw(st.sampled_from(["ra", "dec"]))
        doc["target"][key] = draw(st.one_of(sexagesimal(), st.floats(-400, 400), st.sampled_from([360, 360.0, -0.0, 90, -90.0001])))
        return doc, (key,)
    if kind == "site number":
        key = draw(st.sampled_from(["latitude", "longitude", "elevation"]))
        doc["site"][key] = draw(st.one_of(st.floats(-1e4, 1e4), st.floats(), st.integers(-10**6, 10**6)))
        return doc, (key,)
    if kind == "duplicate id":
        i, j = draw(st.lists(st.integers(0, len(stars) - 1), min_size=2, max_size=2, unique=True))
        stars[j]["id"] = draw(st.sampled_from(["", " ", "  "])) + stars[i]["id"] + draw(st.sampled_from(["", " "]))
        return doc, (stars[i]["id"],)
    if kind == "role":
        i = draw(st.integers(0, len(stars) - 1))
        stars[i]["role"] = draw(st.one_of(st.sampled_from(["target", "comparison", "check", "Target", "comp"]), WRONG_VALUES))
        return doc, ()
    if kind == "catalogue value":
        comps = [s for s in stars if s.get("role") == "comparison"]
        s = draw(st.sampled_from(comps))
        key = draw(st.sampled_from(["V", "B", "V_err", "B_err"]))
        s[key] = draw(st.one_of(WRONG_VALUES, st.floats(-40, 60)))
        return doc, (s["id"],)
    if kind == "orphan error":
        s = draw(st.sampled_from(stars))
        s["R_err"] = 0.01
        return doc, (s["id"], "R_err")
    if kind == "odd key":
        s = draw(st.sampled_from(stars))
        s[draw(st.sampled_from(["V B", "9V", "magnitude_of_V_band", "", "V.err"]))] = 12.0
        return doc, (s["id"],)
    if kind == "name text":
        doc["target"]["name"] = draw(st.text(max_size=40))
        return doc, ("name",)
    if kind == "id text":
        s = draw(st.sampled_from(stars))
        s["id"] = draw(st.text(max_size=12))
        return doc, ()
    if kind == "drop table":
        del doc[draw(st.sampled_from(["target", "site", "stars"]))]
        return doc, ()
    return doc, ()


def check_init(capsys, world, data: bytes, *, expect: dict | None, words: tuple[str, ...] = (), either: bool = False):
    with sandbox(world, with_archive=False) as (d, arch):
        src = d / "target.toml"
        src.write_bytes(data)
        before = listing(d)
        rc, out, err = run(capsys, "init", arch, src)
        if rc == 0:
            assert err == "", err[:500]
            assert expect is not None, f"accepted an invalid target description: {data[:300]!r}"
            got = varstar.open_archive(arch).target
            # Stored exactly as written: the text, and the values it gives.
            assert got.source_text == data.decode("utf-8-sig")
            assert got.name == expect["name"]
            assert got.ra_deg == expect["ra"] and got.dec_deg == expect["dec"]
            assert list(got.star_ids) == expect["ids"]
            assert [s.role for s in got.stars] == expect["roles"]
            return
        msg = assert_clean_failure(rc, out, err, names=str(src), before=before, folder=d, archive=arch)
        assert not arch.exists()
        assert expect is None, f"refused a valid target description: {msg[:500]}"
        if not either:
            for w in words:
                assert w.strip() in msg, (w, msg[:500])


TARGET_CHANGES = ["none", "delete key", "wrong type", "coordinate", "site number", "duplicate id", "role",
                  "catalogue value", "orphan error", "odd key", "name text", "id text", "drop table", "huge integer"]


@pytest.mark.parametrize("kind", TARGET_CHANGES)
@settings(max_examples=12, **SETTINGS)
@given(data=st.data())
def test_target_descriptions_either_fail_naming_the_key_or_are_kept_exactly(capsys, world, kind, data):
    base = tomllib.loads(world.toml_text)
    doc, words = data.draw(target_docs(base, kind), label="doc")
    text = toml_text(doc)
    expect = ref_target(doc)
    check_init(capsys, world, text.encode("utf-8"), expect=expect, words=words if expect is None else ())


@st.composite
def damaged_toml(draw, base: bytes, kind: str) -> bytes:
    if kind == "truncate":
        return base[: draw(st.integers(0, len(base)))]
    if kind == "high byte":
        at = draw(st.integers(0, len(base)))
        return base[:at] + draw(st.sampled_from([b"\x80", b"\xff", b"\xc3", b"\xfe"])) + base[at:]
    if kind == "BOM":
        return b"\xef\xbb\xbf" + base
    if kind == "CRLF":
        return base.replace(b"\n", b"\r\n")
    if kind == "giant comment":
        return b"# " + b"x" * 2**20 + b"\n" + base
    if kind == "giant integer":  # more digits than Python converts by default (4300)
        return re.sub(rb"\nra = [^\n]*", b"\nra = 1" + b"0" * 5000, base, count=1)
    if kind == "latin-1 name":
        return base.replace(b'name = "', 'name = "Sch\u00f6n '.encode("latin-1"), 1)
    return draw(st.sampled_from([b"", b"\n", b"# nothing\n", b"\xef\xbb\xbf"]))


TOML_DAMAGE = ["truncate", "high byte", "BOM", "CRLF", "giant comment", "empty", "latin-1 name", "giant integer"]


@pytest.mark.parametrize("kind", TOML_DAMAGE)
@settings(max_examples=6, **SETTINGS)
@given(data=st.data())
def test_damaged_target_files_either_fail_cleanly_or_are_kept_exactly(capsys, world, kind, data):
    raw = data.draw(damaged_toml(world.toml_text.encode("utf-8"), kind).map(Blob), label="bytes")
    try:
        doc = tomllib.loads(raw.decode("utf-8-sig"))
    except (UnicodeDecodeError, ValueError):  # TOMLDecodeError is a ValueError; so is an integer of 5000 digits
        doc = None
    expect = ref_target(doc) if doc is not None else None
    check_init(capsys, world, raw, expect=expect, either=True)


# --------------------------------------------------------------------------- safe file names


RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(10)), *(f"LPT{i}" for i in range(10))}

name_texts = st.one_of(
    st.text(max_size=100),
    st.text(alphabet=st.sampled_from(list("./\\:*?\"<>|\x00\x01\x1f\x7f \t\n\r~$-_aZ0") + ["\u00b9", "\u2024", "\uff0e", "\u2215"]), max_size=30),
    st.builds(
        lambda dev, tail: dev + tail,
        st.sampled_from(sorted(RESERVED) + ["con", "Nul", "com\u00b9", "LPT\u00b3", "CONIN$", "conout$"]),
        st.sampled_from(["", ".", ".txt", ".tar.gz", " ", "  .h5", ":", "..", "\x00", "/x", "_1", "1"]),
    ),
)


@settings(max_examples=600, **SETTINGS)
@given(text=name_texts, default=st.sampled_from(["target", "archive"]))
def test_safe_filename_is_always_safe(text, default):
    out = safe_filename(text, default=default)
    assert out and len(out) <= 255
    assert "/" not in out and "\\" not in out and ".." not in out, out
    assert not any(unicodedata.category(c) in ("Cc", "Cf", "Zl", "Zp") for c in out), repr(out)
    assert not set(out) & set('<>:"|?*'), out  # characters Windows refuses in names
    assert out == out.strip(" .") and not out.startswith(("-", ".")), out  # no hidden name, no option look-alike
    assert out.split(".")[0].upper() not in RESERVED, out
    assert out.isascii() and out.isprintable(), repr(out)
    assert safe_filename(out, default=default) == out  # a safe name stays as it is


# --------------------------------------------------------------------------- spreadsheet-safe CSV


FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

cell_texts = st.one_of(
    st.text(max_size=20),
    st.builds(lambda a, b: a + b, st.sampled_from(list(FORMULA_START) + ["'", '"', " =", "\n=", ","]), st.text(max_size=10)),
)


@settings(max_examples=200, **SETTINGS)
@given(
    texts=st.lists(cell_texts, min_size=1, max_size=8),
    floats=st.lists(st.floats(allow_infinity=False, allow_nan=True, width=64), min_size=8, max_size=8),
    ints=st.lists(st.integers(-(2**40), 2**40), min_size=8, max_size=8),
)
def test_write_csv_defuses_formulas_and_keeps_numbers(world, texts, floats, ints):
    n = len(texts)
    df = pd.DataFrame({
        "star": texts,
        "note": pd.array([t[::-1] for t in texts], dtype="string"),
        "band": pd.Categorical([("=" if k % 2 else "") + "V" for k in range(n)]),
        "mag": floats[:n],
        "quality": ints[:n],
    })
    d = Path(tempfile.mkdtemp(dir=world.folder))
    try:
        path = write_csv(df, d / "obs.csv")
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.reader(fh))
    finally:
        shutil.rmtree(d, ignore_errors=True)
    assert rows[0] == ["star", "note", "band", "mag", "quality"]
    body = rows[1:]
    assert len(body) == n
    for k, row in enumerate(body):
        for col, cell in zip(("star", "note", "band"), row[:3]):
            original = str(df[col].iloc[k])
            # Text never starts a formula: either unchanged and harmless, or the original behind one quote.
            assert not cell.startswith(FORMULA_START), (col, cell)
            assert cell == original or (cell == "'" + original and original.startswith(FORMULA_START)), (col, cell, original)
        mag, quality = row[3], row[4]
        x = floats[k]
        if math.isnan(x):
            assert mag == ""
        else:
            # A number, written to 10 significant digits, negative ones with their plain minus sign.
            assert float(mag) == float(f"{x:.10g}"), (mag, x)
            assert not mag.startswith("'")
        assert int(quality) == ints[k] and re.fullmatch(r"-?\d+", quality)
