"""Integrity of an archive: per-night checksums and the checks every writer makes.

* :func:`night_digests` computes the SHA-256 checksum of one night's rows in
  each table listed in :data:`.layout.DIGEST_COLUMNS`; ingest stores them in
  ``/digests``.
* Damage: :func:`is_hdf5_failure` tells the HDF5 library failing to read the
  file (a damaged archive) from a bug of ours, and :func:`unreadable` turns it
  into one :class:`~varstar.errors.ArchiveError` naming what could not be read;
  :func:`structure_problems` and :func:`free_space_problem` are the checks a
  writer makes before it changes anything (:mod:`.transaction`), and
  :func:`.verify.verify` makes them too.

Whole-archive verification and schema upgrades are in :mod:`.verify` (they
open the archive through :mod:`.transaction`, which uses this module).
"""

from __future__ import annotations

import contextlib
import ctypes
import hashlib
import sys
from collections.abc import Callable
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
