"""Integrity of an archive: per-night checksums, verification, schema upgrades.

* :func:`night_digests` computes the SHA-256 checksum of one night's rows in
  each table listed in :data:`.layout.DIGEST_COLUMNS`; ingest stores them in
  ``/digests``.
* :func:`verify` re-reads everything and reports in words what is wrong: the
  schema, the tables' shapes and types, every value that HDF5 cannot read
  (by column, rows and nights), references between tables, that band and star
  codes lead to the names each night's report recorded, each night's
  checksums, the consistency of the reduced points with the raw measurements
  (``mag = raw mag - zero point``, the same time, band and night as their
  exposure), the record of free space, and journals kept aside as damaged.
* :func:`upgrade` brings an archive of an older schema to the current one,
  only when asked, after writing a backup copy beside it.
* Damage: :func:`is_hdf5_failure` tells the HDF5 library failing to read the
  file (a damaged archive) from a bug of ours, and :func:`unreadable` turns it
  into one :class:`~varstar.errors.ArchiveError` naming what could not be read;
  :func:`structure_problems` and :func:`free_space_problem` are the checks a
  writer makes before it changes anything (:mod:`.transaction`), and ``verify``
  makes them too.
"""

from __future__ import annotations

import contextlib
import ctypes
import hashlib
import json
import os
import shutil
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from types import TracebackType
from typing import Any

import h5py
import numpy as np

from ..errors import ArchiveError
from . import tables
from .layout import (
    ADDED_IN,
    CODES,
    DIGEST_COLUMNS,
    RETYPED_IN,
    FORMAT_NAME,
    ROW_REFERENCES,
    SCHEMA_VERSION,
    STR,
    TABLES,
    code_capacity,
)

#: Largest difference allowed between a stored point and its recomputation from the
#: raw measurement and zero point (both are float64 sums of two numbers; the bound
#: leaves room for rounding only).
CONSISTENCY_TOL_MAG = 1e-9


def _column_bytes(values: np.ndarray, code: str) -> bytes:
    if code == STR:
        return "\x1f".join(str(v) for v in values).encode("utf-8")
    if code.startswith("S"):  # fixed-length ASCII (values may come as str or bytes)
        return np.asarray([v.encode("ascii") if isinstance(v, str) else bytes(v) for v in values], dtype=code).tobytes()
    # little-endian explicitly, so a checksum does not depend on the machine
    return np.ascontiguousarray(np.asarray(values).astype(np.dtype(code).newbyteorder("<"))).tobytes()


def digest_of(table: str, columns: dict[str, np.ndarray], first_row: dict[str, int]) -> str:
    """SHA-256 of one night's rows of ``table``.

    ``columns`` holds the night's values of every column in
    ``DIGEST_COLUMNS[table]``; ``first_row`` the night's first row number in each
    referenced table (``exposures``, ``sources``), subtracted from row-number columns.
    """
    h = hashlib.sha256()
    for col in DIGEST_COLUMNS[table]:
        vals = np.asarray(columns[col])
        if col in ROW_REFERENCES:
            vals = vals.astype(np.int64) - int(first_row.get(ROW_REFERENCES[col], 0))
            code = "i8"
        else:
            code = TABLES[table][col]
        data = _column_bytes(vals, code)
        h.update(f"{col}:{vals.size}:{len(data)}:".encode())
        h.update(data)
    return h.hexdigest()


def _first_rows(nights_of: dict[str, np.ndarray], night: int) -> dict[str, int]:
    out = {}
    for ref in set(ROW_REFERENCES.values()):
        idx = np.flatnonzero(nights_of[ref] == night)
        out[ref] = int(idx[0]) if idx.size else 0
    return out


def night_digests(f: h5py.File, nights: list[int]) -> dict[str, list]:
    """Rows for ``/digests``: one checksum per night per table (reads only the hashed columns)."""
    cols = {t: tables.read(f, t, DIGEST_COLUMNS[t] if "night" in DIGEST_COLUMNS[t] else ("night", *DIGEST_COLUMNS[t]))
            for t in DIGEST_COLUMNS}
    nights_of = {t: cols[t]["night"] for t in cols}
    out: dict[str, list] = {"night": [], "table": [], "n_rows": [], "sha256": []}
    for n in nights:
        first = _first_rows(nights_of, n)
        for t, c in cols.items():
            m = nights_of[t] == n
            out["night"].append(n)
            out["table"].append(t)
            out["n_rows"].append(int(m.sum()))
            out["sha256"].append(digest_of(t, {k: v[m] for k, v in c.items()}, first))
    return out


def night_digests_of_range(f: h5py.File, night: int, ranges: dict[str, tuple[int, int]]) -> dict[str, list]:
    """Like :func:`night_digests` for a night just appended: reads only its row ranges.

    ``ranges`` gives, per table, the night's rows ``[start, stop)`` (ingest appends a
    night's rows together, so they are contiguous).  Cost independent of the archive's size.
    """
    out: dict[str, list] = {"night": [], "table": [], "n_rows": [], "sha256": []}
    first = {ref: ranges[ref][0] for ref in set(ROW_REFERENCES.values())}
    for t in DIGEST_COLUMNS:
        a, b = ranges[t]
        c = {col: (f[t][col].asstr()[a:b] if TABLES[t][col] == STR else f[t][col][a:b]) for col in DIGEST_COLUMNS[t]}  # noqa: E501
        out["night"].append(night)
        out["table"].append(t)
        out["n_rows"].append(b - a)
        out["sha256"].append(digest_of(t, c, first))
    return out


# --------------------------------------------------------------------------- damage
#: Exception types h5py raises when the HDF5 library cannot read what the file holds
#: (it maps HDF5's error classes onto built-in exceptions).  h5py's ValueError and
#: TypeError mean a wrong request (a name that exists, a type that does not convert):
#: bugs of ours, not damage, so they keep their traceback.
_HDF5_ERROR_TYPES = (OSError, KeyError, RuntimeError)


def _frames(tb: TracebackType | None):
    while tb is not None:
        yield tb
        tb = tb.tb_next


def _in_h5py(filename: str) -> bool:
    return "h5py" in Path(filename).parts


def is_hdf5_failure(exc: BaseException) -> bool:
    """Whether ``exc`` is the HDF5 library (through h5py) failing on the file's bytes.

    True for :class:`.journal.DamagedFile` (bytes the overlay refused to hand
    to HDF5), and when it was raised inside h5py's compiled layer, which is where the
    library's errors surface (a bad checksum, a bad heap pointer, a gzip chunk
    that does not inflate, an object header that cannot be opened), and for text
    that is not valid UTF-8 (varstar only ever writes valid UTF-8).  Errors raised
    by h5py's Python layer for wrong arguments, and every error of our own code,
    are bugs and keep their traceback.
    """
    from .journal import DamagedFile

    if isinstance(exc, DamagedFile):
        return True
    frames = list(_frames(exc.__traceback__))
    if not frames:
        return False
    if isinstance(exc, UnicodeDecodeError):
        return any(_in_h5py(fr.tb_frame.f_code.co_filename) for fr in frames)
    if not isinstance(exc, _HDF5_ERROR_TYPES):
        return False
    inner = frames[-1].tb_frame.f_code.co_filename
    return inner.endswith(".pyx") and _in_h5py(inner)


def _h5_name(obj: Any, local: dict[str, Any]) -> str | None:
    """The HDF5 path of the object an h5py frame was working on, if it can be told."""
    try:
        if isinstance(obj, h5py.Dataset):
            return obj.name
        if isinstance(obj, h5py.Group):
            key = local.get("name")
            base = obj.name or "/"
            if isinstance(key, bytes):
                key = key.decode()
            return f"{base.rstrip('/')}/{key}" if isinstance(key, str) else base
        if isinstance(obj, h5py.AttributeManager):
            key = local.get("name")
            owner = h5py.h5i.get_name(obj._id).decode()
            return f"attribute '{key}' of {owner}" if isinstance(key, str) else f"the attributes of {owner}"
        dset = getattr(obj, "_dset", None)  # h5py's AsStrWrapper and friends
        if isinstance(dset, h5py.Dataset):
            return dset.name
    except Exception:  # noqa: BLE001 - naming is best effort on a damaged file
        return None
    return None


def failed_object(exc: BaseException) -> str | None:
    """The HDF5 object (``/points/mag``, an attribute) whose reading raised ``exc``, if it can be told."""
    found = None
    for fr in _frames(exc.__traceback__):
        local = fr.tb_frame.f_locals
        name = _h5_name(local.get("self"), local)
        if name:
            found = name  # the innermost one wins
    return found


def hdf5_detail(exc: BaseException) -> str:
    """HDF5's own words for a failure, one line."""
    if isinstance(exc, UnicodeDecodeError):
        return f"text that is not valid UTF-8: {exc.reason} at byte {exc.start}"
    if isinstance(exc, OSError) and exc.strerror and exc.errno is not None:
        return exc.strerror
    text = str(exc.args[0]) if isinstance(exc, KeyError) and exc.args else str(exc)
    return " ".join(text.split()) or type(exc).__name__


def unreadable(path: str | Path, exc: BaseException, *, writing: bool) -> ArchiveError:
    """The one message for an archive HDF5 cannot read: what, HDF5's words, what to do."""
    what = failed_object(exc)
    done = "nothing was written" if writing else "nothing was changed"
    return ArchiveError(
        f"{path}: could not read {what or 'the archive'} (HDF5: {hdf5_detail(exc)}); the archive file is damaged, "
        f"{done}. Run 'varstar verify {path}' to see what is affected, and put back a copy of the archive."
    )


def expected_tables(version: int) -> dict[str, dict[str, str]]:
    """The tables and column types an archive of schema ``version`` has."""
    expected = dict(TABLES)
    for v in range(version + 1, SCHEMA_VERSION + 1):
        for t in ADDED_IN.get(v, ()):
            expected.pop(t, None)
        for t, col in RETYPED_IN.get(v, ()):
            expected[t] = dict(expected[t], **{col: STR})
    return expected


def structure_problems(f: h5py.File, version: int,
                       datasets: dict[tuple[str, str], h5py.Dataset] | None = None) -> tuple[list[str], dict[str, int]]:
    """Every table and column of the layout: present, readable description, 1-D, right type, equal lengths.

    Opens every column's object header (HDF5 checks their checksums) but reads no
    data, so it costs the same for any size of archive.  Returns the problems
    in words and the tables' row counts; ``datasets``, if given, receives the
    opened columns by ``(table, column)``.
    """
    problems: list[str] = []
    lengths: dict[str, int] = {}
    for t, cols in expected_tables(version).items():
        try:
            g = f[t] if tables.has_table(f, t) else None
            names = set(g.keys()) if g is not None else set()
        except Exception as exc:  # noqa: BLE001
            if not is_hdf5_failure(exc):
                raise
            problems.append(f"table /{t} cannot be read (HDF5: {hdf5_detail(exc)})")
            continue
        if g is None:
            problems.append(f"table /{t} is missing")
            continue
        ns = set()
        failed: dict[str, str] = {}
        for col, code in cols.items():
            if col not in names:
                problems.append(f"table /{t} has no column '{col}'")
                continue
            try:
                ds = g[col]
                dtype, shape = ds.dtype, ds.shape
                if datasets is not None:
                    datasets[(t, col)] = ds
            except Exception as exc:  # noqa: BLE001
                if not is_hdf5_failure(exc):
                    raise
                failed[col] = hdf5_detail(exc)
                continue
            ok_type = h5py.check_string_dtype(dtype) is not None if code == STR else dtype == np.dtype(code)
            if not ok_type or len(shape) != 1:
                problems.append(f"column /{t}/{col} has type {dtype} and shape {shape}, expected 1-D {code}")
            ns.add(shape[0] if len(shape) else -1)
        if failed and len(failed) == len(cols) and len(set(failed.values())) == 1:
            why = next(iter(failed.values()))
            problems.append(f"table /{t}: none of its {len(cols)} columns can be opened (HDF5: {why})")
        else:
            problems.extend(f"column /{t}/{col} cannot be read (HDF5: {why})" for col, why in failed.items())
        if len(ns) > 1:
            problems.append(f"the columns of /{t} have different lengths {sorted(ns)}: a row is half-written")
        elif ns:
            lengths[t] = ns.pop()
    return problems, lengths


def capacity_problems(lengths: dict[str, int]) -> list[str]:
    """Name tables holding more names than their codes can address (earlier versions wrapped such codes)."""
    out = []
    for code_col, (lookup, _name) in CODES.items():
        cap = code_capacity(code_col)
        if lengths.get(lookup, 0) > cap:
            out.append(
                f"/{lookup} holds {lengths[lookup]:,} names but {code_col} codes can tell only {cap:,} apart: the rows "
                f"of the last {lengths[lookup] - cap:,} were stored under the codes of others (written by a varstar "
                f"that did not refuse them); take the misfiled nights out with 'varstar remove-night'"
            )
    return out


def _free_sections_function() -> Callable[..., int] | None:
    """HDF5's ``H5Fget_free_sections`` from the very library h5py uses, or None where it cannot be found.

    h5py does not wrap it; the library is found among the process's loaded
    shared objects (Linux), and used only if its version is h5py's.
    """
    if not sys.platform.startswith("linux"):
        return None
    try:
        maps = Path("/proc/self/maps").read_text()
    except OSError:
        return None
    libs = {line.split()[-1] for line in maps.splitlines() if "/" in line and ".so" in line}
    libs = {p for p in libs if Path(p).name.startswith("libhdf5") and "_hl" not in Path(p).name}  # not the high-level one
    if len(libs) != 1:
        return None
    try:
        lib = ctypes.CDLL(libs.pop())
        v = [ctypes.c_uint(), ctypes.c_uint(), ctypes.c_uint()]
        if lib.H5get_libversion(*(ctypes.byref(x) for x in v)) < 0:
            return None
        if tuple(x.value for x in v) != tuple(h5py.version.hdf5_version_tuple[:3]):
            return None
        fn = lib.H5Fget_free_sections
    except (OSError, AttributeError):
        return None
    fn.restype = ctypes.c_ssize_t
    fn.argtypes = [ctypes.c_int64, ctypes.c_int, ctypes.c_size_t, ctypes.c_void_p]
    return fn


def free_space_problem(fd: int) -> str | None:
    """Whether the archive's record of its free space can be read; the problem in words, or None.

    New archives keep that record in the file (:data:`.transaction.CREATE_OPTIONS`)
    and only a writer reads all of it: HDF5 loads it when it allocates space and
    rewrites it when it closes.  A damaged record makes HDF5 fail at that point,
    or crash while closing, so a writer checks it first, here, through a
    separate read-only handle: reading every free-space section makes HDF5 check
    their checksums.  The handle is closed whatever happens (HDF5 may refuse to
    close a file it found damaged; that error is ignored, it changes nothing).
    """
    from .journal import PageOverlay

    fn = _free_sections_function()
    try:
        f = h5py.File(PageOverlay(fd), "r")
    except Exception as exc:  # noqa: BLE001
        if is_hdf5_failure(exc):
            return f"the archive cannot be opened (HDF5: {hdf5_detail(exc)})"
        raise
    problem = None
    try:
        f.id.get_freespace()
        if fn is not None:
            n = fn(f.id.id, 0, 0, None)
            buf = (ctypes.c_uint64 * (2 * max(n, 1)))()
            if n < 0 or fn(f.id.id, 0, max(n, 1), buf) < 0:  # (HDF5 refuses a buffer of 0 sections)
                problem = "HDF5 cannot read its sections"
    except Exception as exc:  # noqa: BLE001
        if not is_hdf5_failure(exc):
            raise
        problem = f"HDF5: {hdf5_detail(exc)}"
    finally:
        with contextlib.suppress(Exception):
            f.close()
    if problem is None:
        return None
    return (f"the archive's record of its free space is damaged ({problem}): its data may still be read, "
            f"but it cannot be changed safely")


# --------------------------------------------------------------------------- verify


@dataclass(frozen=True)
class VerifyReport:
    """What :func:`verify` found.  ``ok`` is True when ``problems`` is empty."""

    path: str
    schema_version: int
    problems: tuple[str, ...]
    notes: tuple[str, ...]
    checked: dict[str, Any] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.problems

    def to_dict(self) -> dict[str, Any]:
        return {"archive": self.path, "ok": self.ok, "schema_version": self.schema_version,
                "problems": list(self.problems), "notes": list(self.notes), "checked": dict(self.checked)}


def verify(path: str | Path) -> VerifyReport:
    """Check an archive thoroughly and describe every problem in words (never raises for damage).

    In order: journals of earlier changes that were found damaged; the format
    mark and schema; every table and column (present, type, equal lengths); that
    every value of every column can be read (naming the rows, and their nights,
    that cannot); the stored target description against ``/stars``; row numbers
    and codes inside their tables and each night's counts; that the band and star
    codes of each night decode to the names its reduction report recorded; the
    points against their raw measurements; each night's checksums; and the
    archive's record of its free space (which only writers read).
    """
    from .transaction import damaged_journals, open_read

    from .journal import DAMAGED, inspect_journal, journal_path

    path = Path(path)
    problems: list[str] = []
    notes: list[str] = []
    checked: dict[str, Any] = {}
    try:
        f = open_read(path, damaged_ok=True)  # (sets a damaged journal aside when it can)
    except ArchiveError as exc:
        f = None
        opened = str(exc)
    kept = damaged_journals(path)
    if inspect_journal(journal_path(path)).state == DAMAGED:  # another process held the lock: left in place
        kept.append(journal_path(path))
    for k in kept:
        problems.append(
            f"{k.name}: the journal of an earlier change, found damaged; varstar refuses to use this archive while "
            f"it is there. If every other check passes, the archive is consistent: delete {k.name} (and make that "
            f"change again if it is missing)"
        )
    if f is None:
        return VerifyReport(str(path), -1, (*problems, opened), ())
    version = -1
    try:
        with f:
            version = _verify_open(f, path, problems, notes, checked)
    except ArchiveError as exc:  # what the reading file's own translation made of an HDF5 failure
        problems.append(str(exc))
    if version >= 1:
        fd = os.open(path, os.O_RDONLY)
        try:
            fs = free_space_problem(fd)
        finally:
            os.close(fd)
        if fs:
            problems.append(fs)
    return VerifyReport(str(path), version, tuple(problems), tuple(notes), checked)


def _verify_open(f: h5py.File, path: Path, problems: list[str], notes: list[str], checked: dict[str, Any]) -> int:
    """The checks of :func:`verify` on the open file; returns the schema version (-1 if unknown)."""
    try:
        fmt = f.attrs.get("format")
        version = int(f.attrs.get("schema_version", -1))
    except Exception as exc:  # noqa: BLE001
        if not is_hdf5_failure(exc):
            raise
        problems.append(f"the root attributes cannot be read (HDF5: {hdf5_detail(exc)})")
        return -1
    if fmt != FORMAT_NAME:
        problems.append(f"not a varstar archive (no '{FORMAT_NAME}' format mark)")
        return -1
    if version > SCHEMA_VERSION:
        problems.append(f"schema {version} is newer than this varstar understands ({SCHEMA_VERSION}); upgrade varstar")
        return version
    if version < 1:
        problems.append("no valid schema version")
        return version
    if version < SCHEMA_VERSION:
        notes.append(f"schema {version} is older than this varstar's {SCHEMA_VERSION}: it can be read, but run "
                     f"'varstar upgrade {path.name}' (it keeps a backup) before changing it; checksums start then")
    target_toml = _target_text(f, problems)
    datasets: dict[tuple[str, str], h5py.Dataset] = {}
    found, lengths = structure_problems(f, version, datasets)
    problems.extend(found)
    checked["rows"] = lengths
    if found:
        return version
    problems.extend(capacity_problems(lengths))
    unread = _unreadable_values(f, version, datasets)
    problems.extend(unread)
    if unread:
        return version
    if target_toml is not None:
        _check_stars_against_target(f, target_toml, path, problems)
    try:
        before = len(problems)
        _check_references(f, problems, checked)
        if len(problems) == before:  # row numbers and codes are inside their tables: they can be decoded
            _check_codes_against_reports(f, problems, notes, checked)
            _check_points_against_raw(f, problems)
        if version == SCHEMA_VERSION:
            _check_digests(f, problems, checked)
    except Exception as exc:  # noqa: BLE001 - every value was read once; a second read may still fail
        if not is_hdf5_failure(exc):
            raise
        problems.append(f"{failed_object(exc) or 'the archive'} cannot be read (HDF5: {hdf5_detail(exc)})")
    return version


def _target_text(f: h5py.File, problems: list[str]) -> str | None:
    try:
        if "target" not in f or "toml" not in f["target"].attrs:
            problems.append("the target description (/target) is missing")
            return None
        return str(f["target"].attrs["toml"])
    except Exception as exc:  # noqa: BLE001
        if not is_hdf5_failure(exc):
            raise
        problems.append(f"the target description (/target) cannot be read (HDF5: {hdf5_detail(exc)})")
        return None


def _read_rows(ds: h5py.Dataset, code: str, a: int, b: int) -> None:
    if code == STR:
        ds.asstr()[a:b]
    else:
        ds[a:b]


def _unreadable_values(f: h5py.File, version: int, datasets: dict[tuple[str, str], h5py.Dataset]) -> list[str]:
    """Read every value of every column once; the rows that cannot be read, per column, in words.

    Reads blocks of 64 chunks, and a block that fails chunk by chunk, so the rows
    named are those of the damaged chunks; their nights are named when the
    table's ``night`` column can be read there.
    """
    problems: list[str] = []
    labels: dict[int, str] | None
    try:
        labels = _labels(f)
    except Exception as exc:  # noqa: BLE001
        if not is_hdf5_failure(exc):
            raise
        labels = None
    for t, cols in expected_tables(version).items():
        bad_rows: dict[str, list[tuple[int, int, str]]] = {}
        for col, code in cols.items():
            ds = datasets[(t, col)]
            n = ds.shape[0]
            chunk = ds.chunks[0] if ds.chunks else max(n, 1)
            block = chunk * 64
            for a in range(0, n, block):
                b = min(n, a + block)
                try:
                    _read_rows(ds, code, a, b)
                    continue
                except Exception as exc:  # noqa: BLE001
                    if not is_hdf5_failure(exc):
                        raise
                for c in range(a, b, chunk):
                    d = min(b, c + chunk)
                    try:
                        _read_rows(ds, code, c, d)
                    except Exception as exc:  # noqa: BLE001
                        if not is_hdf5_failure(exc):
                            raise
                        bad_rows.setdefault(col, []).append((c, d, hdf5_detail(exc)))
        for col, spans in bad_rows.items():
            rows = sum(d - c for c, d, _ in spans)
            where = ", ".join(f"{c}-{d - 1}" for c, d, _ in spans[:4]) + (" ..." if len(spans) > 4 else "")
            nights = _nights_of_rows(f, t, spans, labels) if "night" in cols and "night" not in bad_rows else ""
            problems.append(f"/{t}/{col}: {rows:,} row(s) cannot be read (rows {where}{nights}; HDF5: {spans[0][2]})")
    return problems


def _nights_of_rows(f: h5py.File, t: str, spans: list[tuple[int, int, str]], labels: dict[int, str] | None) -> str:
    ids: set[int] = set()
    for c, d, _ in spans:
        ids.update(np.unique(f[t]["night"][c:d]).tolist())
    if not ids:
        return ""
    names = sorted((labels or {}).get(i, f"number {i}") for i in ids)
    return f"; night{'s' if len(names) > 1 else ''} {', '.join(names[:5])}" + (" ..." if len(names) > 5 else "")


def _check_stars_against_target(f: h5py.File, toml: str, path: Path, problems: list[str]) -> None:
    """``/stars`` must be the target description's stars, in its order: star codes are their row numbers."""
    from ..errors import VarstarError
    from ..target import parse_target

    try:
        target = parse_target(toml, source=f"{path}:/target")
    except VarstarError as exc:
        problems.append(f"the target description stored in /target cannot be read: {exc}")
        return
    stored = tables.read(f, "stars", ["id", "role"])
    ids, roles = list(stored["id"]), list(stored["role"])
    want_ids, want_roles = [s.id for s in target.stars], [s.role for s in target.stars]
    if ids != want_ids or roles != want_roles:
        k = next((i for i, (a, b) in enumerate(zip(zip(ids, roles), zip(want_ids, want_roles))) if a != b),
                 min(len(ids), len(want_ids)))
        got = f"'{ids[k]}' ({roles[k]})" if k < len(ids) else "nothing"
        want = f"'{want_ids[k]}' ({want_roles[k]})" if k < len(want_ids) else "nothing"
        problems.append(
            f"/stars does not list the stars of the stored target description ({len(ids):,} rows for "
            f"{len(want_ids):,} stars; row {k} holds {got} where the description has {want}): star codes do not "
            f"lead to the stars they were stored for"
        )
    dupes = sorted({i for i in ids if ids.count(i) > 1}) if len(set(ids)) != len(ids) else []
    if dupes:
        problems.append(f"/stars lists star(s) {dupes[:5]} more than once")
    bands = list(tables.read(f, "bands", ["name"])["name"])
    if len(set(bands)) != len(bands) or "" in bands:
        problems.append(f"/bands holds an empty or repeated band name ({bands[:10]})")


def _check_codes_against_reports(f: h5py.File, problems: list[str], notes: list[str], checked: dict[str, Any]) -> None:
    """Each night's band and star codes must decode to the names its reduction report recorded at ingest.

    The report (``/nights/report``) names bands and stars in words, so it is a
    record of the names independent of the codes: per night and band, the
    number of exposures, the night's calibration error in that band (a value
    that tells bands apart even when their counts agree), the target's and each
    check star's good points, and the comparison stars judged must all be found
    again through ``/bands`` and ``/stars``.
    """
    nights = tables.read(f, "nights", ["night", "label", "report"])
    bands = np.asarray(tables.read(f, "bands", ["name"])["name"], dtype=object)
    stars = tables.read(f, "stars", ["id", "role"])
    ids = np.asarray(stars["id"], dtype=object)
    roles = list(stars["role"])
    nb, ns = code_capacity("band"), code_capacity("star")
    e = tables.read(f, "exposures", ["night", "band", "calibration_err"])
    keys, first, counts = np.unique(e["night"].astype(np.int64) * nb + e["band"], return_index=True, return_counts=True)
    exp_counts: dict[int, dict[str, int]] = {}
    exp_cal: dict[tuple[int, str], float] = {}
    for k, i, m in zip(keys.tolist(), first.tolist(), counts.tolist()):
        exp_counts.setdefault(k // nb, {})[str(bands[k % nb])] = m
        exp_cal[(k // nb, str(bands[k % nb]))] = float(e["calibration_err"][i])
    p = tables.read(f, "points", ["night", "band", "star", "quality"])
    good = p["quality"] == 0
    keys, counts = np.unique((p["night"][good].astype(np.int64) * nb + p["band"][good]) * ns + p["star"][good],
                             return_counts=True)
    pt_counts = {(k // ns // nb, str(bands[k // ns % nb]), str(ids[k % ns])): m
                 for k, m in zip(keys.tolist(), counts.tolist())}
    c = tables.read(f, "comparisons", ["night", "band", "star", "status"])
    judged = c["status"] != "not_comparison"
    keys = np.unique((c["night"][judged].astype(np.int64) * nb + c["band"][judged]) * ns + c["star"][judged])
    comp_sets: dict[tuple[int, str], list[str]] = {}
    for k in keys.tolist():
        comp_sets.setdefault((k // ns // nb, str(bands[k // ns % nb])), []).append(str(ids[k % ns]))
    comp_sets = {k: sorted(v) for k, v in comp_sets.items()}
    target_id = ids[roles.index("target")] if "target" in roles else None
    n_checked = 0
    unreported = []
    for n, lab, rep_text in zip(nights["night"].tolist(), nights["label"], nights["report"]):
        try:
            rep = json.loads(rep_text)
            rep_bands = rep["bands"]
            want_exp = {str(b): int(v["n_exposures"]) for b, v in rep_bands.items()}
        except (ValueError, KeyError, TypeError, AttributeError):
            unreported.append(str(lab))
            continue
        got_exp = exp_counts.get(n, {})
        if got_exp != want_exp:
            problems.append(f"night {lab}: its exposures decode to bands {_counts(got_exp)} where its reduction report "
                            f"has {_counts(want_exp)}: band codes do not lead to the names they were stored for")
            continue
        wrong = []
        for b, v in rep_bands.items():
            cal = v.get("calibration_err")
            if isinstance(cal, (int, float)) and not _same_float(exp_cal.get((n, b), float("nan")), float(cal)):
                wrong.append(f"band {b}: its exposures have a calibration error of {exp_cal.get((n, b))} where the "
                             f"report has {cal}")
            want_pts = {}
            if target_id is not None and isinstance(v.get("target"), dict) and "n" in v["target"]:
                want_pts[target_id] = int(v["target"]["n"])
            for sid, st in (v.get("check_stars") or {}).items():
                if isinstance(st, dict) and "n" in st:
                    want_pts[sid] = int(st["n"])
            for sid, k in want_pts.items():
                got = int(pt_counts.get((n, b, sid), 0))
                if got != k:
                    wrong.append(f"{sid} in {b}: {got} good points where the report has {k}")
            want_comp = sorted({str(x) for x in v.get("comparisons_kept", [])}
                               | {str(r.get("star")) for r in v.get("comparisons_rejected", []) if isinstance(r, dict)})
            if "comparisons_kept" in v and comp_sets.get((n, b), []) != want_comp:
                wrong.append(f"comparison stars in {b}: {comp_sets.get((n, b), [])[:6]} where the report has "
                             f"{want_comp[:6]}")
        if wrong:
            problems.append(f"night {lab}: band or star codes do not lead to the names they were stored for "
                            f"({'; '.join(wrong[:3])})")
        else:
            n_checked += 1
    if unreported:
        notes.append(f"the reduction reports of {len(unreported)} night(s) ({', '.join(unreported[:5])}) cannot be read, "
                     f"so their band and star names were not checked against them")
    checked["names_ok"] = n_checked


def _same_float(a: float, b: float) -> bool:
    """Equal as stored (the report keeps the exact value as JSON), NaN equal to NaN."""
    return (a != a and b != b) or a == b or abs(a - b) <= 1e-12 * max(abs(a), abs(b))


def _counts(d: dict[str, int]) -> str:
    return "{" + ", ".join(f"{k}: {v}" for k, v in sorted(d.items())) + "}"


def _labels(f: h5py.File) -> dict[int, str]:
    n = tables.read(f, "nights", ["night", "label"])
    return dict(zip(n["night"].tolist(), n["label"].tolist()))


def _check_references(f: h5py.File, problems: list[str], checked: dict[str, Any]) -> None:
    labels = _labels(f)
    checked["nights"] = len(labels)
    n_exp = tables.n_rows(f, "exposures")
    n_src = tables.n_rows(f, "sources")
    n_star = tables.n_rows(f, "stars")
    n_band = tables.n_rows(f, "bands")
    limits = {"exposure": n_exp, "source": n_src, "star": n_star, "band": n_band}
    for t in ("sources", "exposures", "raw", "points", "comparisons", "ensembles", "timings", "digests"):
        if not tables.has_table(f, t):
            continue
        night = f[t]["night"][()]
        unknown = np.setdiff1d(np.unique(night), np.array(sorted(labels), dtype=night.dtype))
        if unknown.size:
            problems.append(f"/{t} has rows of night number(s) {unknown[:5].tolist()} that /nights does not list")
        for col, lim in limits.items():
            if col in f[t]:
                v = f[t][col][()]
                bad = (v < 0) | (v >= lim)
                if bad.any():
                    problems.append(f"/{t}/{col} points outside its table in {int(bad.sum())} row(s) (first row {int(np.flatnonzero(bad)[0])})")
    nights = tables.read(f, "nights", ["night", "label", "n_exposures", "n_points"])
    e_night = f["exposures"]["night"][()]
    p_night = f["points"]["night"][()]
    for n, lab, ne, npt in zip(nights["night"], nights["label"], nights["n_exposures"], nights["n_points"]):
        ce, cp = int(np.sum(e_night == n)), int(np.sum(p_night == n))
        if ce != ne:
            problems.append(f"night {lab}: /nights says {ne} exposures, /exposures holds {ce}")
        if cp != npt:
            problems.append(f"night {lab}: /nights says {npt} light-curve points, /points holds {cp}")


def _check_points_against_raw(f: h5py.File, problems: list[str]) -> None:
    labels = _labels(f)
    e = tables.read(f, "exposures", ["night", "band", "bjd_tdb", "zero_point", "zero_point_err"])
    r = tables.read(f, "raw", ["exposure", "star", "mag", "mag_err"])
    p = tables.read(f, "points", ["night", "exposure", "star", "band", "bjd_tdb", "mag", "mag_err"])
    n_star = max(1, tables.n_rows(f, "stars"))
    rkey = r["exposure"].astype(np.int64) * n_star + r["star"]
    pkey = p["exposure"].astype(np.int64) * n_star + p["star"]
    order = np.argsort(rkey, kind="stable")
    pos = np.searchsorted(rkey[order], pkey)
    found = (pos < rkey.size) & (rkey[order][np.minimum(pos, max(rkey.size - 1, 0))] == pkey) if rkey.size else np.zeros(pkey.size, bool)
    if not found.all():
        i = int(np.flatnonzero(~found)[0])
        problems.append(f"{int((~found).sum())} light-curve point(s) have no raw measurement (first: night "
                        f"{labels.get(int(p['night'][i]), '?')}, exposure row {int(p['exposure'][i])})")
        return
    ri = order[pos]
    ex = p["exposure"]

    def report(mask: np.ndarray, what: str) -> None:
        if mask.any():
            bad_nights = sorted({labels.get(int(n), "?") for n in p["night"][mask]})
            problems.append(f"{int(mask.sum())} light-curve point(s) {what} (nights {', '.join(bad_nights[:5])})")

    expect = r["mag"][ri] - e["zero_point"][ex]
    with np.errstate(invalid="ignore"):
        report(~(np.isclose(p["mag"], expect, rtol=0, atol=CONSISTENCY_TOL_MAG) | (np.isnan(p["mag"]) & np.isnan(expect))),
               "differ from raw magnitude minus the exposure's zero point")
        expect_err = np.hypot(r["mag_err"][ri], e["zero_point_err"][ex])
        report(~(np.isclose(p["mag_err"], expect_err, rtol=1e-12, atol=CONSISTENCY_TOL_MAG)
                 | (np.isnan(p["mag_err"]) & np.isnan(expect_err))),
               "have an error that does not follow from the raw error and the zero point's error")
    report(p["bjd_tdb"] != e["bjd_tdb"][ex], "have a time different from their exposure's")
    report(p["band"] != e["band"][ex], "have a band different from their exposure's")
    report(p["night"] != e["night"][ex], "belong to a different night than their exposure")


def _check_digests(f: h5py.File, problems: list[str], checked: dict[str, Any]) -> None:
    labels = _labels(f)
    d = tables.read(f, "digests")
    stored = {(int(n), str(t)): (str(s), int(k)) for n, t, s, k in zip(d["night"], d["table"], d["sha256"], d["n_rows"])}
    fresh = night_digests(f, sorted(labels))
    n_ok = 0
    for n, t, k, s in zip(fresh["night"], fresh["table"], fresh["n_rows"], fresh["sha256"]):
        lab = labels[n]
        if (n, t) not in stored:
            problems.append(f"night {lab}: no checksum stored for /{t}")
        elif stored[(n, t)][0] != s:
            was = stored[(n, t)][1]
            change = f" ({was} rows at ingest, {k} now)" if was != k else ""
            problems.append(f"night {lab}: the data in /{t} changed since ingest{change} (checksum mismatch)")
        else:
            n_ok += 1
    extra = {lab for (n, _t) in stored if n not in labels for lab in [str(n)]}
    if extra:
        problems.append(f"/digests holds checksums of night numbers {sorted(extra)[:5]} that /nights does not list")
    checked["checksums_ok"] = n_ok


# --------------------------------------------------------------------------- upgrade


def schema_of(path: str | Path) -> int:
    from .store import Archive

    with Archive(path)._open() as f:
        if f.attrs.get("format") != FORMAT_NAME:
            raise ArchiveError(f"{path}: not a varstar archive (no '{FORMAT_NAME}' format mark)")
        return int(f.attrs.get("schema_version", -1))


def _backup_path(path: Path, version: int) -> Path:
    base = path.with_name(f"{path.stem}.schema{version}-backup{path.suffix}")
    k = 1
    cand = base
    while cand.exists():
        k += 1
        cand = path.with_name(f"{path.stem}.schema{version}-backup-{k}{path.suffix}")
    return cand


def upgrade(path: str | Path, *, timeout_s: float = 30.0) -> dict[str, Any]:
    """Bring an archive of an older schema to the current one, keeping a backup copy.

    Under the writer lock, the backup (``NAME.schemaN-backup.h5`` beside the
    archive, never overwritten) is copied and fsynced first; then one atomic change
    adds the tables the old schema lacks, computes the checksums of the nights
    already stored, and sets the new schema version.  An archive already current
    is left alone.
    """
    from .transaction import transaction

    path = Path(path)
    version = schema_of(path)
    if version == SCHEMA_VERSION:
        return {"archive": str(path), "upgraded": False, "schema_version": version, "backup": None}
    if version > SCHEMA_VERSION:
        raise ArchiveError(f"{path}: archive schema {version} is newer than this varstar understands ({SCHEMA_VERSION}); upgrade varstar")
    if version < 1:
        raise ArchiveError(f"{path}: archive has no valid schema version; it cannot be upgraded")
    added: list[str] = []
    with transaction(path, timeout_s=timeout_s, older_schema=True) as f:
        if int(f.attrs["schema_version"]) != version:
            raise ArchiveError(f"{path}: another process changed the archive meanwhile; run the upgrade again")
        # Copied under the lock and before this change commits: the committed old state, byte for byte.
        backup = _backup_path(path, version)
        try:
            shutil.copyfile(path, backup)
            fd = os.open(backup, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        except OSError as exc:
            raise ArchiveError(f"{path}: could not write the backup {backup.name} ({exc.strerror}); nothing changed") from None
        for v in range(version + 1, SCHEMA_VERSION + 1):
            for t in ADDED_IN.get(v, ()):
                if not tables.has_table(f, t):
                    tables.create_tables(f, only=(t,))
                    added.append(t)
            for t, col in RETYPED_IN.get(v, ()):
                if f[t][col].dtype != np.dtype(TABLES[t][col]):
                    tables.retype_column(f, t, col)
        nights = sorted(tables.read(f, "nights", ["night"])["night"].tolist())
        if nights:
            tables.append(f, "digests", night_digests(f, nights))
        f.attrs["schema_version"] = SCHEMA_VERSION
    return {"archive": str(path), "upgraded": True, "from_schema": version, "schema_version": SCHEMA_VERSION,
            "backup": str(backup), "tables_added": added, "nights_checksummed": len(nights)}
