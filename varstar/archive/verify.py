"""Whole-archive verification and schema upgrades.

* :func:`verify` re-reads everything and reports in words what is wrong: the
  schema, the tables' shapes and types, every value that HDF5 cannot read
  (by column, rows and nights), references between tables, that band and star
  codes lead to the names each night's report recorded, each night's
  checksums, the consistency of the reduced points with the raw measurements
  (``mag = raw mag - zero point``, the same time, band and night as their
  exposure), the record of free space, and journals kept aside as damaged.
* :func:`upgrade` brings an archive of an older schema to the current one,
  only when asked, after writing a backup copy beside it.
"""

from __future__ import annotations

import json
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from ..errors import ArchiveError
from ..results import Result
from . import records, tables
from .integrity import (
    CONSISTENCY_TOL_MAG, capacity_problems, expected_tables, failed_object, free_space_problem, hdf5_detail,
    is_hdf5_failure, night_digests, structure_problems,
)
from .journal import DAMAGED, inspect_journal, journal_path
from .layout import ADDED_IN, FORMAT_NAME, RETYPED_IN, SCHEMA_VERSION, STR, TABLES, code_capacity
from .transaction import damaged_journals, open_read, transaction


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
    """``/stars`` must hold every star of the description in force, with its role (star codes are row numbers).

    The first rows are the stars of the original description in its order (checked
    against ``/descriptions``); stars a later version added follow, and a star never
    leaves ``/stars``.
    """
    from ..errors import VarstarError
    from ..target import parse_target

    try:
        target = parse_target(toml, source=f"{path}:/target")
    except VarstarError as exc:
        problems.append(f"the target description stored in /target cannot be read: {exc}")
        return
    stored = tables.read(f, "stars", ["id", "role"])
    ids, roles = list(stored["id"]), list(stored["role"])
    role_of = dict(zip(ids, roles))
    wrong = [f"'{s.id}' ({s.role})" for s in target.stars if role_of.get(s.id) != s.role]
    if wrong:
        problems.append(
            f"/stars does not list the stars of the target description in force with their roles ({len(ids):,} rows; "
            f"missing or with another role: {', '.join(wrong[:5])}): star codes do not lead to the stars they were "
            f"stored for"
        )
    first = records.descriptions(f)["toml"].iloc[0]
    try:
        original = [s.id for s in parse_target(str(first), source=f"{path}:/descriptions").stars]
    except VarstarError:
        original = None  # a description history that cannot be read shows in the checksums of its own checks
    if original is not None and ids[:len(original)] != original:
        k = next((i for i, (a, b) in enumerate(zip(ids, original)) if a != b), min(len(ids), len(original)))
        got = f"'{ids[k]}'" if k < len(ids) else "nothing"
        problems.append(
            f"/stars does not begin with the stars of the original target description in its order (row {k} holds "
            f"{got} where it has '{original[k]}'): star codes do not lead to the stars they were stored for"
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
    with open_read(Path(path)) as f:
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


@dataclass(frozen=True)
class UpgradeResult(Result):
    """What :func:`upgrade` did: nothing (already current), or the schema step with its backup."""

    archive: str
    upgraded: bool
    schema_version: int
    backup: str | None = None
    from_schema: int | None = None
    tables_added: tuple[str, ...] = ()
    nights_checksummed: int = 0


def upgrade(path: str | Path, *, timeout_s: float = 30.0) -> UpgradeResult:
    """Bring an archive of an older schema to the current one, keeping a backup copy.

    Under the writer lock, the backup (``NAME.schemaN-backup.h5`` beside the
    archive, never overwritten) is copied and fsynced first; then one atomic change
    adds the tables the old schema lacks, computes the checksums of the nights
    already stored, and sets the new schema version.  An archive already current
    is left alone.
    """
    path = Path(path)
    version = schema_of(path)
    if version == SCHEMA_VERSION:
        return UpgradeResult(str(path), False, version)
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
                    if t == "descriptions":  # the one stored at init is the first version
                        tables.append(f, t, records.first_description(
                            f["target"].attrs["toml"], f.attrs.get("created_utc", ""), f.attrs.get("created_by", "")))
            for t, col in RETYPED_IN.get(v, ()):
                if f[t][col].dtype != np.dtype(TABLES[t][col]):
                    tables.retype_column(f, t, col)
        nights = sorted(tables.read(f, "nights", ["night"])["night"].tolist())
        if nights and "digests" in added:  # the checksums of nights stored before there were any
            tables.append(f, "digests", night_digests(f, nights))
        f.attrs["schema_version"] = SCHEMA_VERSION
    return UpgradeResult(str(path), True, SCHEMA_VERSION, str(backup), version, tuple(added),
                         len(nights) if "digests" in added else 0)
