"""Which archive of a fleet each night file belongs to.

The rule, in order; a file is never guessed:

1. **By name.** The file name starts with an archive's stem, followed by the end
   of the name or a character that is not a letter or digit.  Compared without
   case, with ``-``, ``_``, ``.`` and spaces counted as the same separator:
   ``wren-hollow-7_2026-09-11.csv`` and ``Wren_Hollow_7.2026-09-11.csv`` both
   belong to ``Wren_Hollow_7.h5``, and ``Wren_Hollow_70_x.csv`` does not.
2. **By its stars.** Otherwise (or when several stems match: then among those
   only) the star ids the file measures must all be stars of exactly one
   target.  The ids are read cheaply: a long-form table's ``star`` column, or a
   wide-form header's star columns (each cell ``X`` with an ``X_err`` beside it).
   Files of FITS frames are routed by name only.

A file that matches no target is *unmatched*; one that two or more targets fit
equally is *ambiguous*; both are reported with the reason and left in the inbox.
Folders given as inbox are expanded to their regular files (not hidden ones,
not recursively), in name order.
"""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import InputError
from .folder import FleetSpec, FleetEntry, as_fleet

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Bytes read at most to find a table's header line (comments may come first; our choice).
HEADER_BYTES = 1 << 20
#: Column names (lower case) of the measurement table that are not stars (README, "The measurement table").
TABLE_COLUMNS = {"jd", "band", "star", "mag", "mag_err", "airmass", "exptime", "flag", "frame"}


def _key(text: str) -> str:
    """The form names are compared in: lower case, separators made one."""
    return re.sub(r"[-_. ]", "_", text.casefold())


def name_matches(file_name: str, stem: str) -> bool:
    """Rule 1: ``file_name`` starts with ``stem`` (compared as :func:`_key` does) followed by its end or a non-alphanumeric."""
    f, s = _key(file_name), _key(stem)
    return f.startswith(s) and (len(f) == len(s) or not f[len(s)].isalnum())


def inbox_files(inbox: Sequence[str | os.PathLike[str]]) -> list[Path]:
    """The files the inbox names: files as given, folders expanded; absolute, each once, in order."""
    out: list[Path] = []
    seen: set[Path] = set()
    for item in inbox:
        p = Path(item)
        if p.is_dir():
            found = sorted(q for q in p.iterdir() if not q.name.startswith(".") and q.is_file())
        elif p.exists():
            found = [p]
        else:
            raise InputError(f"{p}: no such file or folder in the inbox; nothing was ingested")
        for q in found:
            q = q.resolve()
            if q not in seen:
                seen.add(q)
                out.append(q)
    return out


def file_star_ids(path: Path) -> set[str]:
    """The star ids a measurement table measures, read cheaply (see the module docstring).

    Raises :class:`InputError` when no header line, or neither a ``star`` column
    nor wide-form star columns, is found.
    """
    import pandas as pd

    from ..measurements.header import delimiter_of

    try:
        with open(path, "rb") as fh:
            head = fh.read(HEADER_BYTES)
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    text = head.decode("utf-8-sig", errors="replace")
    lines = text.splitlines()
    n_before = 0
    for line in lines:
        if line.strip() and not line.lstrip().startswith("#"):
            break
        n_before += 1
    else:
        raise InputError(f"{path}: no header line found in its first {HEADER_BYTES // 1024} KiB")
    header_line = lines[n_before]
    sep = delimiter_of(header_line)
    cells = [c.strip().strip('"').strip() for c in header_line.split(sep)]
    folded = [c.casefold() for c in cells]
    if "star" in folded:
        idx = folded.index("star")
        try:
            df = pd.read_csv(path, sep=sep, skiprows=n_before, header=0, usecols=[0, idx] if idx else [0], dtype=str,
                             keep_default_na=False, skipinitialspace=True, encoding="utf-8-sig", engine="c")
        except (ValueError, OSError, UnicodeDecodeError, pd.errors.ParserError) as exc:
            raise InputError(f"{path}: cannot read its star column ({exc})") from None
        first = df.iloc[:, 0].astype(str)
        stars = df.iloc[:, min(1, df.shape[1] - 1)].astype(str).str.strip()
        ids = set(stars[~first.str.lstrip().str.startswith("#")]) - {""}
        if not ids:
            raise InputError(f"{path}: its star column is empty")
        return ids
    ids = {c for c in cells if c and c.casefold() not in TABLE_COLUMNS and f"{c}_err" in cells}
    if not ids:
        raise InputError(f"{path}: neither a 'star' column nor star columns (X beside X_err) in its header")
    return ids


def _by_stars(path: Path, candidates: Sequence[FleetEntry], stars_of: dict[Path, set[str]]) -> tuple[list[FleetEntry], str]:
    """Rule 2: the candidates whose stars include every star of the file, and what was read."""
    from ..workflows.frames import is_frame_input

    if is_frame_input(path):
        return [], "a FITS frame, routed by name only"
    try:
        ids = file_star_ids(path)
    except InputError as exc:
        return [], f"its star ids cannot be read: {exc}"
    fits = [e for e in candidates if ids <= stars_of_entry(e, stars_of)]
    shown = ", ".join(sorted(ids)[:6]) + (", ..." if len(ids) > 6 else "")
    return fits, f"stars {shown}"


def stars_of_entry(entry: FleetEntry, cache: dict[Path, set[str]]) -> set[str]:
    """The star ids of an archive's target description (read once per call of :func:`route`)."""
    if entry.archive not in cache:
        from ..workflows.archive import open_archive

        cache[entry.archive] = set(open_archive(entry.archive).target.star_ids)
    return cache[entry.archive]


def route(fleet: FleetSpec | str | os.PathLike[str], files: Sequence[str | os.PathLike[str]]
          ) -> tuple[dict[Path, list[Path]], list[dict[str, str]], list[dict[str, Any]]]:
    """Assign each night file to the archive of its target (the rule: this module's docstring).

    Parameters
    ----------
    fleet
        A :class:`varstar.fleet.Fleet` or its folder.
    files
        Night files and inbox folders (expanded to their files).

    Returns
    -------
    (assignments, unmatched, ambiguous)
        ``assignments`` maps each archive path that gets files to its files (in
        the order given); ``unmatched`` lists ``{"file", "why"}``; ``ambiguous``
        lists ``{"file", "targets", "why"}``.  :func:`route_detail` also says
        which rule matched each assigned file.
    """
    assignments, unmatched, ambiguous, _rules = route_detail(fleet, files)
    return assignments, unmatched, ambiguous


def route_detail(fleet: FleetSpec | str | os.PathLike[str], files: Sequence[str | os.PathLike[str]]
                 ) -> tuple[dict[Path, list[Path]], list[dict[str, str]], list[dict[str, Any]], dict[Path, str]]:
    """:func:`route`, plus the rule each assigned file matched by (``"name"`` or ``"stars"``)."""
    fl = as_fleet(fleet)
    skip = {e.archive.resolve() for e in fl.entries}
    paths = [p for p in inbox_files(files) if p not in skip]
    assignments: dict[Path, list[Path]] = {}
    unmatched: list[dict[str, str]] = []
    ambiguous: list[dict[str, Any]] = []
    rules: dict[Path, str] = {}
    stars_cache: dict[Path, set[str]] = {}
    for p in paths:
        by_name = [e for e in fl.entries if name_matches(p.name, e.stem)]
        if len(by_name) == 1:
            assignments.setdefault(by_name[0].archive, []).append(p)
            rules[p] = "name"
            continue
        pool = by_name or list(fl.entries)
        fits, seen = _by_stars(p, pool, stars_cache)
        if len(fits) == 1:
            assignments.setdefault(fits[0].archive, []).append(p)
            rules[p] = "stars"
        elif fits or len(by_name) > 1:
            names = [e.name for e in (fits or by_name)]
            why = (f"its name starts with the archive names of {', '.join(repr(n) for n in by_name)}"
                   if len(by_name) > 1 else "its name matches no archive")
            why += f"; {seen}" + (f" fit {len(fits)} targets" if fits else " decide none of them")
            ambiguous.append({"file": str(p), "targets": names, "why": why})
        else:
            readable = seen.startswith("stars ")
            unmatched.append({"file": str(p), "why": "its name starts with no archive name of the fleet, and "
                              + (f"its {seen} are not all stars of any one target" if readable else seen)})
    return assignments, unmatched, ambiguous, rules


def routing_table(assignments: dict[Path, list[Path]], unmatched: list[dict[str, str]],
                  ambiguous: list[dict[str, Any]], rules: dict[Path, str] | None = None,
                  names: dict[Path, str] | None = None) -> pd.DataFrame:
    """One row per file: ``file``, ``status`` (matched, unmatched, ambiguous), ``archive``, ``rule``, ``why``."""
    import pandas as pd

    rows = []
    for archive, files in assignments.items():
        for f in files:
            rows.append({"file": str(f), "status": "matched", "archive": str(archive),
                         "rule": (rules or {}).get(f, ""), "why": ""})
    rows += [{"file": u["file"], "status": "unmatched", "archive": "", "rule": "", "why": u["why"]} for u in unmatched]
    rows += [{"file": a["file"], "status": "ambiguous", "archive": "", "rule": "", "why": a["why"]} for a in ambiguous]
    return pd.DataFrame(rows, columns=["file", "status", "archive", "rule", "why"])
