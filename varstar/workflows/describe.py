"""Change an archive's target description after ``init``, and re-reduce the nights the change affects.

The description (stars, roles, catalogue magnitudes, site, ``[reduction]``,
``[ephemeris]``, ...) is frozen into the archive when it is created; the advice
varstar prints (exclude a variable comparison star, add a catalogue error, add
an ephemeris) needs a way to change it.  :func:`edit_target` takes a whole new
description or single keys, keeps every earlier version with its date in the
archive, re-reduces the stored nights from their raw measurements under the
new one, and stores the nights whose reduction changed, all in one atomic
change: either the new description is in force with every affected night
reduced under it, or nothing changed.  Raw measurements never change; each
night's report names the description its reduction used.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError, VarstarError
from ..results import Result
from ..target import Target, check_tables, parse_target
from .frames import check_photometry

#: Tables of a description that no night's reduction reads: ``[ephemeris]`` (timings and
#: predictions) and ``[transformation]`` (read once, when the archive is created).
NOT_REDUCTION = ("ephemeris", "transformation")


@dataclass(frozen=True)
class DescriptionResult(Result):
    """What :func:`edit_target` did (or, with ``dry_run``, would do).

    ``changes`` lists the keys that changed in words; ``rereduced`` the nights
    whose reduction changed (stored again under the new description);
    ``unchanged_nights`` the nights re-reduced with the same result (left as they
    are); ``notes`` what else the change means (timings taken out, analyses made
    from the earlier reduction, ...), each naming the command that follows it up.
    """

    archive: str
    changed: bool
    dry_run: bool
    description: int | None
    previous: int
    changes: tuple[str, ...]
    rereduced: tuple[str, ...]
    unchanged_nights: tuple[str, ...]
    timings_removed: int
    notes: tuple[str, ...]


# -- editing the text -------------------------------------------------------------------------------
def _toml_value(text: str) -> Any:
    """A value given on the command line: TOML if it reads as TOML (``12.3``, ``["C4"]``,
    ``{role = "check"}``), otherwise the text itself (``RZ Cep``, ``18:54:02.4``)."""
    import tomlkit

    try:
        return tomlkit.parse(f"v = {text}")["v"]
    except Exception:  # tomlkit raises several kinds of parse error; any of them means "plain text"
        return text.strip()


def _star_table(doc: Any, sid: str) -> Any:
    stars = doc.get("stars")
    if stars is None:
        return None
    return next((st for st in stars if st.get("id") == sid), None)


def edit_toml(text: str, sets: Sequence[str] = (), unsets: Sequence[str] = ()) -> str:
    """Apply ``KEY=VALUE`` settings and ``KEY`` removals to a description's TOML text.

    Keys are dotted paths (``reduction.exclude``, ``target.name``,
    ``ephemeris.period``); a star is addressed by its id: ``stars.C4.V`` is the
    V magnitude of the ``[[stars]]`` entry whose id is C4, and
    ``stars.C9={role = "comparison", V = 12.5}`` adds a star.  Values are TOML
    (``12.31``, ``["C4"]``, ``"text"``), or plain text when they do not read as
    TOML.  Comments and layout of the text are kept (``tomlkit``).
    """
    import tomlkit

    try:
        doc = tomlkit.parse(text)
    except Exception as exc:
        raise InputError(f"the description cannot be read as TOML: {exc}") from None
    for item in sets:
        key, sep, raw = item.partition("=")
        key = key.strip()
        if not sep or not key:
            raise InputError(f"--set {item!r}: expected KEY=VALUE (for example reduction.exclude='[\"C4\"]')")
        _set(doc, key, _toml_value(raw))
    for key in unsets:
        _unset(doc, key.strip())
    return tomlkit.dumps(doc)


def _walk(doc: Any, key: str, *, create: bool) -> tuple[Any, str]:
    """The table holding the last part of ``key``, and that part."""
    import tomlkit

    parts = [p.strip() for p in key.split(".")]
    if any(not p for p in parts):
        raise InputError(f"key {key!r}: an empty part (keys are dotted paths such as reduction.exclude)")
    node = doc
    rest = parts[:-1]
    if parts[0] == "stars":
        if len(parts) < 3:
            raise InputError(f"key {key!r}: a star's key is stars.ID.KEY (for example stars.C4.V), or stars.ID = "
                             f"{{...}} for a whole star")
        node = _star_table(doc, parts[1])
        if node is None:
            raise InputError(f"key {key!r}: the description has no star '{parts[1]}' (add it with "
                             f"--set 'stars.{parts[1]}={{role = \"comparison\", V = ...}}')")
        rest = parts[2:-1]
    for p in rest:
        nxt = node.get(p)
        if nxt is None:
            if not create:
                raise InputError(f"key {key!r}: the description has no table '{p}'")
            nxt = tomlkit.table()
            node[p] = nxt
        elif not isinstance(nxt, Mapping):
            raise InputError(f"key {key!r}: '{p}' is a value, not a table")
        node = nxt
    return node, parts[-1]


def _set(doc: Any, key: str, value: Any) -> None:
    import tomlkit

    parts = key.split(".")
    if parts[0] == "stars" and len(parts) == 2:  # a whole star
        sid = parts[1].strip()
        if not isinstance(value, Mapping):
            raise InputError(f"--set {key}: a whole star is a table, e.g. {key}={{role = \"comparison\", V = 12.5}}")
        entry = {"id": sid, **{k: v for k, v in value.items() if k != "id"}}
        old = _star_table(doc, sid)
        if old is not None:
            for k in list(old):
                if k != "id":
                    del old[k]
            for k, v in entry.items():
                old[k] = v
        elif "stars" in doc:
            doc["stars"].append(entry)
        else:
            doc["stars"] = tomlkit.aot()
            doc["stars"].append(entry)
        return
    if parts[0] == "stars" and parts[-1] == "id":
        raise InputError(f"--set {key}: a star's id names it everywhere in the archive and cannot change")
    node, last = _walk(doc, key, create=True)
    node[last] = value


def _unset(doc: Any, key: str) -> None:
    parts = key.split(".")
    if parts[0] == "stars" and len(parts) == 2:
        raise InputError(f"--unset {key}: stars stay in the description once the archive has known them (their "
                         f"measurements are stored under their id); to keep {parts[1]} out of every ensemble, use "
                         f"--set 'reduction.exclude=[\"{parts[1]}\"]'")
    node, last = _walk(doc, key, create=False)
    if last not in node:
        raise InputError(f"--unset {key}: the description has no key '{last}' there")
    del node[last]


# -- what changed --------------------------------------------------------------------------------------
_STAR = object()  # the entry that stands for a whole star in :func:`_flat`


def _flat(obj: Any, prefix: str = "") -> dict[str, Any]:
    """Dotted keys -> values; ``[[stars]]`` entries by id (``stars.C4.V``)."""
    out: dict[str, Any] = {}
    if isinstance(obj, Mapping):
        for k, v in obj.items():
            key = f"{prefix}{k}"
            if k == "stars" and not prefix and isinstance(v, list):
                for st in v:
                    if isinstance(st, Mapping):
                        sid = str(st.get("id", "?"))
                        out.update(_flat({kk: vv for kk, vv in st.items() if kk != "id"}, f"stars.{sid}."))
                        out.setdefault(f"stars.{sid}", _STAR)
            elif isinstance(v, Mapping):
                out.update(_flat(v, key + "."))
            else:
                out[key] = v
    return out


def _shown(v: Any) -> str:
    return json.dumps(v, ensure_ascii=False, default=str) if not isinstance(v, str) else json.dumps(v, ensure_ascii=False)


def describe_changes(old_text: str, new_text: str) -> list[str]:
    """The keys that differ between two descriptions, in words (``stars.C4.V: 12.3 -> 12.31``)."""
    from ..inputs import load_toml

    a, b = _flat(load_toml(old_text, "the description in force")), _flat(load_toml(new_text, "the new description"))
    lines = []
    for k in sorted(set(a) | set(b)):
        if a.get(k, _STAR) is _STAR and b.get(k, _STAR) is _STAR:  # a whole star: its keys say the rest
            if (k in a) != (k in b):
                lines.append(f"{k}: {'new star' if k in b else 'star removed'}")
        elif k not in a:
            lines.append(f"{k} = {_shown(b[k])} (new)")
        elif k not in b:
            lines.append(f"{k} (removed; was {_shown(a[k])})")
        elif a[k] != b[k]:
            lines.append(f"{k}: {_shown(a[k])} -> {_shown(b[k])}")
    return lines


def reduction_inputs(target: Target) -> dict[str, Any]:
    """What a night's reduction reads from a description (all of it but the name, ``[ephemeris]`` and
    ``[transformation]``): when two descriptions agree on it, no night needs reducing again."""
    d = target.to_dict()
    d.pop("name")
    d["ebv"], d["ebv_err"] = target.ebv, target.ebv_err
    d["extra"] = {k: v for k, v in target.extra.items() if k not in NOT_REDUCTION}
    return d


# -- comparing a new reduction with the stored one -------------------------------------------------
_NOT_COMPARED = ("sources", "warnings", "description", "accepted_unusual")


def _blank(v: Any) -> bool:
    """A report value that says "no number": null or NaN."""
    return v is None or (isinstance(v, float) and math.isnan(v))


def _same(a: Any, b: Any) -> bool:
    """Equal as the JSON of a report is (floats exactly, NaN equal to NaN and to null)."""
    if isinstance(a, Mapping) and isinstance(b, Mapping):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if _blank(a) or _blank(b):
        return _blank(a) and _blank(b)
    return a == b


def _points_key(points: pd.DataFrame) -> pd.DataFrame:
    cols = ["band", "star", "bjd_tdb", "mag", "mag_err", "cal_err", "quality"]
    return points[cols].astype({"quality": np.int64}).sort_values(["band", "star", "bjd_tdb"]).reset_index(drop=True)


def _stored_points(arch: Any, stars: Sequence[str]) -> dict[str, pd.DataFrame]:
    """Every stored light-curve point of ``stars`` (untransformed), by night label."""
    cols = ["night", "band", "star", "bjd_tdb", "mag", "mag_err", "cal_err", "quality"]
    parts = [arch.lightcurve(star=s, include_flagged=True, standard=False, columns=cols) for s in stars]
    lc = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)
    return {str(lab): g for lab, g in lc.groupby("night", sort=False)}


def _differs(red: Any, report: Mapping[str, Any], stored: pd.DataFrame | None) -> bool:
    new_rep = {k: v for k, v in json.loads(json.dumps(red.report, default=float)).items() if k not in _NOT_COMPARED}
    old_rep = {k: v for k, v in report.items() if k not in _NOT_COMPARED}
    if not _same(new_rep, old_rep):
        return True
    if stored is None:
        return not red.points.empty
    a, b = _points_key(red.points), _points_key(stored)
    return len(a) != len(b) or not a.equals(b)


# -- the whole change -------------------------------------------------------------------------------------
def edit_target(
    archive_path: str | Path,
    *,
    text: str | None = None,
    source: str | None = None,
    sets: Sequence[str] = (),
    unsets: Sequence[str] = (),
    note: str = "",
    dry_run: bool = False,
    accept_unusual: bool = False,
    timeout_s: float = 30.0,
    progress: Callable[[int, int], None] | None = None,
) -> DescriptionResult:
    """Replace or edit an archive's target description and re-reduce the nights it affects, atomically.

    Parameters
    ----------
    archive_path
        The archive.
    text
        A whole new description (TOML text); default: the one in force.
    source
        Where ``text`` came from (for messages and the history).
    sets, unsets
        Single keys to set (``"reduction.exclude=[\\"C4\\"]"``, ``"stars.C4.V_err=0.02"``)
        or remove, applied after ``text`` (:func:`edit_toml`).
    note
        Why the description changed, kept in its history.
    dry_run
        Say what would change (keys, nights) and change nothing.
    accept_unusual
        Re-reduce nights that the new description makes implausible
        (:func:`varstar.workflows.reduce.unusual_night`) anyway; a night accepted
        so at ingest is accepted again without it.
    timeout_s
        How long to wait for another writer.

    Returns
    -------
    DescriptionResult

    Notes
    -----
    A star the archive has known cannot leave the description (its measurements
    are stored under its id); exclude it from the ensemble instead.  When only
    the name, ``[ephemeris]`` or ``[transformation]`` change, no night is
    reduced again; otherwise every stored night is, and a night counts as
    affected when its report or its light-curve points differ from the stored
    ones.  A changed ``[ephemeris]`` joins the ephemeris history.  Timings of
    the re-reduced nights were measured on the old reduction and are taken out
    (``varstar timings`` measures them again).
    """
    from ..archive import open_archive
    from .reduce import reduce_night, settings_from_target
    from .standard import apply_to_reduction

    arch = open_archive(archive_path)
    old = arch.target
    old_no = arch.description_in_force()
    base = old.source_text if text is None else text
    where = source or ("the new description" if text is not None else f"{arch.path}: the description in force")
    try:
        new_text = edit_toml(base, sets, unsets) if (sets or unsets) else base
    except InputError as exc:
        raise InputError(f"{where}: {exc}; nothing changed") from None
    new = parse_target(new_text, source=where)
    check_tables(new)
    check_photometry(new)
    missing = [sid for sid in arch.star_ids() if sid not in new.star_ids]
    if missing:
        raise InputError(
            f"{where}: star(s) {', '.join(missing[:5])} are in the archive (their measurements are stored under "
            f"their ids) and must stay in the description; {_keep_out_advice(arch.path, old, missing[0])}; "
            f"nothing changed"
        )
    changes = describe_changes(old.source_text, new_text)
    if not changes:
        return DescriptionResult(str(arch.path), False, dry_run, None, old_no, (), (), (), 0,
                                 ("the new description is the one in force; nothing changed",))

    nights = arch.nights()
    rereduced: list[Any] = []
    unchanged: list[str] = []
    if reduction_inputs(new) != reduction_inputs(old) and len(nights):
        settings = settings_from_target(new)
        raw = arch.raw()
        by_night = {int(n): g.drop(columns="night").reset_index(drop=True) for n, g in raw.groupby("night", sort=False)}
        measured = [s.id for s in old.stars if s.role in ("target", "check")]
        measured += [s.id for s in new.stars if s.role in ("target", "check") and s.id not in measured]
        known = set(arch.star_ids())
        stored_pts = _stored_points(arch, [s for s in measured if s in known])
        reports = arch.night_reports()
        active = arch.active_transformation()
        for k, row in enumerate(nights.itertuples()):
            if progress is not None:
                progress(k, len(nights))
            label = str(row.night)
            report = reports[label]
            table = by_night.get(int(row.night_number))
            if table is None or table.empty:
                continue
            try:
                red = reduce_night(new, table, settings, label=label,
                                   accept_unusual=accept_unusual or bool(report.get("accepted_unusual")))
            except VarstarError as exc:
                raise InputError(f"night {label} cannot be reduced under the new description: {exc}; nothing "
                                 f"changed") from None
            if _differs(red, report, stored_pts.get(label)):
                rereduced.append(red)
            else:
                unchanged.append(label)
        if active is not None:
            for red in rereduced:
                apply_to_reduction(new, red, active)
    labels = tuple(r.label for r in rereduced)

    timings = arch.timings()
    n_timings = int(timings["night"].isin(labels).sum()) if len(timings) else 0
    notes = _notes(arch, old, new, labels, n_timings)
    number = None
    if not dry_run:
        number = old_no + 1
        for red in rereduced:
            red.report["description"] = number
        with arch.writing(timeout_s=timeout_s) as w:
            if w.description_in_force() != old_no:
                raise InputError(f"{arch.path}: another process changed the target description meanwhile; nothing "
                                 f"changed, run the command again")
            if set(w.nights()["label"]) != set(nights["night"]):
                raise InputError(f"{arch.path}: another process added or removed a night meanwhile; nothing changed, "
                                 f"run the command again")
            w.replace_reductions(rereduced)
            got = w.set_description(new, note, labels)
            assert got == number
            if "ephemeris" in new.extra and new.extra.get("ephemeris") != old.extra.get("ephemeris"):
                from ..timings import ephemeris_from_table

                eph = ephemeris_from_table(new.extra["ephemeris"], f"{where}: [ephemeris]")
                w.append_ephemeris(eph, f"target description {number} [ephemeris]")
    return DescriptionResult(str(arch.path), True, dry_run, number, old_no, tuple(changes), labels,
                             tuple(unchanged), n_timings, tuple(notes))


def _keep_out_advice(path: Any, old: Target, sid: str) -> str:
    """How to stop using a star that cannot leave the description: exclude a comparison star, keep any other."""
    from .reduce import exclude_command

    role = next((s.role for s in old.stars if s.id == sid), None)
    if role == "comparison":
        return f"to keep it out of every ensemble: {exclude_command(path, old, sid)}"
    return f"keep its [[stars]] table as it is (a {role or 'star'} never enters the ensemble)"


def _notes(arch: Any, old: Target, new: Target, labels: Sequence[str], n_timings: int) -> list[str]:
    """What else the change means, each with the command that follows it up."""
    notes = []
    if n_timings:
        notes.append(f"{n_timings} timing{'s' if n_timings != 1 else ''} of the re-reduced nights were measured on "
                     f"their earlier reduction and are taken out; measure them again with 'varstar timings {arch.path}'")
    if labels and len(arch.periods()):
        notes.append(f"the stored period analyses were made from the earlier reduction (they stay in the history); "
                     f"run 'varstar period {arch.path}' for one from the new reduction")
    if new.extra.get("transformation") != old.extra.get("transformation"):
        notes.append(f"[transformation] is read when an archive is created; to put new coefficients in force use "
                     f"'varstar transform {arch.path} --coefficients FILE'")
    if new.extra.get("ephemeris") != old.extra.get("ephemeris") and "ephemeris" in new.extra:
        notes.append("the new [ephemeris] joins the ephemeris history and is in force from now on "
                     f"('varstar predict {arch.path}' and 'varstar timings {arch.path}' use it)")
    return notes
