"""A night in an archive: ingest measurement files (read, reduce, store all or nothing), remove a night.

Everything is computed before the archive is opened for writing; the change
itself goes through :meth:`varstar.archive.ArchiveStore.writing`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from ..errors import InputError
from ..measurements import file_sha256, is_regular_file, read_measurement_file
from ..results import Result
from ..target import time_declaration
from .frames import is_frame_input, measured_table
from .reduce import NightReduction, declared_times, exclude_command, reduce_night, settings_from_target, split_nights
from .standard import apply_to_reduction

if TYPE_CHECKING:  # pragma: no cover
    from ..ensemble import EnsembleSettings
    from ..target import Target


@dataclass(frozen=True)
class IngestResult(Result):
    """What an ingest did: the nights added, the files skipped as already ingested, the nights replaced."""

    archive: str
    nights: tuple[dict[str, Any], ...] = ()
    skipped: tuple[dict[str, str], ...] = field(default_factory=tuple)
    #: Labels of stored nights replaced by this ingest (``ingest(..., replace=True)``).
    replaced: tuple[str, ...] = ()
    #: FITS frames given that could not be measured, with the reason (the others were).
    frames_refused: tuple[dict[str, str], ...] = ()


@dataclass(frozen=True)
class RemovalResult(Result):
    """What :func:`remove_night` took out: the night, its counts, its source files and why."""

    archive: str
    night: str
    n_exposures: int
    n_points: int
    sources: tuple[str, ...]
    reason: str


def _read_new_files(
    files: Sequence[str | Path], star_ids: Sequence[str], columns: Mapping[str, str] | None, known: set[str],
    replace: bool, time_format: str = "jd",
) -> tuple[list[tuple[Path, pd.DataFrame, str]], list[dict[str, str]]]:
    """Read the files not stored yet: ``(path, table, sha256)`` each, and the ones skipped with why."""
    skipped: list[dict[str, str]] = []
    parsed: list[tuple[Path, pd.DataFrame, str]] = []
    seen_here: set[str] = set()
    for p in map(Path, files):
        # The hash first, so that a file already stored is skipped without being parsed; a pipe can
        # be read only once, so it is hashed while it is parsed.
        h = file_sha256(p) if is_regular_file(p) else None
        if h is not None and (h in seen_here or (h in known and not replace)):
            skipped.append({"file": str(p), "sha256": h, "why": "already ingested (same content)"})
            continue
        t, h_read = read_measurement_file(p, star_ids, columns, time_format=time_format)
        if h is not None and h_read != h:
            raise InputError(f"{p}: the file changed while it was being read; nothing was written, ingest again")
        if h_read in seen_here or (h_read in known and not replace):
            skipped.append({"file": str(p), "sha256": h_read, "why": "already ingested (same content)"})
            continue
        seen_here.add(h_read)
        parsed.append((p, t, h_read))
    return parsed, skipped


def ingest(
    archive_path: str | Path,
    files: Sequence[str | Path],
    *,
    columns: Mapping[str, str] | None = None,
    settings: EnsembleSettings | None = None,
    timeout_s: float = 30.0,
    replace: bool = False,
    accept_unusual: bool = False,
    time_format: str | None = None,
    time_system: str | None = None,
    time_point: str | None = None,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> IngestResult:
    """Reduce measurement files and add them to an archive, all or nothing.

    Files whose exact content is already in the archive are skipped (content
    hash).  The rows are grouped into nights by evening date; a night already in
    the archive is refused (remove it first to re-reduce it), unless
    ``replace`` is given: then no file is skipped, and every night the files
    hold replaces the stored night of the same date whole, in the same atomic
    change (the old night's removal is recorded, as by :func:`remove_night`).
    That is how a night stored from an incomplete file is replaced by the
    complete one.  Everything is computed before the archive is opened for
    writing.

    A night that cannot be what it claims (the target below the horizon or the
    Sun up at its exposures, no measurement of the target, an airmass column far
    from the computed one: :func:`varstar.workflows.reduce.unusual_night`) is
    refused with the reasons, unless ``accept_unusual`` is given; the reasons are
    then recorded in the night's report.

    The time column is JD(UTC) at mid-exposure unless declared otherwise, by
    ``[measurements]`` in the target description or by ``time_format`` (``"jd"``,
    ``"mjd"``), ``time_system`` (``"utc"``, ``"hjd_utc"``, ``"bjd_tdb"``) and
    ``time_point`` (``"mid"``, ``"start"``, ``"end"``: then every row needs its
    ``exptime``); the archive stores JD(UTC) at mid-exposure
    (:func:`varstar.workflows.reduce.declared_times`).

    FITS frames (files ending ``.fits``, ``.fit`` or ``.fts``, optionally
    gzipped, or folders of them) are measured first
    (:func:`varstar.workflows.frames.measured_table`, ``workers`` processes)
    and their measurement table is ingested as a file would be; frames that
    cannot be measured are listed in ``frames_refused`` and in the night's
    warnings, and the others are used.

    ``progress(done, total)`` is told of each frame measured, then of each night reduced.

    A regular file is hashed first (read in bounded blocks) and then read and
    checked piece by piece (:func:`varstar.measurements.read_measurement_file`),
    which stops at the first fault; a pipe is read once.
    """
    from ..archive import open_archive

    arch = open_archive(archive_path)
    target = arch.target
    if not files:
        raise InputError("no measurement files given")
    decl = time_declaration(target, time_format=time_format, time_system=time_system, time_point=time_point)
    frame_inputs = [p for p in files if is_frame_input(p)]
    known = arch.source_hashes()
    parsed, skipped = _read_new_files([p for p in files if not is_frame_input(p)], target.star_ids, columns, known,
                                      replace, decl["time_format"])
    parsed = [(p, declared_times(target, t, decl), h) for p, t, h in parsed]
    frames_refused: tuple[dict[str, str], ...] = ()
    if frame_inputs:  # measured frames give times in JD(UTC) at mid-exposure: no declaration applies
        name, t, sha, measured = measured_table(target, frame_inputs, workers=workers, progress=progress)
        frames_refused = tuple(measured.refused)
        t.attrs["warnings"] = [*t.attrs.get("warnings", []),
                               *(f"frame {r['frame']} not measured: {r['reason']}" for r in frames_refused)]
        if sha in known and not replace:
            skipped.append({"file": name, "sha256": sha, "why": "already ingested (the same measurements of these frames)"})
        else:
            parsed.append((Path(name), t, sha))
    if not parsed:
        return IngestResult(str(arch.path), (), tuple(skipped), frames_refused=frames_refused)
    settings = settings or settings_from_target(target)
    if len(parsed) > 1:
        for p, t, _ in parsed:
            t["frame"] = p.name + ":" + t["frame"].astype(str)
    table = pd.concat([t for _, t, _ in parsed], ignore_index=True)
    # what the reader noted about each file (placeholders flagged, delimiter, ...): concat drops it
    table.attrs["warnings"] = [w for _, t, _ in parsed for w in t.attrs.get("warnings", [])]
    nights = split_nights(target, table)
    stored = sorted(set(nights) & set(arch.nights()["night"]))
    if stored and not replace:
        lab = stored[0]
        raise InputError(
            f"night {lab} is already in {arch.path}; ingest all files of a night together (the archive never "
            f"changes a night once stored); to replace the stored night with these files (say it was ingested "
            f"from an incomplete file), ingest again with --replace (or take it out with "
            f"'varstar remove-night {arch.path} {lab}' first)"
        )
    reductions = []
    for k, (lab, t) in enumerate(sorted(nights.items())):
        if progress is not None:
            progress(k, len(nights))
        reductions.append(reduce_night(target, t, settings, label=lab, accept_unusual=accept_unusual))
    description = arch.description_in_force()
    for red in reductions:
        red.report["description"] = description  # which version of the target description this reduction used
    _add_history_notes(arch.comparisons(last_nights=HISTORY_NIGHTS), reductions, arch.path, target)
    active = arch.active_transformation()
    if active is not None:
        for red in reductions:
            apply_to_reduction(target, red, active)
    sha_of = {str(p): h for p, _, h in parsed}
    names = ", ".join(sorted({p.name for p, _, _ in parsed}))

    with arch.writing(timeout_s=timeout_s) as w:
        # Re-check under the lock: another process may have ingested meanwhile.
        now_nights = w.nights()
        if not replace:
            if w.source_hashes() & set(sha_of.values()):
                raise InputError(f"{arch.path}: another process ingested some of these files meanwhile; nothing was written")
            if set(now_nights["label"]) & set(nights):
                raise InputError(f"{arch.path}: another process ingested one of these nights meanwhile; nothing was written")
        elif w.source_hashes_outside(set(nights)) & set(sha_of.values()):
            raise InputError(f"{arch.path}: some of these files are stored with another night; nothing was written")
        if w.description_in_force() != description:
            raise InputError(f"{arch.path}: another process changed the target description meanwhile; nothing was "
                             f"written, ingest again")
        now_active = w.active_transformation()
        if (now_active and now_active[0]) != (active and active[0]):
            raise InputError(f"{arch.path}: another process changed the transformation meanwhile; nothing was written, ingest again")
        replaced = sorted(str(lab) for lab in now_nights["label"] if lab in nights) if replace else []
        for lab in replaced:
            w.drop_night(lab, reason=f"replaced by a new ingest of {names}")
        for red in reductions:
            w.append_night(red, sha_of)
    return IngestResult(str(arch.path), tuple(r.report for r in reductions), tuple(skipped), tuple(replaced),
                        frames_refused)


#: How many of the latest stored nights the comparison-star history note looks back on:
#: a season's worth (our choice), so its cost does not grow with the archive.
HISTORY_NIGHTS = 100


def _add_history_notes(history: pd.DataFrame, reductions: Sequence[NightReduction], archive: Path, target: Target) -> None:
    """Warn when a comparison star kept tonight was found variable on earlier nights.

    A slowly varying comparison star may pass one night's test (near an
    extremum its magnitude hardly changes within a few hours) while its mean
    is off; the observer should decide to exclude it for good.
    """
    seen: dict[str, set[str]] = {}
    for r in history.itertuples():
        if r.status == "variable":
            seen.setdefault(str(r.star), set()).add(str(r.night))
    for red in reductions:
        kept = set(red.comparisons.loc[red.comparisons["status"] == "kept", "star"])
        for star in sorted(kept):
            earlier = seen.get(star, set())
            if len(earlier) >= 2:
                red.report["warnings"].append(
                    f"comparison star {star} passed tonight's test but was found variable on {len(earlier)} earlier "
                    f"night(s) (latest: {', '.join(sorted(earlier)[-3:])}); if it is variable, keep it out of every ensemble "
                    f"with: {exclude_command(archive, target, star)}"
                )
        for r in red.comparisons.itertuples():
            if r.status == "variable":
                seen.setdefault(str(r.star), set()).add(red.label)


def remove_night(archive_path: str | Path, label: str, *, reason: str = "", timeout_s: float = 30.0) -> RemovalResult:
    """Take a wrongly ingested night out of an archive again, keeping a record that it was.

    Every row of the night goes (sources, exposures, raw measurements, points,
    comparison and ensemble results, timings, checksums, the night itself) in one
    atomic change (:meth:`varstar.archive.ArchiveWriter.drop_night`); the archive
    records what was removed, when and why; the night's files can then be ingested again.  Stored period analyses are
    history and stay.
    """
    from ..archive import open_archive

    arch = open_archive(archive_path)
    arch.require_night(label, changing=True)  # said before any writer starts (the writer checks again under its lock)
    with arch.writing(timeout_s=timeout_s) as w:
        record = w.drop_night(label, reason=reason)
    return RemovalResult(archive=str(arch.path), **{**record, "sources": tuple(record["sources"])})
