"""A fleet on disk: a folder of archives, one per target, and its optional ``fleet.toml``.

The fleet file lists the archives and the defaults of fleet operations::

    # varstar fleet: one archive per target in this folder
    [fleet]
    format = "varstar-fleet"
    version = 1

    [defaults]                  # all optional
    workers = 4                 # processes of the local engine (default: one per core)
    scheduler = "tcp://host:8786"   # an existing Dask cluster instead of the local engine
    wait = 30.0                 # seconds a task waits for another writer of its archive
    [defaults.period]           # options of every period analysis of update
    band = "all"
    min_period = 0.1
    max_period = 5.0

    [[targets]]
    name = "Wren Hollow 7"
    archive = "Wren_Hollow_7.h5"

Without a fleet file, the fleet is every ``*.h5`` file of the folder, each
named by its file stem.  :func:`init_fleet` makes the archives and the file;
:func:`load_fleet` reads them.  The operations live in
:mod:`varstar.fleet.runs`, :mod:`varstar.fleet.routing` and
:mod:`varstar.fleet.summary`; :class:`varstar.fleet.Fleet`
(:mod:`varstar.fleet.api`) offers them as methods.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import tempfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import ArchiveError, InputError
from .results import FleetInitResult

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: The fleet file's name inside the fleet folder.
FLEET_FILE = "fleet.toml"
#: The file keeping the last fleet ingest's failures (see :func:`varstar.fleet.ingest_fleet`).
FAILURES_FILE = "fleet-ingest-failures.json"
FORMAT_NAME = "varstar-fleet"
FORMAT_VERSION = 1
#: Options of :meth:`varstar.Archive.period` a fleet file's ``[defaults.period]`` may set.
PERIOD_OPTIONS = {"band": str, "min_period": float, "max_period": float, "oversampling": float, "nterms": int,
                  "harmonics": int}
ARCHIVE_SUFFIX = ".h5"


@dataclass(frozen=True)
class FleetEntry:
    """One target of the fleet: its name and its archive (an absolute path inside the fleet folder)."""

    name: str
    archive: Path

    @property
    def stem(self) -> str:
        """The archive's file name without ``.h5``: what night-file names start with (routing rule 1)."""
        return self.archive.name[: -len(ARCHIVE_SUFFIX)] if self.archive.name.endswith(ARCHIVE_SUFFIX) else self.archive.stem


@dataclass(frozen=True)
class FleetDefaults:
    """The ``[defaults]`` of a fleet file (None: not given)."""

    workers: int | None = None
    scheduler: str | None = None
    wait_s: float = 30.0
    period: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class FleetSpec:
    """A fleet's folder, targets and defaults (what its fleet file says); :class:`varstar.fleet.Fleet` adds the
    operations as methods."""

    path: Path
    entries: tuple[FleetEntry, ...]
    defaults: FleetDefaults = FleetDefaults()
    fleet_file: Path | None = None

    @property
    def failures_file(self) -> Path:
        """Where the last fleet ingest's failures are kept."""
        return self.path / FAILURES_FILE

    def targets(self) -> pd.DataFrame:
        """One row per target: ``target`` (name), ``archive`` (path)."""
        import pandas as pd

        return pd.DataFrame({"target": [e.name for e in self.entries], "archive": [str(e.archive) for e in self.entries]})



def as_fleet(fleet: FleetSpec | str | os.PathLike[str]) -> FleetSpec:
    """A fleet as given, or read from its folder (:func:`load_fleet`)."""
    return fleet if isinstance(fleet, FleetSpec) else load_fleet(fleet)


# -- reading ---------------------------------------------------------------------------------------
def _folder_of(path: str | os.PathLike[str]) -> Path:
    p = Path(path)
    if p.name == FLEET_FILE and p.is_file():
        p = p.parent
    if not p.exists():
        raise InputError(f"{p}: no such fleet folder (make one with 'varstar fleet init {p} TARGET.toml...')")
    if not p.is_dir():
        raise InputError(f"{p}: not a folder; a fleet is a folder of archives (with an optional {FLEET_FILE})")
    return p.resolve()


def _plain_name(value: Any, where: str) -> str:
    """An archive file name from a fleet file: a plain name inside the folder, ending ``.h5``."""
    if not isinstance(value, str) or not value:
        raise InputError(f"{where}: expected the archive's file name as a string, e.g. archive = \"Wren_Hollow_7.h5\"")
    if "/" in value or "\\" in value or value in (".", "..") or value.startswith(".") or "\x00" in value:
        raise InputError(f"{where}: {value!r} is not a plain file name; archives live in the fleet folder itself")
    if not value.endswith(ARCHIVE_SUFFIX):
        raise InputError(f"{where}: {value!r} does not end with {ARCHIVE_SUFFIX}")
    return value


def _read_defaults(doc: Mapping[str, Any], source: str) -> FleetDefaults:
    raw = doc.get("defaults", {})
    if not isinstance(raw, dict):
        raise InputError(f"{source}: [defaults] must be a table")
    unknown = sorted(set(raw) - {"workers", "scheduler", "wait", "period"})
    if unknown:
        raise InputError(f"{source}: [defaults] has unknown key(s) {', '.join(unknown)}; "
                         f"known: workers, scheduler, wait, period")
    workers = raw.get("workers")
    if workers is not None and (not isinstance(workers, int) or isinstance(workers, bool) or workers < 1):
        raise InputError(f"{source}: defaults.workers must be a whole number of at least 1, got {workers!r}")
    scheduler = raw.get("scheduler")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise InputError(f"{source}: defaults.scheduler must be an address such as \"tcp://host:8786\", got {scheduler!r}")
    wait = raw.get("wait", 30.0)
    if isinstance(wait, bool) or not isinstance(wait, (int, float)) or not 0 <= wait < 1e6:
        raise InputError(f"{source}: defaults.wait must be seconds (a number from 0), got {wait!r}")
    period = raw.get("period", {})
    if not isinstance(period, dict):
        raise InputError(f"{source}: [defaults.period] must be a table")
    for key, value in period.items():
        kind = PERIOD_OPTIONS.get(key)
        if kind is None:
            raise InputError(f"{source}: defaults.period.{key} is not an option of the period analysis here "
                             f"(known: {', '.join(PERIOD_OPTIONS)})")
        ok = isinstance(value, str) if kind is str else (
            isinstance(value, int) if kind is int else isinstance(value, (int, float))) and not isinstance(value, bool)
        if not ok:
            raise InputError(f"{source}: defaults.period.{key} must be a {kind.__name__}, got {value!r}")
    return FleetDefaults(workers=workers, scheduler=scheduler.strip() if scheduler else None, wait_s=float(wait),
                         period=dict(period))


def read_fleet_file(folder: Path) -> tuple[tuple[FleetEntry, ...], FleetDefaults]:
    """The entries and defaults of ``folder/fleet.toml`` (every fault an :class:`InputError` naming the key)."""
    from ..inputs import load_toml, read_toml_text

    path = folder / FLEET_FILE
    source = str(path)
    doc = load_toml(read_toml_text(path), source)
    head = doc.get("fleet", {})
    if not isinstance(head, dict) or head.get("format") != FORMAT_NAME:
        raise InputError(f"{source}: not a fleet file ([fleet] format = \"{FORMAT_NAME}\" missing)")
    if head.get("version") != FORMAT_VERSION:
        raise InputError(f"{source}: fleet file version {head.get('version')!r}; this varstar reads version {FORMAT_VERSION}")
    unknown = sorted(set(doc) - {"fleet", "defaults", "targets"})
    if unknown:
        raise InputError(f"{source}: unknown table(s) {', '.join(unknown)}; known: fleet, defaults, targets")
    items = doc.get("targets", [])
    if not isinstance(items, list):
        raise InputError(f"{source}: targets must be an array of tables ([[targets]])")
    entries: list[FleetEntry] = []
    seen: dict[str, str] = {}
    for i, item in enumerate(items):
        where = f"{source}: targets[{i}]"
        if not isinstance(item, dict):
            raise InputError(f"{where}: expected a table with name and archive")
        extra = sorted(set(item) - {"name", "archive"})
        if extra:
            raise InputError(f"{where}: unknown key(s) {', '.join(extra)}; known: name, archive")
        name = item.get("name")
        if not isinstance(name, str) or not name.strip():
            raise InputError(f"{where}.name: expected the target's name as a string")
        archive = _plain_name(item.get("archive"), f"{where}.archive")
        key = archive.casefold()
        if key in seen:
            raise InputError(f"{where}.archive: {archive} is listed twice (also for {seen[key]!r})")
        seen[key] = name
        entries.append(FleetEntry(name, folder / archive))
    return tuple(entries), _read_defaults(doc, source)


def load_fleet(path: str | os.PathLike[str]) -> FleetSpec:
    """Read a fleet: its folder (or its ``fleet.toml``).

    With a fleet file, its targets and defaults; without one, every ``*.h5`` in the
    folder, each named by its file stem.  An archive the fleet file lists but the
    folder lacks is refused (:class:`varstar.errors.ArchiveError`) naming it.
    """
    folder = _folder_of(path)
    if (folder / FLEET_FILE).exists():
        entries, defaults = read_fleet_file(folder)
        missing = [e.archive.name for e in entries if not e.archive.is_file()]
        if missing:
            raise ArchiveError(f"{folder / FLEET_FILE} lists archive(s) the folder does not hold: {', '.join(missing)}; "
                               f"put them back or take them out of the fleet file")
        return FleetSpec(folder, entries, defaults, folder / FLEET_FILE)
    found = sorted(p for p in folder.glob("*" + ARCHIVE_SUFFIX) if p.is_file() and not p.name.startswith("."))
    if not found:
        raise InputError(f"{folder}: neither a {FLEET_FILE} nor any *{ARCHIVE_SUFFIX} archive; not a fleet "
                         f"(make one with 'varstar fleet init {folder} TARGET.toml...')")
    return FleetSpec(folder, tuple(FleetEntry(p.name[: -len(ARCHIVE_SUFFIX)], p) for p in found))


# -- writing ---------------------------------------------------------------------------------------
def _toml_string(text: str) -> str:
    # JSON's string escapes (\", \\, \n, \uXXXX) are all TOML basic-string escapes (TOML 1.0, "String").
    return json.dumps(text, ensure_ascii=False)


def fleet_file_text(entries: Sequence[FleetEntry], defaults: FleetDefaults | None = None) -> str:
    """The text of a fleet file listing ``entries`` (and ``defaults`` when any is set)."""
    lines = ["# varstar fleet: one archive per target in this folder", "", "[fleet]",
             f"format = {_toml_string(FORMAT_NAME)}", f"version = {FORMAT_VERSION}", ""]
    d = defaults or FleetDefaults()
    lines.append("[defaults]")
    lines.append(f"workers = {d.workers}" if d.workers else "# workers = 4                 # default: one per core")
    lines.append(f"scheduler = {_toml_string(d.scheduler)}" if d.scheduler
                 else "# scheduler = \"tcp://host:8786\"   # default: a local engine, started and stopped by each command")
    lines.append(f"wait = {d.wait_s!r}")
    if d.period:
        lines.append("")
        lines.append("[defaults.period]")
        for k, v in d.period.items():
            lines.append(f"{k} = {_toml_string(v) if isinstance(v, str) else repr(v)}")
    for e in entries:
        lines += ["", "[[targets]]", f"name = {_toml_string(e.name)}", f"archive = {_toml_string(e.archive.name)}"]
    return "\n".join(lines) + "\n"


def init_fleet(fleet_dir: str | os.PathLike[str], target_tomls: Sequence[str | os.PathLike[str]]) -> FleetInitResult:
    """Create one archive per target description in ``fleet_dir`` and the ``fleet.toml`` listing them.

    Each archive is named ``safe_filename(target name) + ".h5"``
    (:func:`varstar.export.safe_filename`).  The folder is created if missing (its
    parent must exist); a folder that is already a fleet gets the new targets added
    to its fleet file.  Two targets that would share an archive name (compared
    without case, for case-insensitive file systems), or a name already taken in the
    folder, are refused before anything is written.  All or nothing: the archives
    are built in a hidden staging folder inside ``fleet_dir`` and linked into place
    (never overwriting), then the fleet file is written atomically; on any error
    everything this call made is removed again.

    Returns
    -------
    FleetInitResult
        The folder, the fleet file and the archives created (``target``, ``archive``, ``source``).
    """
    from ..export import safe_filename, write_atomic
    from ..target import read_target
    from ..workflows.archive import create_archive, open_archive

    if not target_tomls:
        raise InputError("no target descriptions given; name one TOML file per target")
    folder = Path(fleet_dir)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{folder}: exists and is not a folder; a fleet is a folder of archives")
    if not folder.exists() and not folder.parent.is_dir():
        raise InputError(f"{folder}: its parent folder {folder.parent} does not exist")

    existing: tuple[FleetEntry, ...] = ()
    defaults = FleetDefaults()
    if folder.is_dir():
        if (folder / FLEET_FILE).exists():
            existing, defaults = read_fleet_file(folder.resolve())
        else:  # loose archives already there become members
            existing = tuple(FleetEntry(open_archive(p).target.name, p.resolve())
                             for p in sorted(folder.glob("*" + ARCHIVE_SUFFIX)) if p.is_file())
    targets = [(Path(t), read_target(Path(t))) for t in target_tomls]

    taken = {e.archive.name.casefold(): f"{e.name!r} (already in the fleet)" for e in existing}
    if folder.is_dir():
        for p in folder.iterdir():
            taken.setdefault(p.name.casefold(), "a file already in the folder")
    plan: list[tuple[Path, Any, str]] = []
    clashes = []
    for src, tgt in targets:
        name = safe_filename(tgt.name) + ARCHIVE_SUFFIX
        key = name.casefold()
        if key in taken:
            clashes.append(f"{tgt.name!r} ({src}) makes archive {name}, taken by {taken[key]}")
            continue
        taken[key] = f"{tgt.name!r} ({src})"
        plan.append((src, tgt, name))
    if clashes:
        raise InputError("archive names clash, nothing was created: " + "; ".join(clashes)
                         + "; give the targets distinct names ([target] name) or use another fleet folder")

    made_folder = not folder.exists()
    if made_folder:
        try:
            folder.mkdir()
        except OSError as exc:
            raise InputError(f"{folder}: cannot create the fleet folder ({exc.strerror})") from None
    folder = folder.resolve()
    linked: list[Path] = []
    try:
        staging = Path(tempfile.mkdtemp(prefix=".fleet-init-", dir=folder))
    except OSError as exc:
        raise InputError(f"{folder}: cannot write in the fleet folder ({exc.strerror})") from None
    try:
        for _src, tgt, name in plan:
            create_archive(staging / name, tgt)
        for _src, _tgt, name in plan:
            final = folder / name
            try:
                os.link(staging / name, final)  # never overwrites: a name taken meanwhile fails here
            except FileExistsError:
                raise ArchiveError(f"{final}: appeared while the fleet was being made; nothing was created") from None
            except OSError as exc:
                raise ArchiveError(f"{final}: cannot create ({exc.strerror}); nothing was created") from None
            linked.append(final)
        entries = existing + tuple(FleetEntry(tgt.name, folder / name) for _src, tgt, name in plan)
        write_atomic(folder / FLEET_FILE, fleet_file_text(entries, defaults).encode("utf-8"))
    except BaseException:
        for p in linked:
            with contextlib.suppress(OSError):
                p.unlink()
        shutil.rmtree(staging, ignore_errors=True)
        if made_folder:
            with contextlib.suppress(OSError):
                folder.rmdir()
        raise
    shutil.rmtree(staging, ignore_errors=True)
    created = tuple({"target": tgt.name, "archive": str(folder / name), "source": str(src)} for src, tgt, name in plan)
    return FleetInitResult(str(folder), str(folder / FLEET_FILE), created)
