"""Integrity of an archive: per-night checksums, verification, schema upgrades.

* :func:`night_digests` computes the SHA-256 checksum of one night's rows in
  each table listed in :data:`.layout.DIGEST_COLUMNS`; ingest stores them in
  ``/digests``.
* :func:`verify` re-reads everything and reports in words what is wrong: the
  schema, the tables' shapes and types, references between tables, each
  night's checksums, and the consistency of the reduced points with the raw
  measurements (``mag = raw mag - zero point``, the same time, band and night as
  their exposure).
* :func:`upgrade` brings an archive of an older schema to the current one,
  only when asked, after writing a backup copy beside it.
"""

from __future__ import annotations

import hashlib
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from ..errors import ArchiveError
from . import tables
from .layout import (
    ADDED_IN,
    DIGEST_COLUMNS,
    RETYPED_IN,
    FORMAT_NAME,
    ROW_REFERENCES,
    SCHEMA_VERSION,
    STR,
    TABLES,
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
    """Check an archive thoroughly and describe every problem in words (never raises for damage)."""
    from .store import Archive

    path = Path(path)
    problems: list[str] = []
    notes: list[str] = []
    checked: dict[str, Any] = {}
    try:
        f = Archive(path)._open()
    except ArchiveError as exc:
        return VerifyReport(str(path), -1, (str(exc),), ())
    with f:
        if f.attrs.get("format") != FORMAT_NAME:
            return VerifyReport(str(path), -1, (f"not a varstar archive (no '{FORMAT_NAME}' format mark)",), ())
        version = int(f.attrs.get("schema_version", -1))
        if version > SCHEMA_VERSION:
            return VerifyReport(str(path), version, (
                f"schema {version} is newer than this varstar understands ({SCHEMA_VERSION}); upgrade varstar",), ())
        if version < 1:
            return VerifyReport(str(path), version, ("no valid schema version",), ())
        expected = dict(TABLES)
        if version < SCHEMA_VERSION:
            notes.append(f"schema {version} is older than this varstar's {SCHEMA_VERSION}: it can be read, but run "
                         f"'varstar upgrade {path.name}' (it keeps a backup) before changing it; checksums start then")
            for v in range(version + 1, SCHEMA_VERSION + 1):
                for t in ADDED_IN.get(v, ()):
                    expected.pop(t, None)
                for t, col in RETYPED_IN.get(v, ()):
                    expected[t] = dict(expected[t], **{col: STR})
        if "target" not in f or "toml" not in f["target"].attrs:
            problems.append("the target description (/target) is missing")
        # structure
        lengths: dict[str, int] = {}
        for t, cols in expected.items():
            if not tables.has_table(f, t):
                problems.append(f"table /{t} is missing")
                continue
            ns = set()
            for col, code in cols.items():
                if col not in f[t]:
                    problems.append(f"table /{t} has no column '{col}'")
                    continue
                ds = f[t][col]
                ok_type = h5py.check_string_dtype(ds.dtype) is not None if code == STR else ds.dtype == np.dtype(code)
                if not ok_type or ds.ndim != 1:
                    problems.append(f"column /{t}/{col} has type {ds.dtype} and shape {ds.shape}, expected 1-D {code}")
                ns.add(ds.shape[0] if ds.ndim else -1)
            if len(ns) > 1:
                problems.append(f"the columns of /{t} have different lengths {sorted(ns)}: a row is half-written")
            elif ns:
                lengths[t] = ns.pop()
        checked["rows"] = lengths
        if problems:
            return VerifyReport(str(path), version, tuple(problems), tuple(notes), checked)
        _check_references(f, problems, checked)
        if not problems:  # row references are sound: points can be matched to raw rows
            _check_points_against_raw(f, problems)
        if version == SCHEMA_VERSION:
            _check_digests(f, problems, checked)
    return VerifyReport(str(path), version, tuple(problems), tuple(notes), checked)


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
