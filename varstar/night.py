"""The one orchestration of a night: read -> times -> ensemble -> archive.

:func:`reduce_night` is computation only (a tidy measurement table in, tables
and a report out); :func:`ingest` adds the file reading, duplicate detection
and the all-or-nothing write into the archive.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from . import quality as qbits
from .errors import InputError, ReductionError
from .measurements import file_sha256, is_regular_file, read_measurement_file
from .target import Target, reduction_options
from .timescale import exposure_times, night_label

#: Standard-system columns of a light-curve point (NaN / -1 until transformed).
STD_COLUMNS = ("mag_std", "mag_std_err", "cal_std_err", "bv_std", "bv_std_err", "bv_std_sys_err", "colour_gap_d", "transformation")
COMPARISON_COLUMNS = ("band", "star", "status", "reason", "offset", "excess", "chi2_dof", "tie_weight", "mean_err")
ENSEMBLE_COLUMNS = ("band", "calibration_err", "colour_extinction", "colour_extinction_err", "colour_reference", "n_kept")

if TYPE_CHECKING:  # pragma: no cover
    from .ensemble import EnsembleSettings
    from .transform import Coefficients, NightReference

# Difference between a table's own airmass and ours that deserves a warning
# (wrong coordinates, site or time zone upstream): common practice.
_AIRMASS_WARN = 0.05


@dataclass(frozen=True)
class NightReduction:
    """Everything the reduction of one night produced.

    ``exposures`` has one row per exposure (sorted by time), ``raw`` the input
    measurements with an ``exposure`` index into it, ``points`` the calibrated
    magnitudes of the target and check stars, ``comparisons`` the status of each
    comparison star per band, ``report`` the JSON-ready night summary.
    """

    label: str
    exposures: pd.DataFrame
    raw: pd.DataFrame
    points: pd.DataFrame
    comparisons: pd.DataFrame
    ensembles: pd.DataFrame
    report: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return self.report


@dataclass(frozen=True)
class IngestResult:
    """What an ingest did: the nights added, the files skipped as already ingested, the nights replaced."""

    archive: str
    nights: tuple[dict[str, Any], ...] = ()
    skipped: tuple[dict[str, str], ...] = field(default_factory=tuple)
    #: Labels of stored nights replaced by this ingest (``ingest(..., replace=True)``).
    replaced: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"archive": self.archive, "nights": list(self.nights), "skipped": list(self.skipped),
                "replaced": list(self.replaced)}


def settings_from_target(target: Target) -> EnsembleSettings:
    """Ensemble settings, with overrides from an optional ``[reduction]`` table (see :func:`varstar.target.reduction_options`)."""
    from .ensemble import EnsembleSettings  # here: scipy.special, not needed to refuse a bad file

    kw, _ = reduction_options(target)
    return EnsembleSettings(**kw)


def excluded_stars(target: Target) -> tuple[str, ...]:
    """Comparison stars the observer keeps out of every ensemble (``[reduction] exclude``)."""
    return reduction_options(target)[1]


def split_nights(target: Target, table: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Split a measurement table into nights (evening date at the site)."""
    labels = night_label(table["jd"].to_numpy(), target.site.longitude_deg)
    return {str(lab): table[labels == lab].reset_index(drop=True) for lab in np.unique(labels)}


def _sources(table: pd.DataFrame, rows: np.ndarray | None = None) -> str:
    """The file(s) some rows of a night's table came from, for messages."""
    src = table["source"].to_numpy() if rows is None else table["source"].to_numpy()[rows]
    names = sorted(pd.unique(src).tolist())
    shown = ", ".join(str(n) for n in names[:5])
    return shown + (f" and {len(names) - 5} more file(s)" if len(names) > 5 else "")


def _check_bands(target: Target, table: pd.DataFrame) -> None:
    have = target.catalog_bands()
    for band in pd.unique(table["band"]):
        if band not in have:
            rows = table[table["band"] == band]
            src, line = rows["source"].iloc[0], int(rows["line"].iloc[0])
            raise InputError(
                f"{src}, line {line}: band '{band}' has no catalogue magnitude for any comparison star in "
                f"{target.source}; add '{band} = ...' to the comparison stars there, or leave this band out"
            )


#: Largest plausible difference (mag) between two stars measured in one exposure: a 16-bit
#: detector spans 2.5 log10(65535) = 12.0 mag from one count to saturation (common practice),
#: with half a magnitude to spare for the sky and aperture sums.
DETECTOR_RANGE_MAG = 12.5


def _implausible(mag: np.ndarray, is_comparison: np.ndarray, exposure: np.ndarray, n_exp: int) -> np.ndarray:
    """Rows whose instrumental magnitude lies beyond :data:`DETECTOR_RANGE_MAG` of the median
    comparison star of the same exposure (exposures without comparison stars: none)."""
    comp = is_comparison & np.isfinite(mag)
    ref = pd.Series(mag[comp]).groupby(exposure[comp]).median().reindex(range(n_exp)).to_numpy()
    with np.errstate(invalid="ignore"):
        return np.abs(mag - ref[exposure]) > DETECTOR_RANGE_MAG


def reduce_night(
    target: Target,
    table: pd.DataFrame,
    settings: EnsembleSettings | None = None,
    label: str | None = None,
) -> NightReduction:
    """Reduce one night's tidy measurement table (see :mod:`varstar.measurements`).

    Parameters
    ----------
    target
        The target description (stars, roles, catalogue magnitudes, site).
    table
        Measurements of one night, as :func:`varstar.measurements.parse_measurements` returns.
    settings
        Ensemble settings; default from the target's ``[reduction]`` table.
    label
        Night label; default the evening date at the site.
    """
    from .ensemble import solve_ensemble

    if table.empty:
        raise InputError("no measurements to reduce")
    settings = settings or settings_from_target(target)
    _check_bands(target, table)
    if label is None:
        label = str(night_label(table["jd"].to_numpy()[:1], target.site.longitude_deg)[0])
    star_ids = list(target.star_ids)
    roles = np.array([s.role for s in target.stars])

    # Exposures: one per (frame, band), ordered by time.
    frame_code, _ = pd.factorize(table["frame"])
    band_code, band_names = pd.factorize(table["band"])
    codes, _ = pd.factorize(frame_code * len(band_names) + band_code)
    _, first = np.unique(codes, return_index=True)
    exp = table.iloc[first][["frame", "band", "jd", "airmass", "exptime_s"]].reset_index(drop=True)
    order = np.argsort(exp["jd"].to_numpy(), kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    exp = exp.iloc[order].reset_index(drop=True)
    exposure_of_row = rank[codes]

    site = target.site
    times = exposure_times(exp["jd"].to_numpy(), target.ra_deg, target.dec_deg, site.latitude_deg, site.longitude_deg, site.elevation_m)
    given = exp["airmass"].to_numpy(dtype=float)
    airmass = np.where(np.isfinite(given), given, times.airmass)
    warnings: list[str] = []
    both = np.isfinite(given) & np.isfinite(times.airmass)
    if both.any() and np.median(np.abs(given[both] - times.airmass[both])) > _AIRMASS_WARN:
        warnings.append(
            f"the table's airmass differs from the one computed for the site and target by "
            f"{np.median(np.abs(given[both] - times.airmass[both])):.2f} (median): check coordinates, site and that jd is UTC"
        )
    below = ~np.isfinite(given) & ~np.isfinite(times.airmass)
    if below.any():
        warnings.append(f"the target is below the horizon at {int(below.sum())} exposure time(s): check coordinates, site and that jd is UTC")

    n_exp = len(exp)
    zp = np.full(n_exp, np.nan)
    zp_err = np.full(n_exp, np.nan)
    cal_err = np.full(n_exp, np.nan)
    n_comp = np.zeros(n_exp, dtype=np.int64)
    flags = np.full(n_exp, "", dtype=object)
    mag_cal = np.full(len(table), np.nan)
    err_cal = np.full(len(table), np.nan)
    star_idx = pd.Index(star_ids).get_indexer(table["star"])
    excluded = excluded_stars(target)
    is_comp = (roles == "comparison") & ~np.isin(star_ids, excluded)
    comp_rows = []
    ens_rows = []
    band_reports: dict[str, Any] = {}
    exp_band = exp["band"].to_numpy()
    # The ensemble sees the stars measured tonight, not every star of the target file (which may
    # list thousands): its cost follows the night's data.  A comparison star absent all night
    # (no data, so no part in the fit) is reported below as the ensemble reports one without
    # usable measurements; it no longer enters the choice of the colour reference.
    night_stars = np.unique(star_idx)  # indices into target.stars, measured tonight
    local_star = np.full(len(star_ids), -1)
    local_star[night_stars] = np.arange(night_stars.size)
    night_names = [star_ids[i] for i in night_stars]
    night_catalog = [target.stars[i] for i in night_stars]
    n_absent = int(np.count_nonzero(is_comp & (local_star < 0)))

    # Catalogue colour of each star for the ensemble's colour-extinction term (B - V
    # when the catalogue has both; any colour index serves as the regressor).
    colour = np.array([s.catalog["B"] - s.catalog["V"] if {"B", "V"} <= set(s.catalog) else np.nan for s in night_catalog])
    for band in sorted(pd.unique(exp["band"])):
        in_band = np.flatnonzero(exp_band == band)  # global exposure indices, time order
        local = np.full(n_exp, -1)
        local[in_band] = np.arange(in_band.size)
        rows = np.flatnonzero(table["band"].to_numpy() == band)
        cat = np.array([s.catalog.get(band, np.nan) for s in night_catalog])
        cat_err = np.array([s.catalog_err.get(band, 0.0) for s in night_catalog])
        try:
            sol = solve_ensemble(
                local[exposure_of_row[rows]],
                local_star[star_idx[rows]],
                table["mag"].to_numpy()[rows],
                table["mag_err"].to_numpy()[rows],
                n_exposures=in_band.size,
                is_comparison=is_comp[night_stars],
                catalog_mag=cat,
                catalog_err=cat_err,
                time=exp["jd"].to_numpy()[in_band],
                airmass=airmass[in_band],
                good=(table["flag"].to_numpy()[rows] == 0) & np.isfinite(table["mag"].to_numpy()[rows]),
                settings=settings,
                star_names=night_names,
                colour=colour,
            )
        except ReductionError as exc:
            # The ensemble works on arrays and cannot know where they came from: say it here.
            absent = (f"; {n_absent} comparison star(s) of {target.source} have no measurement in these files"
                      if n_absent else "")
            raise ReductionError(f"{_sources(table, rows)}, band {band}: {exc}{absent}") from None
        zp[in_band] = sol.zero_point
        zp_err[in_band] = sol.zero_point_err
        cal_err[in_band] = sol.calibration_err
        n_comp[in_band] = sol.n_comparisons
        flags[in_band] = np.asarray(sol.exposure_flags, dtype=object)
        mag_cal[rows] = sol.mag
        err_cal[rows] = sol.mag_err
        # Error of each comparison star's mean magnitude: 1/sqrt(sum of its weights).
        used = sol.used
        in_fit = local_star[star_idx[rows][used]]
        w = 1.0 / (table["mag_err"].to_numpy()[rows][used] ** 2 + np.nan_to_num(sol.star_excess)[in_fit] ** 2)
        with np.errstate(divide="ignore"):
            mean_err = 1.0 / np.sqrt(np.bincount(in_fit, w, minlength=night_stars.size))
        ens_rows.append(
            {
                "band": band,
                "calibration_err": float(sol.calibration_err),
                "colour_extinction": float(sol.colour_extinction),
                "colour_extinction_err": float(sol.colour_extinction_err),
                "colour_reference": float(sol.colour_reference),
                "n_kept": int(sum(st == "kept" for st in sol.star_status)),
            }
        )
        absent_reason = f"only 0 usable measurement(s); at least {settings.min_star_points} needed"
        for i in np.flatnonzero(roles == "comparison"):
            sid, k = star_ids[i], int(local_star[i])
            out = sid in excluded
            if k < 0:  # not measured tonight: as the ensemble reports a star without usable data
                status, reason = "too_few_points", absent_reason
                values = (np.nan, np.nan, np.nan, 0.0, np.inf)
            else:
                status, reason = sol.star_status[k], sol.star_reason[k]
                values = (sol.star_offset[k], sol.star_excess[k], sol.star_chi2_dof[k], sol.tie_weight[k], mean_err[k])
            comp_rows.append(
                {
                    "band": band,
                    "star": sid,
                    "status": "excluded" if out else status,
                    "reason": "excluded by [reduction] exclude in the target file" if out else reason,
                    **{key: float(v) for key, v in zip(("offset", "excess", "chi2_dof", "tie_weight", "mean_err"), values)},
                }
            )
        summary = sol.to_dict()
        for entry in summary["stars"]:  # the index of each star in the target file, as before
            entry["index"] = int(night_stars[entry["index"]])
        band_reports[band] = {"ensemble": summary}

    exposures = pd.DataFrame(
        {
            "frame": exp["frame"].astype(str).to_numpy(dtype=object),
            "band": exp_band,
            "jd_utc": exp["jd"].to_numpy(),
            "bjd_tdb": times.bjd_tdb,
            "hjd_utc": times.hjd_utc,
            "airmass": airmass,
            "airmass_given": given,
            "exptime_s": exp["exptime_s"].to_numpy(dtype=float),
            "zero_point": zp,
            "zero_point_err": zp_err,
            "calibration_err": cal_err,
            "n_comparisons": n_comp,
            "flags": flags,
        }
    )
    raw = table.copy()
    raw["exposure"] = exposure_of_row

    measured = (roles[star_idx] != "comparison") & np.isfinite(table["mag"].to_numpy())
    e_rows = exposure_of_row[measured]
    implausible = _implausible(table["mag"].to_numpy(), is_comp[star_idx], exposure_of_row, n_exp)[measured]
    for sid in pd.unique(table["star"].to_numpy(dtype=object)[measured][implausible]):
        n_bad = int(np.count_nonzero(implausible & (table["star"].to_numpy(dtype=object)[measured] == sid)))
        warnings.append(
            f"{n_bad} measurement(s) of {sid} lie more than {DETECTOR_RANGE_MAG:g} mag from the comparison stars "
            "of the same exposure, beyond what one exposure of a detector can record: flagged "
            "(implausible_magnitude), not reduced; check the file's magnitude column"
        )
    quality = (
        np.where(flags[e_rows] != "", qbits.EXPOSURE_FLAGGED, 0)
        | np.where(table["flag"].to_numpy()[measured] != 0, qbits.UPSTREAM_FLAG, 0)
        | np.where(np.isfinite(zp[e_rows]), 0, qbits.NO_ZERO_POINT)
        | np.where(implausible, qbits.IMPLAUSIBLE, 0)
    ).astype(np.uint8)
    points = pd.DataFrame(
        {
            "exposure": e_rows,
            "star": table["star"].to_numpy(dtype=object)[measured],
            "band": exp_band[e_rows],
            "bjd_tdb": times.bjd_tdb[e_rows],
            "mag": mag_cal[measured],
            "mag_err": err_cal[measured],
            "cal_err": cal_err[e_rows],
            "quality": quality,
            **{k: np.full(int(measured.sum()), -1 if k == "transformation" else np.nan) for k in STD_COLUMNS},
        }
    )
    comparisons = pd.DataFrame(comp_rows, columns=list(COMPARISON_COLUMNS))
    ensembles = pd.DataFrame(ens_rows, columns=list(ENSEMBLE_COLUMNS))
    report = _night_report(target, label, table, exposures, points, comparisons, band_reports, warnings)
    return NightReduction(label, exposures, raw, points, comparisons, ensembles, report)


def _stats(mag: np.ndarray, err: np.ndarray) -> dict[str, float]:
    return {
        "n": int(mag.size),
        "mean": float(np.mean(mag)) if mag.size else float("nan"),
        "rms": float(np.std(mag, ddof=1)) if mag.size > 1 else float("nan"),
        "predicted_rms": float(np.sqrt(np.mean(err**2))) if mag.size else float("nan"),
    }


def _night_report(
    target: Target,
    label: str,
    table: pd.DataFrame,
    exposures: pd.DataFrame,
    points: pd.DataFrame,
    comparisons: pd.DataFrame,
    band_reports: dict[str, Any],
    warnings: list[str],
) -> dict[str, Any]:
    tid = target.target_star.id
    bands: dict[str, Any] = {}
    for band, info in band_reports.items():
        ex = exposures[exposures["band"] == band]
        flagged = ex[ex["flags"] != ""]
        reasons: dict[str, int] = {}
        for fl in flagged["flags"]:
            for r in str(fl).split(";"):
                reasons[r] = reasons.get(r, 0) + 1
        comp = comparisons[comparisons["band"] == band]
        in_band = points[points["band"] == band]
        good = in_band[in_band["quality"] == 0]
        tgt = good[good["star"] == tid]
        # Each check star measured in this band (one grouping, not one scan of the points per star of
        # the target: a target file may list thousands of stars).
        measured = set(pd.unique(in_band["star"]))
        by_star = {sid: g for sid, g in good.groupby("star", sort=False)}
        checks = {}
        for s in target.stars_with_role("check"):
            if s.id not in measured:
                continue
            g = by_star.get(s.id, good.iloc[:0])
            st = _stats(g["mag"].to_numpy(), g["mag_err"].to_numpy())
            st["catalog"] = s.catalog.get(band)
            st["offset_from_catalog"] = (st["mean"] - s.catalog[band]) if band in s.catalog and len(g) else None
            checks[s.id] = st
        bands[band] = {
            "n_exposures": int(len(ex)),
            "n_used": int(len(ex) - len(flagged)),
            "n_flagged": int(len(flagged)),
            "flag_reasons": reasons,
            "flagged_frames": [{"frame": str(r.frame), "jd_utc": float(r.jd_utc), "reasons": str(r.flags)} for r in flagged.itertuples()],
            "comparisons_kept": comp.loc[comp["status"] == "kept", "star"].tolist(),
            "comparisons_rejected": [
                {"star": str(r.star), "status": str(r.status), "reason": str(r.reason)} for r in comp.itertuples() if r.status not in ("kept", "not_comparison")
            ],
            "calibration_err": float(ex["calibration_err"].iloc[0]) if len(ex) else float("nan"),
            "median_zero_point_err": float(np.nanmedian(ex["zero_point_err"])) if len(ex) else float("nan"),
            "target": {
                "n": int(len(tgt)),
                "mag_min": float(tgt["mag"].min()) if len(tgt) else None,
                "mag_max": float(tgt["mag"].max()) if len(tgt) else None,
                "median_mag_err": float(tgt["mag_err"].median()) if len(tgt) else None,
            },
            "check_stars": checks,
            "ensemble": info["ensemble"],
        }
    return {
        "night": label,
        "sources": sorted(pd.unique(table["source"]).tolist()),
        "n_measurements": int(len(table)),
        "n_exposures": int(len(exposures)),
        "n_flagged": int((exposures["flags"] != "").sum()),
        "bjd_start": float(exposures["bjd_tdb"].min()),
        "bjd_end": float(exposures["bjd_tdb"].max()),
        "bands": bands,
        "warnings": warnings,
    }


def ingest(
    archive_path: str | Path,
    files: Sequence[str | Path],
    *,
    columns: Mapping[str, str] | None = None,
    settings: EnsembleSettings | None = None,
    timeout_s: float = 30.0,
    replace: bool = False,
) -> IngestResult:
    """Reduce measurement files and add them to an archive, all or nothing.

    Files whose exact content is already in the archive are skipped (content
    hash).  The rows are grouped into nights by evening date; a night already in
    the archive is refused (remove it first to re-reduce it), unless
    ``replace`` is given: then no file is skipped, and every night the files
    hold replaces the stored night of the same date whole, in the same atomic
    change (the old night's removal is recorded in ``/removals``, as by
    :func:`remove_night`).  That is how a night stored from an incomplete file
    is replaced by the complete one.  Everything is computed before the archive
    is opened for writing.

    A regular file is hashed first (read in bounded blocks) and then read and
    checked piece by piece (:func:`varstar.measurements.read_measurement_file`),
    which stops at the first fault; a pipe is read once.
    """
    from .archive import open_archive, tables, transaction
    from .archive.store import utc_now

    arch = open_archive(archive_path)
    target = arch.target
    if not files:
        raise InputError("no measurement files given")
    with arch._open() as f:
        known = set(tables.read(f, "sources", ["sha256"])["sha256"])
        labels_before = set(tables.read(f, "nights", ["label"])["label"])
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
        t, h_read = read_measurement_file(p, target.star_ids, columns)
        if h is not None and h_read != h:
            raise InputError(f"{p}: the file changed while it was being read; nothing was written, ingest again")
        if h_read in seen_here or (h_read in known and not replace):
            skipped.append({"file": str(p), "sha256": h_read, "why": "already ingested (same content)"})
            continue
        seen_here.add(h_read)
        parsed.append((p, t, h_read))
    if not parsed:
        return IngestResult(str(arch.path), (), tuple(skipped))
    settings = settings or settings_from_target(target)
    if len(parsed) > 1:
        for p, t, _ in parsed:
            t["frame"] = p.name + ":" + t["frame"].astype(str)
    table = pd.concat([t for _, t, _ in parsed], ignore_index=True)
    nights = split_nights(target, table)
    stored = sorted(set(nights) & labels_before)
    if stored and not replace:
        lab = stored[0]
        raise InputError(
            f"night {lab} is already in {arch.path}; ingest all files of a night together (the archive never "
            f"changes a night once stored); to replace the stored night with these files (say it was ingested "
            f"from an incomplete file), ingest again with --replace (or take it out with "
            f"'varstar remove-night {arch.path} {lab}' first)"
        )
    reductions = [reduce_night(target, t, settings, label=lab) for lab, t in sorted(nights.items())]
    _add_history_notes(arch.comparisons(last_nights=HISTORY_NIGHTS), reductions)
    with arch._open() as f:
        active = active_transformation(f)
    if active is not None:
        for red in reductions:
            _apply_to_reduction(target, red, active)
    sha_of = {str(p): h for p, _, h in parsed}
    names = ", ".join(sorted({p.name for p, _, _ in parsed}))

    with transaction(arch.path, timeout_s=timeout_s) as f:
        # Re-check under the lock: another process may have ingested meanwhile.
        now_nights = tables.read(f, "nights", ["night", "label"])
        if not replace:
            if set(tables.read(f, "sources", ["sha256"])["sha256"]) & set(sha_of.values()):
                raise InputError(f"{arch.path}: another process ingested some of these files meanwhile; nothing was written")
            if set(now_nights["label"]) & set(nights):
                raise InputError(f"{arch.path}: another process ingested one of these nights meanwhile; nothing was written")
        else:
            src = tables.read(f, "sources", ["night", "sha256"])
            dropping = {int(n) for n, lab in zip(now_nights["night"], now_nights["label"]) if lab in nights}
            elsewhere = {h for n, h in zip(src["night"], src["sha256"]) if int(n) not in dropping}
            if elsewhere & set(sha_of.values()):
                raise InputError(f"{arch.path}: some of these files are stored with another night; nothing was written")
        now_active = active_transformation(f)
        if (now_active and now_active[0]) != (active and active[0]):
            raise InputError(f"{arch.path}: another process changed the transformation meanwhile; nothing was written, ingest again")
        now = utc_now()
        replaced = []
        if replace:
            for n, lab in zip(now_nights["night"], now_nights["label"]):
                if lab in nights:
                    _drop_night(f, int(n), str(lab), reason=f"replaced by a new ingest of {names}", now=now)
                    replaced.append(str(lab))
        for red in reductions:
            _write_night(f, red, sha_of, now)
    return IngestResult(str(arch.path), tuple(r.report for r in reductions), tuple(skipped), tuple(sorted(replaced)))


#: How many of the latest stored nights the comparison-star history note looks back on:
#: a season's worth (our choice), so its cost does not grow with the archive.
HISTORY_NIGHTS = 100


def _add_history_notes(history: pd.DataFrame, reductions: Sequence[NightReduction]) -> None:
    """Warn when a comparison star kept tonight was found variable on earlier nights.

    A slowly varying comparison star may pass one night's test (near an
    extremum its magnitude hardly changes within a few hours) while its mean
    is off; the observer should decide to exclude it for good.
    """
    seen: dict[str, set[str]] = {}
    for r in history.itertuples():
        if r.status == "variable":
            seen.setdefault(str(r.star), set()).add(str(r.night_label))
    for red in reductions:
        kept = set(red.comparisons.loc[red.comparisons["status"] == "kept", "star"])
        for star in sorted(kept):
            earlier = seen.get(star, set())
            if len(earlier) >= 2:
                red.report["warnings"].append(
                    f"comparison star {star} passed tonight's test but was found variable on {len(earlier)} earlier "
                    f"night(s) (latest: {', '.join(sorted(earlier)[-3:])}); if it is variable, keep it out of every ensemble "
                    f"with [reduction] exclude = [\"{star}\"] in the target file"
                )
        for r in red.comparisons.itertuples():
            if r.status == "variable":
                seen.setdefault(str(r.star), set()).add(red.label)


def _write_night(f, red: NightReduction, sha_of: Mapping[str, str], now: str) -> None:
    from . import __version__
    from .archive import tables

    from .archive.integrity import night_digests_of_range
    from .archive.layout import DIGEST_COLUMNS

    stars = list(tables.read(f, "stars", ["id"])["id"])
    # never reuse the number of a removed night: its removal record keeps it
    used = np.concatenate([tables.read(f, "nights", ["night"])["night"], tables.read(f, "removals", ["night"])["night"]])
    night_id = int(used.max()) + 1 if used.size else 0
    starts = {t: tables.n_rows(f, t) for t in DIGEST_COLUMNS}
    band_code = {b: tables.code_of(f, "bands", "name", b, add=True) for b in sorted(pd.unique(red.exposures["band"]))}
    # Sources of this night.
    src_names = sorted(pd.unique(red.raw["source"]))
    first_src = tables.n_rows(f, "sources")
    tables.append(
        f,
        "sources",
        {
            "night": [night_id] * len(src_names),
            "name": [Path(s).name for s in src_names],
            "sha256": [sha_of[s] for s in src_names],
            "n_rows": [int((red.raw["source"] == s).sum()) for s in src_names],
        },
    )
    src_code = {s: first_src + k for k, s in enumerate(src_names)}
    e = red.exposures
    first_exp = tables.append(
        f,
        "exposures",
        {
            "night": np.full(len(e), night_id),
            "frame": e["frame"].to_numpy(),
            "band": e["band"].map(band_code).to_numpy(),
            **{c: e[c].to_numpy() for c in ("jd_utc", "bjd_tdb", "hjd_utc", "airmass", "airmass_given", "exptime_s", "zero_point", "zero_point_err", "calibration_err", "n_comparisons", "flags")},
        },
    )
    r = red.raw
    star_code = pd.Index(stars).get_indexer(r["star"])
    tables.append(
        f,
        "raw",
        {
            "night": np.full(len(r), night_id),
            "exposure": first_exp + r["exposure"].to_numpy(),
            "star": star_code,
            "mag": r["mag"].to_numpy(),
            "mag_err": r["mag_err"].to_numpy(),
            "flag": r["flag"].to_numpy(),
            "source": r["source"].map(src_code).to_numpy(),
            "line": r["line"].to_numpy(),
        },
    )
    p = red.points
    tables.append(
        f,
        "points",
        {
            "night": np.full(len(p), night_id),
            "exposure": first_exp + p["exposure"].to_numpy(),
            "star": pd.Index(stars).get_indexer(p["star"]),
            "band": p["band"].map(band_code).to_numpy(),
            "bjd_tdb": p["bjd_tdb"].to_numpy(),
            "mag": p["mag"].to_numpy(),
            "mag_err": p["mag_err"].to_numpy(),
            "cal_err": p["cal_err"].to_numpy(),
            "quality": p["quality"].to_numpy(),
            **{k: p[k].to_numpy() for k in STD_COLUMNS},
        },
    )
    c = red.comparisons
    tables.append(
        f,
        "comparisons",
        {
            "night": np.full(len(c), night_id),
            "band": c["band"].map(band_code).to_numpy(),
            "star": pd.Index(stars).get_indexer(c["star"]),
            **{k: c[k].to_numpy() for k in COMPARISON_COLUMNS[2:]},
        },
    )
    en = red.ensembles
    tables.append(
        f,
        "ensembles",
        {
            "night": np.full(len(en), night_id),
            "band": en["band"].map(band_code).to_numpy(),
            **{k: en[k].to_numpy() for k in ENSEMBLE_COLUMNS[1:]},
        },
    )
    tables.append(
        f,
        "nights",
        {
            "night": [night_id],
            "label": [red.label],
            "ingested_utc": [now],
            "software": [f"varstar {__version__}"],
            "n_exposures": [len(e)],
            "n_flagged": [int((e["flags"] != "").sum())],
            "n_points": [len(p)],
            "bjd_start": [red.report["bjd_start"]],
            "bjd_end": [red.report["bjd_end"]],
            "report": [json.dumps(red.report, allow_nan=True)],
        },
    )
    # the night's checksums, from the rows just written (cost independent of the archive's size)
    ranges = {t: (starts[t], tables.n_rows(f, t)) for t in DIGEST_COLUMNS}
    tables.append(f, "digests", night_digests_of_range(f, night_id, ranges))


# -- transformation to the standard system ---------------------------------------------


def night_reference_from_tables(
    target: Target,
    coeffs: "Coefficients",
    comparisons: pd.DataFrame,
    ensembles: pd.DataFrame,
) -> "NightReference":
    """The colour reference of one night from its comparison-star and ensemble tables.

    ``comparisons`` and ``ensembles`` hold one night (columns as
    :data:`COMPARISON_COLUMNS` and :data:`ENSEMBLE_COLUMNS`); both bands must be there.
    """
    from .transform import night_reference

    comps = target.stars_with_role("comparison")
    ids = [s.id for s in comps]

    def band_values(band: str, col: str) -> np.ndarray:
        sub = comparisons[comparisons["band"] == band].set_index("star")
        return sub[col].reindex(ids).to_numpy(dtype=float)

    def cat(band: str, err: bool = False) -> np.ndarray:
        return np.array([(s.catalog_err if err else s.catalog).get(band, np.nan) for s in comps], dtype=float)

    ens = ensembles.set_index("band")
    return night_reference(
        cat("B"), cat("B", True), cat("V"), cat("V", True),
        cat("B") + band_values("B", "offset"), band_values("B", "mean_err"),
        cat("V") + band_values("V", "offset"), band_values("V", "mean_err"),
        band_values("V", "tie_weight"),
        coeffs,
        kappa_b=float(ens.loc["B", "colour_extinction"]),
        kappa_b_err=float(ens.loc["B", "colour_extinction_err"]),
        kappa_v=float(ens.loc["V", "colour_extinction"]),
        kappa_v_err=float(ens.loc["V", "colour_extinction_err"]),
        cref_b=float(ens.loc["B", "colour_reference"]),
        cref_v=float(ens.loc["V", "colour_reference"]),
        cal_err_b=float(ens.loc["B", "calibration_err"]),
        cal_err_v=float(ens.loc["V", "calibration_err"]),
    )


def standardise_night(
    target: Target,
    coeffs: "Coefficients",
    max_gap_d: float,
    points: pd.DataFrame,
    airmass: np.ndarray,
    comparisons: pd.DataFrame,
    ensembles: pd.DataFrame,
) -> tuple[dict[str, np.ndarray], list[str]]:
    """Standard-system values for the points of one night.

    Parameters
    ----------
    points
        The night's light-curve points (columns ``star, band, bjd_tdb, mag,
        mag_err, cal_err, quality``), any order.
    airmass
        Airmass of each point's exposure (same order as ``points``).

    Returns
    -------
    (columns, notes)
        ``columns`` maps each of :data:`STD_COLUMNS` but ``transformation`` to an
        array aligned with ``points`` (NaN where not transformed); ``notes`` says
        why points were left untransformed.  Only good points (quality 0) are
        transformed and serve as the other band's samples.
    """
    from .transform import transform_target

    n = len(points)
    out = {k: np.full(n, np.nan) for k in STD_COLUMNS if k != "transformation"}
    bands = set(ensembles["band"])
    if not {"B", "V"} <= bands:
        missing = " and ".join(sorted({"B", "V"} - bands))
        return out, [f"not transformed: no {missing} exposures this night (the transformation needs both B and V)"]
    ref = night_reference_from_tables(target, coeffs, comparisons, ensembles)
    notes: list[str] = []
    star = points["star"].to_numpy()
    band = points["band"].to_numpy()
    good = points["quality"].to_numpy() == 0
    t = points["bjd_tdb"].to_numpy()
    mag = points["mag"].to_numpy()
    err = points["mag_err"].to_numpy()
    for sid in pd.unique(star):
        iv = np.flatnonzero((star == sid) & (band == "V") & good)
        ib = np.flatnonzero((star == sid) & (band == "B") & good)
        if iv.size == 0 or ib.size == 0:
            continue
        res = transform_target(t[iv], mag[iv], err[iv], airmass[iv], t[ib], mag[ib], err[ib], airmass[ib], ref, coeffs, max_gap_d=max_gap_d)
        for idx, tb in ((iv, res.V), (ib, res.B)):
            out["mag_std"][idx] = tb.mag
            out["mag_std_err"][idx] = tb.mag_err
            # The night's systematic part: calibration tie, reference colour, coefficients.
            out["cal_std_err"][idx] = tb.sys_err
            out["bv_std"][idx] = tb.colour
            out["bv_std_err"][idx] = tb.colour_err
            out["bv_std_sys_err"][idx] = tb.colour_sys_err
            out["colour_gap_d"][idx] = np.where(tb.ok, tb.gap_d, np.nan)
        refused = int((~res.V.ok).sum() + (~res.B.ok).sum())
        if refused:
            notes.append(
                f"{sid}: {refused} exposure(s) not transformed: no exposure of the other band within "
                f"{max_gap_d * 1440:.0f} min"
            )
        if not (res.V.ok.any() or res.B.ok.any()):
            notes.append(f"{sid}: B and V exposures never come within {max_gap_d * 1440:.0f} min of each other")
    return out, notes


def active_transformation(f) -> tuple[int, "Coefficients", float] | None:
    """The archive's current coefficients (the last ``/transformations`` row), if any."""
    from .archive import tables
    from .transform import Coefficients

    rows = tables.read(f, "transformations")
    if rows["transformation"].size == 0:
        return None
    k = -1
    coeffs = Coefficients(
        epsilon_v=float(rows["epsilon_v"][k]),
        epsilon_v_err=float(rows["epsilon_v_err"][k]),
        mu_bv=float(rows["mu_bv"][k]),
        mu_bv_err=float(rows["mu_bv_err"][k]),
        k2_bv=float(rows["k2_bv"][k]),
        k2_bv_err=float(rows["k2_bv_err"][k]),
        source=str(rows["source"][k]),
    )
    return int(rows["transformation"][k]), coeffs, float(rows["max_gap_d"][k])


def add_transformation(f, coeffs: "Coefficients", max_gap_d: float, now: str) -> int:
    """Append a coefficient set to ``/transformations``; return its id."""
    from .archive import tables

    tid = tables.n_rows(f, "transformations")
    tables.append(
        f,
        "transformations",
        {
            "transformation": [tid],
            "set_utc": [now],
            "source": [coeffs.source],
            **{k: [float(getattr(coeffs, k))] for k in ("epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "k2_bv", "k2_bv_err")},
            "max_gap_d": [max_gap_d],
        },
    )
    return tid


def _apply_to_reduction(target: Target, red: NightReduction, active: tuple[int, "Coefficients", float]) -> None:
    """Fill the standard-system columns of a fresh night (at ingest)."""
    tid, coeffs, gap = active
    p = red.points
    airmass = red.exposures["airmass"].to_numpy()[p["exposure"].to_numpy()]
    cols, notes = standardise_night(target, coeffs, gap, p, airmass, red.comparisons, red.ensembles)
    if {"B", "V"} <= set(red.ensembles["band"]) and not np.isfinite(cols["mag_std"]).any():
        raise InputError(
            f"{_sources(red.raw)} (night {red.label}): the B and V exposures never come within {gap * 1440:.0f} min of each other, so no "
            f"colour can be paired for the transformation; check that the files belong to the same night, or raise "
            f"[transformation] max_gap_minutes"
        )
    for k, v in cols.items():
        p[k] = v
    p["transformation"] = np.where(np.isfinite(cols["mag_std"]), tid, -1)
    red.report["transformation"] = _transformation_summary(coeffs, gap, p, notes, target)


def _transformation_summary(coeffs: "Coefficients", gap: float, p: pd.DataFrame, notes: list[str], target: Target) -> dict[str, Any]:
    done = np.isfinite(p["mag_std"].to_numpy())
    tid = target.target_star.id
    tgt = p[(p["star"] == tid) & done]
    summary: dict[str, Any] = {
        "coefficients": coeffs.to_dict(),
        "max_gap_minutes": gap * 1440.0,
        "n_transformed": int(done.sum()),
        "n_points": int(len(p)),
        "notes": notes,
    }
    if len(tgt):
        summary["target"] = {
            "bv_min": float(tgt["bv_std"].min()),
            "bv_max": float(tgt["bv_std"].max()),
            "median_bv_err": float(tgt["bv_std_err"].median()),
            "by_band": {
                str(b): {"mag_min": float(g["mag_std"].min()), "mag_max": float(g["mag_std"].max()),
                         "mean_shift": float((g["mag_std"] - g["mag"]).mean())}
                for b, g in tgt.groupby("band")
            },
        }
    return summary


def transform_archive(
    archive_path: str | Path,
    coeffs: "Coefficients",
    max_gap_d: float,
    *,
    timeout_s: float = 30.0,
) -> dict[str, Any]:
    """Apply (new) coefficients to every night of an archive, all or nothing.

    The coefficient set is added to the archive's transformation history and
    every light-curve point's standard-system columns are recomputed with it;
    the untransformed values are never touched.
    """
    from .archive import open_archive, tables, transaction
    from .archive.store import utc_now

    arch = open_archive(archive_path)
    target = arch.target
    per_night: list[dict[str, Any]] = []
    with transaction(arch.path, timeout_s=timeout_s) as f:
        nights = tables.read(f, "nights", ["night", "label"])
        if nights["night"].size == 0:
            raise InputError(f"{arch.path}: no nights to transform yet; ingest some first")
        stars = tables.read(f, "stars", ["id"])["id"]
        bands = tables.read(f, "bands", ["name"])["name"]
        p = tables.read(f, "points")
        e_air = tables.read(f, "exposures", ["airmass"])["airmass"]
        c = tables.read(f, "comparisons")
        en = tables.read(f, "ensembles")
        pts = pd.DataFrame({
            "night": p["night"], "star": stars[p["star"]] if p["star"].size else [], "band": bands[p["band"]] if p["band"].size else [],
            "bjd_tdb": p["bjd_tdb"], "mag": p["mag"], "mag_err": p["mag_err"], "cal_err": p["cal_err"], "quality": p["quality"],
        })
        comps = pd.DataFrame({**{k: c[k] for k in COMPARISON_COLUMNS[2:]}, "night": c["night"],
                              "band": bands[c["band"]] if c["band"].size else [], "star": stars[c["star"]] if c["star"].size else []})
        ens = pd.DataFrame({**{k: en[k] for k in ENSEMBLE_COLUMNS[1:]}, "night": en["night"],
                            "band": bands[en["band"]] if en["band"].size else []})
        tid = add_transformation(f, coeffs, max_gap_d, utc_now())
        new = {k: np.full(len(pts), -1 if k == "transformation" else np.nan) for k in STD_COLUMNS}
        for night_id, label in zip(nights["night"], nights["label"]):
            rows = np.flatnonzero(p["night"] == night_id)
            sub = pts.iloc[rows]
            cols, notes = standardise_night(
                target, coeffs, max_gap_d, sub, e_air[p["exposure"][rows]],
                comps[comps["night"] == night_id], ens[ens["night"] == night_id],
            )
            for k, v in cols.items():
                new[k][rows] = v
            new["transformation"][rows] = np.where(np.isfinite(cols["mag_std"]), tid, -1)
            per_night.append({"night": str(label), "n_points": int(rows.size),
                              "n_transformed": int(np.isfinite(cols["mag_std"]).sum()), "notes": notes})
        if not np.isfinite(new["mag_std"]).any():
            raise InputError(
                f"{arch.path}: no night has B and V exposures that can be paired within {max_gap_d * 1440:.0f} min; "
                f"nothing was transformed and the archive is unchanged"
            )
        for k, v in new.items():
            f["points"][k][...] = v
    return {"archive": str(arch.path), "transformation": tid, "coefficients": coeffs.to_dict(),
            "max_gap_minutes": max_gap_d * 1440.0, "nights": per_night}


# -- undo ------------------------------------------------------------------------------


def remove_night(archive_path: str | Path, label: str, *, reason: str = "", timeout_s: float = 30.0) -> dict[str, Any]:
    """Take a wrongly ingested night out of an archive again, keeping a record that it was.

    Every row of the night goes (sources, exposures, raw measurements, points,
    comparison and ensemble results, timings, checksums, the night itself) in one
    atomic change; the row numbers other tables hold into ``/exposures`` and
    ``/sources`` are renumbered.  ``/removals`` records what was removed, when and
    why; the night's files can then be ingested again.  Stored period analyses are
    history and stay.
    """
    from .archive import open_archive, tables, transaction
    from .archive.store import utc_now

    arch = open_archive(archive_path)
    with transaction(arch.path, timeout_s=timeout_s) as f:
        nights = tables.read(f, "nights", ["night", "label"])
        hit = np.flatnonzero(nights["label"] == label)
        if hit.size == 0:
            known = ", ".join(nights["label"].tolist()[-5:]) or "none"
            raise InputError(f"{arch.path}: no night '{label}' (nights are evening dates YYYY-MM-DD; latest: {known}); nothing changed")
        record = _drop_night(f, int(nights["night"][int(hit[0])]), label, reason=reason, now=utc_now())
    return {"archive": str(arch.path), **record}


def _drop_night(f, night_id: int, label: str, *, reason: str, now: str) -> dict[str, Any]:
    """Take every row of one night out of an open transaction and record the removal in ``/removals``.

    The row numbers other tables hold into ``/exposures`` and ``/sources`` are
    renumbered.  Returns what :func:`remove_night` reports.
    """
    from . import __version__
    from .archive import tables

    nights = tables.read(f, "nights", ["night", "n_exposures", "n_points"])
    i = int(np.flatnonzero(nights["night"] == night_id)[0])
    src = tables.read(f, "sources", ["night", "name"])
    names = sorted(set(src["name"][src["night"] == night_id].tolist()))
    remap = {}
    for ref, col in (("exposures", "exposure"), ("sources", "source")):
        keep = f[ref]["night"][()] != night_id
        remap[col] = np.cumsum(keep) - 1  # old row -> new row (rows that stay)
    for t in ("raw", "points", "exposures", "sources", "comparisons", "ensembles", "timings", "digests"):
        keep = f[t]["night"][()] != night_id
        tables.keep_rows(f, t, keep, {c: m for c, m in remap.items() if c in tables.TABLES[t]})
    tables.keep_rows(f, "nights", nights["night"] != night_id)
    tables.append(f, "removals", {
        "night": [night_id], "label": [label], "removed_utc": [now], "software": [f"varstar {__version__}"],
        "n_exposures": [int(nights["n_exposures"][i])], "n_points": [int(nights["n_points"][i])],
        "sources": [", ".join(names)], "reason": [reason],
    })
    return {"night": label, "n_exposures": int(nights["n_exposures"][i]), "n_points": int(nights["n_points"][i]),
            "sources": names, "reason": reason}
