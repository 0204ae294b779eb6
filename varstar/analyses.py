"""Analyses of a whole archive: the shell between the archive and :mod:`varstar.period`.

Reads the light curve, calls the pure core, and records the result (with its
inputs: star, bands, nights, grid, method, software version, date) in the
archive's ``/periods`` table so the period history can be read back.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .errors import ArchiveError, InputError

if TYPE_CHECKING:  # pragma: no cover
    from .archive import Archive
    from .period import PeriodResult


#: The light-curve columns the analyses read (fewer columns read faster on long archives).
ANALYSIS_COLUMNS = ("bjd_tdb", "mag", "mag_err", "cal_err", "band", "star", "night", "transformed")


@dataclass(frozen=True, eq=False)
class StoredPeriod:
    """A period analysis of an archive with what it was run on.

    ``result`` is the core's :class:`~varstar.period.PeriodResult`; ``record`` is
    the dict stored in the archive (the result's ``to_dict()`` plus the inputs).
    ``lightcurve`` holds the points analysed (for plots).
    """

    result: PeriodResult
    record: dict[str, Any]
    lightcurve: pd.DataFrame
    analysis: int | None

    def to_dict(self) -> dict[str, Any]:
        return dict(self.record, analysis=self.analysis)


def _epoch_kind(archive: Archive) -> str | None:
    eph = archive.target.extra.get("ephemeris")
    if isinstance(eph, dict) and eph.get("kind") in ("minimum", "maximum"):
        return str(eph["kind"])
    return None


def period_of_archive(
    archive: Archive,
    *,
    band: str = "all",
    star: str | None = None,
    include_flagged: bool = False,
    store: bool = True,
    seed: int | None = None,
    timeout_s: float = 30.0,
    **options: Any,
) -> StoredPeriod:
    """Run :func:`varstar.period.analyse` on an archive's light curve and record it.

    Parameters
    ----------
    archive
        An opened archive.
    band
        A band name, or ``"all"`` for every band together (multi-band periodogram).
    star
        Star id (default: the target).
    include_flagged
        Also use points of flagged exposures (not recommended).
    store
        Append the result to the archive's ``/periods`` table (default).  Nothing
        is written when the analysis fails.
    seed
        Seed of the bootstrap's random generator (``bootstrap=N`` in ``options``).
    options
        Passed to :func:`varstar.period.analyse` (``min_period``, ``max_period``,
        ``oversampling``, ``nterms``, ``harmonics``, ``bootstrap``,
        ``single``, ...).  Each night's calibration error (``cal_err``) is passed
        with the points, so period errors include the nights' offsets.
    """
    from . import __version__
    from .archive import tables, transaction
    from .archive.store import utc_now
    from .export import plain, to_json
    from .period import analyse

    lc = archive.lightcurve(None if band == "all" else band, star, include_flagged=include_flagged, columns=ANALYSIS_COLUMNS)
    if lc.empty:
        which = "any band" if band == "all" else f"band {band}"
        raise InputError(f"{archive.path}: no good points of {star or archive.target.target_star.id} in {which}; nothing to analyse")
    if options.get("bootstrap") and seed is None:
        seed = 0  # a fixed default keeps reruns identical (Determinism in ARCHITECTURE.md)
    if options.get("epoch_kind") is None:
        options["epoch_kind"] = _epoch_kind(archive)
    res = analyse(
        lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy(), lc["mag_err"].to_numpy(), lc["band"].to_numpy(),
        night=lc["night"].to_numpy(), cal_err=lc["cal_err"].to_numpy(), rng=seed, **options,
    )
    record = plain(res.to_dict())
    record.update(
        star=str(lc["star"].iloc[0]),
        nights=sorted(set(map(str, lc["night"]))),
        include_flagged=bool(include_flagged),
        standard_system=bool(lc["transformed"].any()),
        software=f"varstar {__version__}",
        computed_utc=utc_now(),
        seed=seed,
    )
    analysis = None
    if store:
        with transaction(archive.path, timeout_s=timeout_s) as f:
            analysis = tables.n_rows(f, "periods")
            tables.append(f, "periods", {
                "analysis": [analysis],
                "computed_utc": [record["computed_utc"]],
                "software": [record["software"]],
                "star": [record["star"]],
                "bands": [",".join(res.bands)],
                "method": [res.method],
                "nterms": [res.nterms],
                "n_points": [res.n_points],
                "nights": [",".join(record["nights"])],
                "baseline_days": [res.baseline_days],
                "period": [res.period],
                "period_err": [res.period_err],
                "epoch": [res.epoch],
                "epoch_err": [res.epoch_err],
                "amplitude": [res.amplitude],
                "fap": [res.fap],
                "result": [to_json(dict(record, analysis=analysis))],
            })
    return StoredPeriod(res, record, lc, analysis)


def period_history(archive: Archive) -> pd.DataFrame:
    """Every stored period analysis, oldest first (``result`` holds the whole JSON record)."""
    from .archive import tables

    with archive._open() as f:
        if "periods" not in f:
            raise ArchiveError(f"{archive.path}: this archive has no period table")
        return pd.DataFrame(tables.read(f, "periods"))


def phased_model(res: PeriodResult, n: int = 400) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per band, one cycle of the main signal's model on a phase grid (phase 0 at the result's epoch)."""
    phase = np.linspace(0.0, 1.0, n, endpoint=False)
    return {b: (phase, res.main_model(res.epoch + phase * res.period, b)) for b in res.fits}


def phased_data(res: PeriodResult, lc: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
    """The light curve with the further frequencies removed (what folds at the adopted
    period), and the residuals of every point from the whole model."""
    main = lc.copy()
    resid = np.empty(len(lc))
    t, mag = lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy()
    for b in res.fits:
        m = (lc["band"] == b).to_numpy()
        main.loc[m, "mag"] = mag[m] - res.other_signals(t[m], b)
        resid[m] = mag[m] - res.model(t[m], b)
    return main, resid


# --------------------------------------------------------------------------- ephemerides and timings


def active_ephemeris(archive: "Archive") -> tuple[int | None, Any]:
    """The ephemeris in force: the last entry of the archive's history, else the target's ``[ephemeris]``.

    Returns ``(entry number or None, Ephemeris or None)``.
    """
    from .archive import tables
    from .timings import Ephemeris, ephemeris_from_table

    with archive._open() as f:
        if tables.has_table(f, "ephemerides") and tables.n_rows(f, "ephemerides"):
            e = tables.read(f, "ephemerides")
            i = len(e["ephemeris"]) - 1
            return int(e["ephemeris"][i]), Ephemeris(
                epoch=float(e["epoch"][i]), period=float(e["period"][i]), quadratic=float(e["quadratic"][i]),
                kind=str(e["kind"][i]), epoch_err=float(e["epoch_err"][i]), period_err=float(e["period_err"][i]),
                quadratic_err=float(e["quadratic_err"][i]))
    table = archive.target.extra.get("ephemeris")
    if table is None:
        return None, None
    if not isinstance(table, dict):
        raise InputError(f"{archive.path}: [ephemeris] in the target description must be a table")
    return None, ephemeris_from_table(table, f"{archive.path}: target [ephemeris]")


def ephemeris_history(archive: "Archive") -> pd.DataFrame:
    """Every ephemeris the archive has used, oldest first (the last is in force)."""
    from .archive import tables

    with archive._open() as f:
        if not tables.has_table(f, "ephemerides"):
            return pd.DataFrame(columns=list(tables.TABLES["ephemerides"]))
        return pd.DataFrame(tables.read(f, "ephemerides"))


def stored_timings(archive: "Archive") -> pd.DataFrame:
    """Every stored timing with night labels and band names, in time order."""
    from .archive import tables

    with archive._open() as f:
        if not tables.has_table(f, "timings"):
            return pd.DataFrame(columns=[*tables.TABLES["timings"], "night_label", "band_name"])
        t = pd.DataFrame(tables.read(f, "timings"))
        bands = tables.read(f, "bands", ["name"])["name"]
        nights = tables.read(f, "nights", ["night", "label"])
    lookup = dict(zip(nights["night"].tolist(), nights["label"].tolist()))
    t["night_label"] = [lookup.get(int(n), "?") for n in t["night"]]
    t["band_name"] = [str(bands[int(b)]) for b in t["band"]] if len(t) else []
    return t.sort_values("bjd_tdb", kind="stable").reset_index(drop=True)


def _ephemeris_row(number: int, eph: Any, source: str, now: str, fit: Any = None, note: str = "") -> dict[str, list]:
    return {
        "ephemeris": [number], "set_utc": [now], "source": [source], "kind": [eph.kind],
        "epoch": [eph.epoch], "epoch_err": [eph.epoch_err], "period": [eph.period], "period_err": [eph.period_err],
        "quadratic": [eph.quadratic], "quadratic_err": [eph.quadratic_err],
        "chi2": [fit.chi2 if fit is not None else float("nan")], "dof": [fit.dof if fit is not None else 0],
        "n_timings": [fit.n_timings if fit is not None else 0], "note": [note],
    }


def _mean_curves(lc: pd.DataFrame, eph: Any) -> dict[str, Any]:
    """Per band, the star's mean light curve as a function of the time from its maximum.

    A harmonic fit (free frequency, harmonics by AIC) of all the band's points in
    ``lc``, started at the ephemeris period; bands too short for a fit get none
    (their maxima are then timed by the symmetric methods alone).
    """
    from .errors import VarstarError
    from .period.refine import fit_harmonics_aic

    def shifted(fit):
        return lambda x: fit.model(fit.epoch_max_light + np.asarray(x))

    out = {}
    for b, g in lc.groupby("band", sort=True):
        try:
            fit = fit_harmonics_aic(g["bjd_tdb"].to_numpy(), g["mag"].to_numpy(), g["mag_err"].to_numpy(), 1.0 / eph.period)
        except VarstarError:
            continue
        if np.isfinite(fit.epoch_max_light):
            out[str(b)] = shifted(fit)
    return out


def timings_of_archive(
    archive: "Archive",
    *,
    band: str | None = None,
    kind: str | None = None,
    night: str | None = None,
    note: str = "",
    store: bool = True,
    update: bool = False,
    seed: int = 0,
    timeout_s: float = 30.0,
) -> dict[str, Any]:
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
    """
    from . import __version__
    from .archive import tables, transaction
    from .archive.store import utc_now
    from .export import plain
    from .timings import find_timings, fit_ephemeris, o_minus_c

    eph_no, eph = active_ephemeris(archive)
    if eph is None:
        raise InputError(
            f"{archive.path}: no ephemeris: add an [ephemeris] table (epoch = BJD_TDB, period = days, "
            f"kind = \"minimum\" or \"maximum\") to the target description"
        )
    whole = archive.lightcurve(band, columns=ANALYSIS_COLUMNS)
    lc = whole
    if night is not None:
        if night not in set(archive.nights()["label"]):
            raise InputError(f"{archive.path}: no night '{night}' (see 'varstar summary')")
        lc = whole[whole["night"] == night]
    if lc.empty:
        raise InputError(f"{archive.path}: no good light-curve points{' in band ' + band if band else ''}; nothing to time")
    gen = np.random.default_rng(seed)
    # the mean curves come from every night, also when only one night is timed
    templates = _mean_curves(whole, eph) if eph.kind == "maximum" else {}
    found, refused = [], []
    for (n, b), g in lc.groupby(["night", "band"], sort=True):
        ts, rs = find_timings(g["bjd_tdb"].to_numpy(), g["mag"].to_numpy(), g["mag_err"].to_numpy(), str(n), str(b),
                              eph, kind, rng=gen, template=templates.get(str(b)))
        found += ts
        refused += rs
    before = stored_timings(archive)
    have = {(r.night_label, r.band_name, r.type, float(r.cycle)) for r in before.itertuples()}
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
    fit, fit_note = None, ""
    n_cycles = int(np.unique(cycles).size)
    if n_cycles >= 2:
        fit = fit_ephemeris(cycles, times, errs, quadratic="auto", kind=eph.kind)
    else:  # one night's B and V timings of one extremum: O - C, but no new ephemeris
        fit_note = (f"no ephemeris fit: {times.size} timing{'s' if times.size != 1 else ''} at {n_cycles} cycle; "
                    "a fit needs timings at 2 or more distinct cycles")
    if update and fit is None:
        raise InputError(f"{archive.path}: --update needs timings at 2 or more distinct cycles; there "
                         f"{'are' if times.size != 1 else 'is'} {times.size} at {n_cycles}; nothing stored")

    numbers = {"timings": [], "ephemeris": None}
    if store and (new or update):
        with transaction(archive.path, timeout_s=timeout_s) as f:
            now, software = utc_now(), f"varstar {__version__}"
            if eph_no is None:  # the target's ephemeris becomes entry 0 of the history
                eph_no = 0
                tables.append(f, "ephemerides", _ephemeris_row(0, eph, "target description [ephemeris]", now))
            bands = {b: tables.code_of(f, "bands", "name", b, add=False) for b in {t.band for t in new}}
            nl = tables.read(f, "nights", ["night", "label"])
            night_no = dict(zip(nl["label"].tolist(), nl["night"].tolist()))
            first = tables.n_rows(f, "timings")
            if new:
                tables.append(f, "timings", {
                    "timing": list(range(first, first + len(new))),
                    "computed_utc": [now] * len(new), "software": [software] * len(new),
                    "night": [night_no[t.night] for t in new], "band": [bands[t.band] for t in new],
                    "type": [t.type for t in new], "method": [t.method for t in new],
                    "bjd_tdb": [t.bjd_tdb for t in new], "err": [t.err for t in new],
                    "check_method": [t.second_method for t in new], "check_bjd_tdb": [t.second_bjd_tdb for t in new],
                    "check_err": [t.second_err for t in new], "disagree": [int(t.disagree) for t in new],
                    "cycle": [t.cycle for t in new], "o_minus_c": [t.o_minus_c for t in new],
                    "ephemeris": [eph_no] * len(new), "n_points": [t.n_points for t in new],
                    "note": ["; ".join(x for x in (t.note, note) if x) for t in new],
                })
                numbers["timings"] = list(range(first, first + len(new)))
            if update:
                k = tables.n_rows(f, "ephemerides")
                tables.append(f, "ephemerides", _ephemeris_row(
                    k, fit.to_ephemeris(), f"fit of {fit.n_timings} timings ({fit.model})", now, fit, fit.note))
                numbers["ephemeris"] = k

    listing = []
    stored_rows = list(before.itertuples())
    for i in range(times.size):
        if i < len(stored_rows):
            r = stored_rows[i]
            d = {"bjd_tdb": r.bjd_tdb, "err": r.err, "method": r.method, "band": r.band_name, "type": r.type,
                 "night": r.night_label, "check_method": r.check_method, "check_bjd_tdb": r.check_bjd_tdb,
                 "check_err": r.check_err, "disagree": bool(r.disagree), "n_points": int(r.n_points),
                 "note": r.note, "new": False}
        else:
            t = new[i - len(stored_rows)]
            d = {"bjd_tdb": t.bjd_tdb, "err": t.err, "method": t.method, "band": t.band, "type": t.type,
                 "night": t.night, "check_method": t.second_method, "check_bjd_tdb": t.second_bjd_tdb,
                 "check_err": t.second_err, "disagree": bool(t.disagree), "n_points": int(t.n_points),
                 "note": "; ".join(x for x in (t.note, note) if x), "new": True}
        d.update(cycle=float(cycles[i]), o_minus_c=float(oc[i]))
        listing.append(d)
    listing.sort(key=lambda d: d["bjd_tdb"])
    return plain({
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
    })


def predict_of_archive(
    archive: "Archive",
    start: str,
    end: str,
    *,
    site_visible: bool = False,
    min_altitude_deg: float = 30.0,
    max_sun_altitude_deg: float = -12.0,
    secondary: bool | None = None,
) -> dict[str, Any]:
    """The coming extrema of the ephemeris in force between two dates, in BJD_TDB and UTC.

    With ``site_visible`` only those when the target stands at least
    ``min_altitude_deg`` high while the Sun is below ``max_sun_altitude_deg``
    (nautical twilight by default) at the target's site.
    """
    from .export import plain
    from .timescale import altitudes, bjd_tdb_to_utc, parse_utc, utc_iso
    from .timings import predict_extrema

    _, eph = active_ephemeris(archive)
    if eph is None:
        raise InputError(f"{archive.path}: no ephemeris to predict from: add an [ephemeris] table to the target description")
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
    return plain({
        "archive": str(archive.path), "target": tgt.name, "ephemeris": eph.to_dict(),
        "from_jd_utc": j0, "to_jd_utc": j1, "site_visible": bool(site_visible),
        "min_altitude_deg": min_altitude_deg, "max_sun_altitude_deg": max_sun_altitude_deg,
        "events": events,
    })
