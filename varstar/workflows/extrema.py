"""Timings of extrema on an archive: O - C against the ephemeris in force, ephemeris fits, predictions.

:func:`timings_of_archive` times every extremum the stored nights cover
(:func:`varstar.timings.find_timings`), records the new timings and, when asked,
the fitted ephemeris, in one atomic change; :func:`predict_of_archive` lists the
coming extrema at the target's site.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import InputError, VarstarError
from ..results import Result, plain
from ..timings.estimators import MEAN_CURVE_TEMPLATE
from ..timings.search import DISAGREE_SIGMA
from .periods import ANALYSIS_COLUMNS

if TYPE_CHECKING:  # pragma: no cover
    from ..archive import ArchiveStore


@dataclass(frozen=True)
class TimingsResult(Result):
    """The timings of an archive against its ephemeris (what ``varstar timings --json`` prints).

    ``ephemeris`` is the ephemeris used (with its history ``entry``), ``timings``
    every timing stored and new with its cycle and O - C, ``refused`` the
    predicted extrema that could not be timed and why, ``fit`` the ephemeris fit
    of all timings (None with ``fit_note`` saying why), ``updated_ephemeris``
    the fitted ephemeris when it was made the archive's.
    """

    archive: str
    ephemeris: dict[str, Any]
    timings: list[dict[str, Any]]
    n_new: int
    n_found_again: int
    refused: list[dict[str, Any]]
    fit: dict[str, Any] | None
    fit_note: str
    updated_ephemeris: dict[str, Any] | None
    stored: bool


@dataclass(frozen=True)
class PredictResult(Result):
    """Coming extrema of the ephemeris in force, with the target's and the Sun's altitude at the site."""

    archive: str
    target: str
    ephemeris: dict[str, Any]
    from_jd_utc: float
    to_jd_utc: float
    site_visible: bool
    min_altitude_deg: float
    max_sun_altitude_deg: float
    events: list[dict[str, Any]]


def _ephemeris_command(path: Any) -> str:
    return (f"varstar edit-target {path} --set 'ephemeris={{epoch = BJD_TDB, period = DAYS, kind = \"minimum\"}}' "
            f"(or kind = \"maximum\"; 'varstar period {path}' finds the period)")


def active_ephemeris(archive: ArchiveStore) -> tuple[int | None, Any]:
    """The ephemeris in force: the last entry of the archive's history, else the target's ``[ephemeris]``.

    Returns ``(entry number or None, Ephemeris or None)``.
    """
    from ..timings import Ephemeris, ephemeris_from_table

    history = archive.ephemerides()
    if len(history):
        e = history.iloc[-1]
        return int(e["ephemeris"]), Ephemeris(
            epoch=float(e["epoch"]), period=float(e["period"]), quadratic=float(e["quadratic"]),
            kind=str(e["kind"]), epoch_err=float(e["epoch_err"]), period_err=float(e["period_err"]),
            quadratic_err=float(e["quadratic_err"]))
    table = archive.target.extra.get("ephemeris")
    if table is None:
        return None, None
    if not isinstance(table, dict):
        raise InputError(f"{archive.path}: [ephemeris] in the target description must be a table")
    return None, ephemeris_from_table(table, f"{archive.path}: target [ephemeris]")


def _mean_curves(lc: pd.DataFrame, eph: Any) -> dict[str, Any]:
    """Per band, the star's mean light curve as a function of the time from its maximum.

    A harmonic fit (free frequency, harmonics by AIC, each night's calibration
    error shared by its points) of all the band's points in ``lc``, started at
    the ephemeris period; bands too short for a fit get none (their maxima are
    then timed by the symmetric methods alone).
    """
    from ..period.refine import fit_harmonics_aic

    def shifted(fit):
        return lambda x: fit.model(fit.epoch_max_light + np.asarray(x))

    out = {}
    for b, g in lc.groupby("band", sort=True):
        try:
            # each night's calibration error is shared by its points (as in the period analysis): without it,
            # extra harmonics absorb the nights' offsets and move the curve's maximum (demo V: 1.5 min early)
            fit = fit_harmonics_aic(g["bjd_tdb"].to_numpy(), g["mag"].to_numpy(), g["mag_err"].to_numpy(), 1.0 / eph.period,
                                    group=pd.factorize(g["night"])[0], group_err=g["cal_err"].to_numpy())
        except VarstarError:
            continue
        if np.isfinite(fit.epoch_max_light):
            out[str(b)] = shifted(fit)
    return out


def _time_nights(
    archive: ArchiveStore, eph: Any, *, band: str | None, kind: str | None, night: str | None, seed: int,
    progress: Any = None,
) -> tuple[list[Any], list[Any]]:
    """Timings and refusals of every extremum predicted in each night and band (or one night)."""
    from ..timings import find_timings

    whole = archive.lightcurve(band, columns=ANALYSIS_COLUMNS)
    lc = whole
    if night is not None:
        archive.require_night(night)
        lc = whole[whole["night"] == night]
    if lc.empty:
        raise InputError(f"{archive.path}: no good light-curve points{' in band ' + band if band else ''}; nothing to time")
    gen = np.random.default_rng(seed)
    # the mean curves come from every night, also when only one night is timed
    templates = _mean_curves(whole, eph) if eph.kind == "maximum" else {}
    found: list[Any] = []
    refused: list[Any] = []
    groups = lc.groupby(["night", "band"], sort=True)
    for k, ((n, b), g) in enumerate(groups):
        if progress is not None:
            progress(k, groups.ngroups)
        ts, rs = find_timings(g["bjd_tdb"].to_numpy(), g["mag"].to_numpy(), g["mag_err"].to_numpy(), str(n), str(b),
                              eph, kind, rng=gen, template=templates.get(str(b)))
        found += ts
        refused += rs
    return found, refused


def _judge_disagreements(before: pd.DataFrame, new: list[Any]) -> tuple[list[Any], np.ndarray]:
    """Whether each timing (stored, then new) disagrees with its second estimate beyond the usual difference.

    :func:`varstar.timings.disagreements` over all of them, grouped by band, type
    and the pair of methods; the new timings get that verdict and a note saying
    it in place of their own night's (which could not know the usual difference).
    """
    import dataclasses

    from ..timings import disagreements

    def key(band: Any, kind: Any, method: Any, check: Any) -> str:
        # not by band: the methods' difference comes from the shape of the extremum, alike in every band,
        # and a season has few timings per band
        return f"{kind}|{method}|{check}"

    groups = [key(r.band, r.type, r.method, r.check_method) for r in before.itertuples()]
    groups += [key(t.band, t.type, t.method, t.check_method) for t in new]
    col = lambda name: np.concatenate([before[name].to_numpy(float), [getattr(t, name) for t in new]])  # noqa: E731
    methods = [(r.method, r.check_method) for r in before.itertuples()] + [(t.method, t.check_method) for t in new]
    biased = np.array([MEAN_CURVE_TEMPLATE in pair and len(set(pair)) == 2 for pair in methods], dtype=bool)
    disagree, usual = disagreements(col("bjd_tdb"), col("err"), col("check_bjd_tdb"), col("check_err"),
                                    np.asarray(groups, dtype=object), offset_expected=biased)
    judged = []
    for k, t in enumerate(new, start=len(before)):
        notes = [x for x in t.note.split("; ") if x and not x.startswith("the two estimates differ by")]
        if disagree[k]:
            diff = (t.bjd_tdb - t.check_bjd_tdb) * 1440.0
            notes.insert(0, f"the two estimates differ by {diff:+.1f} min where they usually differ by "
                            f"{usual[k] * 1440.0:+.1f} min: more than {DISAGREE_SIGMA:g} combined errors from that; "
                            f"the data of this extremum may be disturbed")
        judged.append(dataclasses.replace(t, disagree=bool(disagree[k]), note="; ".join(notes)))
    return judged, disagree


def _listing(
    before: pd.DataFrame, new: list[Any], cycles: np.ndarray, oc: np.ndarray, note: str, disagree: np.ndarray,
    in_fit: np.ndarray,
) -> list[dict[str, Any]]:
    """Every timing, stored and new, with its cycle and O - C, in time order; ``disagree`` as judged now and
    whether the ephemeris fit used it (``in_fit``)."""
    listing = []
    stored_rows = list(before.itertuples())
    for i in range(cycles.size):
        if i < len(stored_rows):
            r = stored_rows[i]
            d = {"bjd_tdb": r.bjd_tdb, "err": r.err, "method": r.method, "band": r.band, "type": r.type,
                 "night": r.night, "check_method": r.check_method, "check_bjd_tdb": r.check_bjd_tdb,
                 "check_err": r.check_err, "disagree": bool(r.disagree), "n_points": int(r.n_points),
                 "note": r.note, "new": False}
        else:
            t = new[i - len(stored_rows)]
            d = {"bjd_tdb": t.bjd_tdb, "err": t.err, "method": t.method, "band": t.band, "type": t.type,
                 "night": t.night, "check_method": t.check_method, "check_bjd_tdb": t.check_bjd_tdb,
                 "check_err": t.check_err, "disagree": bool(t.disagree), "n_points": int(t.n_points),
                 "note": "; ".join(x for x in (t.note, note) if x), "new": True}
        d.update(cycle=float(cycles[i]), o_minus_c=float(oc[i]), disagree=bool(disagree[i]), in_fit=bool(in_fit[i]))
        listing.append(d)
    listing.sort(key=lambda d: d["bjd_tdb"])
    return listing


def timings_of_archive(
    archive: ArchiveStore,
    *,
    band: str | None = None,
    kind: str | None = None,
    night: str | None = None,
    note: str = "",
    store: bool = True,
    update: bool = False,
    include_disagreeing: bool = False,
    seed: int = 0,
    timeout_s: float = 30.0,
    progress: Any = None,
) -> TimingsResult:
    """Time every extremum the light curve covers well enough; O−C; ephemeris fit.

    For each night and band, :func:`varstar.timings.find_timings` times the
    extrema the ephemeris in force predicts there (Kwee & van Woerden, with a
    symmetric-polynomial second estimate) or says why it cannot.  New timings
    are stored in ``/timings`` (a timing already stored for the same night,
    band, type and cycle is not stored twice); then all timings give O − C and a
    weighted linear and quadratic ephemeris fit.  With ``update`` the fitted
    ephemeris becomes the archive's new ephemeris (the old ones are kept).
    Everything is written in one atomic change; nothing is written when no
    extremum can be timed.

    A timing whose two estimates disagree beyond the usual difference between
    the two methods for this star (:func:`varstar.timings.disagreements`) is
    listed, marked and left out of the ephemeris fit, unless
    ``include_disagreeing`` is given.
    """
    from ..timings import fit_ephemeris, o_minus_c

    eph_no, eph = active_ephemeris(archive)
    if eph is None:
        raise InputError(
            f"{archive.path}: no ephemeris: give one with {_ephemeris_command(archive.path)}"
        )
    found, refused = _time_nights(archive, eph, band=band, kind=kind, night=night, seed=seed, progress=progress)
    before = archive.timings()
    have = {(r.night, r.band, r.type, float(r.cycle)) for r in before.itertuples()}
    new = [t for t in found if (t.night, t.band, t.type, float(t.cycle)) not in have]
    again = [t for t in found if (t.night, t.band, t.type, float(t.cycle)) in have]
    if night is not None and not found:
        why = "; ".join(f"{r.type} at BJD_TDB {r.predicted_bjd_tdb:.4f} ({r.band}): {r.reason}" for r in refused)
        raise InputError(f"{archive.path}: night {night} has no extremum that can be timed"
                         + (f": {why}" if why else " (the ephemeris predicts none during its observations)")
                         + "; nothing stored")
    if not found and before.empty:
        raise InputError(f"{archive.path}: no extremum in the light curve is covered well enough to be timed "
                         f"({len(refused)} predicted ones refused; see --json for the reasons); nothing stored")

    # All timings, stored and new, against the ephemeris in force.
    times = np.concatenate([before["bjd_tdb"].to_numpy(float), [t.bjd_tdb for t in new]])
    errs = np.concatenate([before["err"].to_numpy(float), [t.err for t in new]])
    cycles, oc = o_minus_c(times, eph, secondary_allowed=eph.kind == "minimum")
    new, disagree = _judge_disagreements(before, new)
    use = np.ones(times.size, dtype=bool) if include_disagreeing else ~disagree
    fit, fit_note = None, ""
    n_cycles = int(np.unique(cycles[use]).size)
    if n_cycles >= 2:
        fit = fit_ephemeris(cycles[use], times[use], errs[use], quadratic="auto", kind=eph.kind)
    else:  # one night's B and V timings of one extremum: O - C, but no new ephemeris
        n_use = int(use.sum())
        fit_note = (f"no ephemeris fit: {n_use} timing{'s' if n_use != 1 else ''} at {n_cycles} cycle; "
                    "a fit needs timings at 2 or more distinct cycles")
    if disagree.any():
        nights = sorted({str(x) for x in np.concatenate([before["night"].to_numpy(object), [t.night for t in new]])[disagree]})
        said = (f"{int(disagree.sum())} timing{'s' if disagree.sum() != 1 else ''} whose two estimates disagree beyond "
                f"the usual difference between the methods (night{'s' if len(nights) != 1 else ''} {', '.join(nights)})")
        said += " are in the fit (--include-disagreeing)" if include_disagreeing else \
            " left out of the fit; --include-disagreeing puts them in"
        fit_note = "; ".join(x for x in (fit_note, said) if x)
    if update and fit is None:
        n_use = int(use.sum())
        raise InputError(f"{archive.path}: --update needs timings at 2 or more distinct cycles; there "
                         f"{'are' if n_use != 1 else 'is'} {n_use} usable at {n_cycles}; nothing stored")

    numbers: dict[str, Any] = {"timings": [], "ephemeris": None}
    if store and (new or update):
        with archive.writing(timeout_s=timeout_s) as w:
            if eph_no is None:  # the target's ephemeris becomes entry 0 of the history
                eph_no = w.append_ephemeris(eph, "target description [ephemeris]")
            numbers["timings"] = w.append_timings([
                {"night": t.night, "band": t.band, "type": t.type, "method": t.method, "bjd_tdb": t.bjd_tdb,
                 "err": t.err, "check_method": t.check_method, "check_bjd_tdb": t.check_bjd_tdb,
                 "check_err": t.check_err, "disagree": int(t.disagree), "cycle": t.cycle, "o_minus_c": t.o_minus_c,
                 "ephemeris": eph_no, "n_points": t.n_points, "note": "; ".join(x for x in (t.note, note) if x)}
                for t in new
            ])
            if update:
                numbers["ephemeris"] = w.append_ephemeris(
                    fit.to_ephemeris(), f"fit of {fit.n_timings} timings ({fit.model})", fit, fit.note)

    listing = _listing(before, new, cycles, oc, note, disagree, use & (fit is not None))
    return TimingsResult(**plain({
        "archive": str(archive.path),
        "ephemeris": dict(eph.to_dict(), entry=eph_no),
        "timings": listing,
        "n_new": len(new) if store else 0,
        "n_found_again": len(again),
        "refused": [r.to_dict() for r in refused],
        "fit": None if fit is None else fit.to_dict(),
        "fit_note": fit_note,
        "updated_ephemeris": None if numbers["ephemeris"] is None else dict(fit.to_ephemeris().to_dict(), entry=numbers["ephemeris"]),
        "stored": bool(store),
    }))


def predict_of_archive(
    archive: ArchiveStore,
    start: str,
    end: str,
    *,
    site_visible: bool = False,
    min_altitude_deg: float = 30.0,
    max_sun_altitude_deg: float = -12.0,
    secondary: bool | None = None,
) -> PredictResult:
    """The coming extrema of the ephemeris in force between two dates, in BJD_TDB and UTC.

    With ``site_visible`` only those when the target stands at least
    ``min_altitude_deg`` high while the Sun is below ``max_sun_altitude_deg``
    (nautical twilight by default) at the target's site.
    """
    from ..timescale import altitudes, bjd_tdb_to_utc, parse_utc, utc_iso
    from ..timings import predict_extrema

    _, eph = active_ephemeris(archive)
    if eph is None:
        raise InputError(f"{archive.path}: no ephemeris to predict from: give one with {_ephemeris_command(archive.path)}")
    j0, j1 = parse_utc(start, what="--from"), parse_utc(end, what="--to")
    if j1 <= j0:
        raise InputError(f"--to {end} must be later than --from {start}")
    if j1 - j0 > 3660:
        raise InputError(f"--from {start} --to {end}: give at most ten years")
    if not -90 <= min_altitude_deg <= 90 or not -90 <= max_sun_altitude_deg <= 90:
        raise InputError("altitudes must be between -90 and 90 degrees")
    tgt = archive.target
    if secondary is None:
        secondary = eph.kind == "minimum"
    # BJD and JD(UTC) differ by at most ~0.006 d: widen, convert exactly, then cut
    cycles, bjd = predict_extrema(eph, j0 - 0.02, j1 + 0.02, secondary=secondary)
    utc = bjd_tdb_to_utc(bjd, tgt.ra_deg, tgt.dec_deg, tgt.site) if bjd.size else np.zeros(0)
    keep = (utc >= j0) & (utc <= j1)
    cycles, bjd, utc = cycles[keep], bjd[keep], utc[keep]
    alt = sun = np.full(utc.size, np.nan)
    if utc.size:
        alt, sun = altitudes(utc, tgt.ra_deg, tgt.dec_deg, tgt.site)
    visible = (alt >= min_altitude_deg) & (sun <= max_sun_altitude_deg)
    iso = utc_iso(utc) if utc.size else []
    kind_name = {True: "secondary", False: "primary"} if eph.kind == "minimum" else {False: "maximum", True: "maximum"}
    events = [
        {"cycle": float(c), "type": kind_name[bool(c % 1)], "bjd_tdb": float(b), "jd_utc": float(u), "utc": s,
         "target_altitude_deg": float(a), "sun_altitude_deg": float(z), "visible": bool(v)}
        for c, b, u, s, a, z, v in zip(cycles, bjd, utc, iso, alt, sun, visible)
        if v or not site_visible
    ]
    return PredictResult(**plain({
        "archive": str(archive.path), "target": tgt.name, "ephemeris": eph.to_dict(),
        "from_jd_utc": j0, "to_jd_utc": j1, "site_visible": bool(site_visible),
        "min_altitude_deg": min_altitude_deg, "max_sun_altitude_deg": max_sun_altitude_deg,
        "events": events,
    }))
