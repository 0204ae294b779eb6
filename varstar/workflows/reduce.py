"""The reduction of one night: a tidy measurement table in, the night's tables and report out.

Computation only (no files, no archive): :func:`reduce_night` finds the
exposures, their times (BJD_TDB) and airmasses, solves the ensemble per band
(:func:`varstar.ensemble.solve_ensemble`), marks each light-curve point's
quality (:mod:`varstar.quality`) and writes the night's report.
:mod:`.night` stores the result in an archive.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import quality as qbits
from ..errors import InputError, ReductionError
from ..target import Target, reduction_options
from ..timescale import exposure_times, night_label

if TYPE_CHECKING:  # pragma: no cover
    from ..ensemble import EnsembleSettings

#: Standard-system columns of a light-curve point (NaN / -1 until transformed).
STD_COLUMNS = ("mag_std", "mag_std_err", "cal_std_err", "bv_std", "bv_std_err", "bv_std_sys_err", "colour_gap_d", "transformation")
#: Columns of a night's comparison-star table.
COMPARISON_COLUMNS = ("band", "star", "status", "reason", "offset", "excess", "chi2_dof", "tie_weight", "mean_err")
#: Columns of a night's ensemble table (one row per band).
ENSEMBLE_COLUMNS = ("band", "calibration_err", "colour_extinction", "colour_extinction_err", "colour_reference", "n_kept")

#: The catalogue error assumed for a comparison star whose magnitude comes without one: what
#: catalogues of field stars typically reach (common practice); said in the night's report.
CATALOGUE_ERR_ASSUMED = 0.01

# Difference between a table's own airmass and ours that deserves a warning
# (wrong coordinates, site or time zone upstream): common practice.
_AIRMASS_WARN = 0.05
# ... and one that cannot be a matter of rounding or refraction: the file belongs to another
# target, site or date, or its times are not JD(UTC) (our choice).
AIRMASS_REFUSE = 0.5
#: Sun altitude (degrees) above which an exposure is taken in daylight: the Sun's upper
#: limb at the horizon with refraction (common practice).
DAYLIGHT_SUN_ALT_DEG = -0.8


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
        """The night's report (the tables are for the archive)."""
        return self.report


def settings_from_target(target: Target) -> EnsembleSettings:
    """Ensemble settings, with overrides from an optional ``[reduction]`` table (see :func:`varstar.target.reduction_options`)."""
    from ..ensemble import EnsembleSettings  # here: scipy.special, not needed to refuse a bad file

    kw, _ = reduction_options(target)
    return EnsembleSettings(**kw)


def excluded_stars(target: Target) -> tuple[str, ...]:
    """Comparison stars the observer keeps out of every ensemble (``[reduction] exclude``)."""
    return reduction_options(target)[1]


def _first_comparison(target: Target) -> str:
    comps = target.stars_with_role("comparison")
    return comps[0].id if comps else "ID"


def edit_command(archive: Any, key: str, value: Any) -> str:
    """The command that sets one key of an archive's target description (what advice names)."""
    import json

    shown = json.dumps(value) if not isinstance(value, float) else repr(value)
    return f"varstar edit-target {archive or 'ARCHIVE'} --set '{key}={shown}'"


def exclude_command(archive: Any, target: Target, star: str) -> str:
    """The command that keeps ``star`` out of every ensemble (the stars excluded so far, plus it)."""
    return edit_command(archive, "reduction.exclude", [*excluded_stars(target), star])


def split_nights(target: Target, table: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Split a measurement table into nights (evening date at the site)."""
    labels = night_label(table["jd"].to_numpy(), target.site.longitude_deg)
    return {str(lab): table[labels == lab].reset_index(drop=True) for lab in np.unique(labels)}


def sources_of(table: pd.DataFrame, rows: np.ndarray | None = None) -> str:
    """The file(s) some rows of a night's table came from, for messages."""
    src = table["source"].to_numpy() if rows is None else table["source"].to_numpy()[rows]
    names = sorted(pd.unique(src).tolist())
    shown = ", ".join(str(n) for n in names[:5])
    return shown + (f" and {len(names) - 5} more file(s)" if len(names) > 5 else "")


def declared_times(target: Target, table: pd.DataFrame, declaration: Mapping[str, str]) -> pd.DataFrame:
    """The table with its times as JD(UTC) at mid-exposure, from the declared system and point.

    ``declaration`` is :func:`varstar.target.time_declaration` (the format, JD or
    MJD, was applied when the file was read).  HJD(UTC) and BJD_TDB are turned
    back into JD(UTC) for the target and site of ``target``
    (:func:`varstar.timescale.to_jd_utc`); a time at the start (end) of an
    exposure moves by half its exposure time, which every row then needs.  A
    declared time column is said in the night's warnings.
    """
    from ..timescale import to_jd_utc

    system, point = declaration["time_system"], declaration["time_point"]
    if system == "utc" and point == "mid":
        return table
    jd = table["jd"].to_numpy(dtype=float)
    if point != "mid":
        exp = table["exptime_s"].to_numpy(dtype=float)
        bad = ~np.isfinite(exp)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{table['source'].iloc[i]}, line {int(table['line'].iloc[i])}: the times are declared as the {point} "
                f"of each exposure, so every row needs its exposure time (column exptime), and this one has none"
            )
        jd = jd + (0.5 if point == "start" else -0.5) * exp / 86400.0
    jd = to_jd_utc(jd, system, target.ra_deg, target.dec_deg, target.site)
    out = table.assign(jd=jd)
    names = {"utc": "JD(UTC)", "hjd_utc": "HJD(UTC)", "bjd_tdb": "BJD_TDB"}
    out.attrs["warnings"] = [*table.attrs.get("warnings", []),
                             f"times of {sources_of(table)} read as {declaration['time_format'].upper()} "
                             f"{names[system]} at the {point} of each exposure; stored as JD(UTC) at mid-exposure"]
    return out


def band_names(target: Target, table: pd.DataFrame) -> pd.DataFrame:
    """The table with its band names spelled as the target description spells them.

    ``v`` and ``V`` are one band unless the description itself has both (then
    case tells them apart: a Stromgren v is not a Johnson V).  A renamed band
    is said in the night's warnings.
    """
    have = target.catalog_bands()
    by_fold: dict[str, list[str]] = {}
    for b in have:
        by_fold.setdefault(b.casefold(), []).append(b)
    rename = {}
    for band in pd.unique(table["band"]):
        same = by_fold.get(str(band).casefold(), [])
        if band not in have and len(same) == 1:
            rename[band] = same[0]
    if not rename:
        return table
    out = table.assign(band=table["band"].replace(rename))
    out.attrs["warnings"] = [*table.attrs.get("warnings", []), *(
        f"band '{a}' of {sources_of(table)} read as '{b}', the target description's name for it" for a, b in rename.items())]
    return out


def _check_bands(target: Target, table: pd.DataFrame) -> None:
    have = target.catalog_bands()
    for band in pd.unique(table["band"]):
        if band not in have:
            rows = table[table["band"] == band]
            src, line = rows["source"].iloc[0], int(rows["line"].iloc[0])
            raise InputError(
                f"{src}, line {line}: band '{band}' has no catalogue magnitude for any comparison star in "
                f"{target.source}; give the comparison stars their {band} magnitudes (for an archive: "
                f"varstar edit-target ARCHIVE --set stars.{_first_comparison(target)}.{band}=MAG, one --set per star), "
                f"or leave this band out"
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


@dataclass(frozen=True)
class _NightStars:
    """The target file's stars as tonight's measurements see them.

    ``index`` maps each measurement row to its star in the target file; the
    ensemble works on the stars measured tonight (``measured``, indices into the
    target file; ``local`` maps a target-file index to its place among them, -1
    when absent), so its cost follows the night's data, not the file's length.
    """

    ids: list[str]
    roles: np.ndarray
    index: np.ndarray
    is_comparison: np.ndarray
    excluded: tuple[str, ...]
    measured: np.ndarray
    local: np.ndarray
    colour: np.ndarray
    n_absent: int


def _night_stars(target: Target, table: pd.DataFrame) -> _NightStars:
    ids = list(target.star_ids)
    roles = np.array([s.role for s in target.stars])
    excluded = excluded_stars(target)
    is_comp = (roles == "comparison") & ~np.isin(ids, excluded)
    index = pd.Index(ids).get_indexer(table["star"])
    measured = np.unique(index)
    local = np.full(len(ids), -1)
    local[measured] = np.arange(measured.size)
    # Catalogue colour of each star for the ensemble's colour-extinction term (B - V
    # when the catalogue has both; any colour index serves as the regressor).
    cat = [target.stars[i].catalog for i in measured]
    colour = np.array([c["B"] - c["V"] if {"B", "V"} <= set(c) else np.nan for c in cat])
    # A comparison star absent all night (no data, so no part in the fit) is reported as the
    # ensemble reports one without usable measurements; it does not enter the colour reference.
    return _NightStars(ids, roles, index, is_comp, excluded, measured, local, colour,
                       int(np.count_nonzero(is_comp & (local < 0))))


def _exposures(table: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
    """One exposure per (frame, band), ordered by time; and the exposure of each measurement row."""
    frame_code, _ = pd.factorize(table["frame"])
    band_code, band_names = pd.factorize(table["band"])
    codes, _ = pd.factorize(frame_code * len(band_names) + band_code)
    _, first = np.unique(codes, return_index=True)
    exp = table.iloc[first][["frame", "band", "jd", "airmass", "exptime_s"]].reset_index(drop=True)
    order = np.argsort(exp["jd"].to_numpy(), kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    return exp.iloc[order].reset_index(drop=True), rank[codes]


def _times(target: Target, exp: pd.DataFrame) -> tuple[Any, np.ndarray, list[str]]:
    """Times of the exposures, the airmass used (the table's where given, else computed) and warnings."""
    site = target.site
    times = exposure_times(exp["jd"].to_numpy(), target.ra_deg, target.dec_deg, site.latitude_deg, site.longitude_deg, site.elevation_m)
    given = exp["airmass"].to_numpy(dtype=float)
    warnings: list[str] = []
    both = np.isfinite(given) & np.isfinite(times.airmass)
    if both.any() and np.median(np.abs(given[both] - times.airmass[both])) > _AIRMASS_WARN:
        warnings.append(
            f"the table's airmass differs from the one computed for the site and target by "
            f"{np.median(np.abs(given[both] - times.airmass[both])):.2f} (median): check coordinates, site and that jd is UTC"
        )
    # the target below the horizon is not a warning but a refusal: see unusual_night
    return times, np.where(np.isfinite(given), given, times.airmass), warnings


def unusual_night(target: Target, table: pd.DataFrame, exp: pd.DataFrame, airmass_computed: np.ndarray) -> list[str]:
    """Why a night cannot be what it claims, in words (empty when it is plausible).

    A measurement of the target is impossible while it is below the horizon, and
    an exposure in daylight is a time error; a file without the target's rows,
    or whose airmass column disagrees with the one computed for the site, target
    and time by more than :data:`AIRMASS_REFUSE`, belongs to another target,
    site or date.  The caller refuses such a night unless told to accept it.
    """
    from ..almanac import approx_sun_altitude

    why = []
    tid = target.target_star.id
    if not (table["star"] == tid).any():
        why.append(f"the files have no measurement of the target {tid}")
    jd = exp["jd"].to_numpy(dtype=float)
    below = ~np.isfinite(airmass_computed)
    if below.any():
        why.append(f"the target is below the horizon at {int(below.sum())} of {jd.size} exposure times")
    # a tenth of a degree is enough here: the almanac's low-precision Sun, not astropy's (0.5 s a night)
    day = approx_sun_altitude(jd, target.site.latitude_deg, target.site.longitude_deg) > DAYLIGHT_SUN_ALT_DEG
    if day.any():
        why.append(f"{int(day.sum())} of {jd.size} exposures were taken in daylight (the Sun above the horizon at the site)")
    given = exp["airmass"].to_numpy(dtype=float)
    both = np.isfinite(given) & np.isfinite(airmass_computed)
    if both.any():
        off = float(np.median(np.abs(given[both] - airmass_computed[both])))
        if off > AIRMASS_REFUSE:
            why.append(f"the table's airmass differs from the one computed for the site, target and time by {off:.2f} (median)")
    return why


def _solve_band(
    target: Target, table: pd.DataFrame, band: str, rows: np.ndarray, in_band: np.ndarray, exposure_of_row: np.ndarray,
    exp: pd.DataFrame, airmass: np.ndarray, stars: _NightStars, settings: EnsembleSettings,
) -> tuple[Any, np.ndarray]:
    """The ensemble solution of one band (rows of ``table``, exposures ``in_band`` in time order),
    and the error of each comparison star's mean magnitude, 1/sqrt(sum of its weights)."""
    from ..ensemble import solve_ensemble

    local = np.full(len(exp), -1)
    local[in_band] = np.arange(in_band.size)
    cat = [target.stars[i] for i in stars.measured]
    try:
        sol = solve_ensemble(
            local[exposure_of_row[rows]],
            stars.local[stars.index[rows]],
            table["mag"].to_numpy()[rows],
            table["mag_err"].to_numpy()[rows],
            n_exposures=in_band.size,
            is_comparison=stars.is_comparison[stars.measured],
            catalog_mag=np.array([s.catalog.get(band, np.nan) for s in cat]),
            catalog_err=np.array([s.catalog_err.get(band, CATALOGUE_ERR_ASSUMED) for s in cat]),
            time=exp["jd"].to_numpy()[in_band],
            airmass=airmass[in_band],
            good=(table["flag"].to_numpy()[rows] == 0) & np.isfinite(table["mag"].to_numpy()[rows]),
            settings=settings,
            star_names=[stars.ids[i] for i in stars.measured],
            colour=stars.colour,
        )
    except ReductionError as exc:
        # The ensemble works on arrays and cannot know where they came from: say it here.
        absent = (f"; {stars.n_absent} comparison star(s) of {target.source} have no measurement in these files"
                  if stars.n_absent else "")
        raise ReductionError(f"{sources_of(table, rows)}, band {band}: {exc}{absent}") from None
    used = sol.used
    in_fit = stars.local[stars.index[rows][used]]
    w = 1.0 / (table["mag_err"].to_numpy()[rows][used] ** 2 + np.nan_to_num(sol.star_excess)[in_fit] ** 2)
    with np.errstate(divide="ignore"):
        mean_err = 1.0 / np.sqrt(np.bincount(in_fit, w, minlength=stars.measured.size))
    return sol, mean_err


def _comparison_rows(band: str, sol: Any, mean_err: np.ndarray, stars: _NightStars, settings: EnsembleSettings) -> list[dict[str, Any]]:
    """One row per comparison star of the target file for this band: status, reason, offsets."""
    absent_reason = f"only 0 usable measurement(s); at least {settings.min_star_points} needed"
    out = []
    for i in np.flatnonzero(stars.roles == "comparison"):
        sid, k = stars.ids[i], int(stars.local[i])
        excluded = sid in stars.excluded
        if k < 0:  # not measured tonight: as the ensemble reports a star without usable data
            status, reason = "too_few_points", absent_reason
            values = (np.nan, np.nan, np.nan, 0.0, np.inf)
        else:
            status, reason = sol.star_status[k], sol.star_reason[k]
            values = (sol.star_offset[k], sol.star_excess[k], sol.star_chi2_dof[k], sol.tie_weight[k], mean_err[k])
        out.append({
            "band": band,
            "star": sid,
            "status": "excluded" if excluded else status,
            "reason": "excluded by the target description ([reduction] exclude)" if excluded else reason,
            **{key: float(v) for key, v in zip(("offset", "excess", "chi2_dof", "tie_weight", "mean_err"), values)},
        })
    return out


def _points(
    table: pd.DataFrame, exposures: pd.DataFrame, exposure_of_row: np.ndarray, stars: _NightStars,
    mag_cal: np.ndarray, err_cal: np.ndarray, warnings: list[str],
) -> pd.DataFrame:
    """The light-curve points of the target and check stars, with their quality bits (warnings appended)."""
    measured = (stars.roles[stars.index] != "comparison") & np.isfinite(table["mag"].to_numpy())
    e_rows = exposure_of_row[measured]
    implausible = _implausible(table["mag"].to_numpy(), stars.is_comparison[stars.index], exposure_of_row, len(exposures))[measured]
    star = table["star"].to_numpy(dtype=object)[measured]
    for sid in pd.unique(star[implausible]):
        n_bad = int(np.count_nonzero(implausible & (star == sid)))
        warnings.append(
            f"{n_bad} measurement(s) of {sid} lie more than {DETECTOR_RANGE_MAG:g} mag from the comparison stars "
            "of the same exposure, beyond what one exposure of a detector can record: flagged "
            "(implausible_magnitude), not reduced; check the file's magnitude column"
        )
    flags, zp = exposures["flags"].to_numpy(), exposures["zero_point"].to_numpy()
    quality = (
        np.where(flags[e_rows] != "", qbits.EXPOSURE_FLAGGED, 0)
        | np.where(table["flag"].to_numpy()[measured] != 0, qbits.UPSTREAM_FLAG, 0)
        | np.where(np.isfinite(zp[e_rows]), 0, qbits.NO_ZERO_POINT)
        | np.where(implausible, qbits.IMPLAUSIBLE, 0)
    ).astype(np.uint8)
    return pd.DataFrame({
        "exposure": e_rows,
        "star": star,
        "band": exposures["band"].to_numpy()[e_rows],
        "bjd_tdb": exposures["bjd_tdb"].to_numpy()[e_rows],
        "mag": mag_cal[measured],
        "mag_err": err_cal[measured],
        "cal_err": exposures["calibration_err"].to_numpy()[e_rows],
        "quality": quality,
        **{k: np.full(int(measured.sum()), -1 if k == "transformation" else np.nan) for k in STD_COLUMNS},
    })


def reduce_night(
    target: Target,
    table: pd.DataFrame,
    settings: EnsembleSettings | None = None,
    label: str | None = None,
    *,
    accept_unusual: bool = False,
) -> NightReduction:
    """Reduce one night's tidy measurement table (see :mod:`varstar.measurements`).

    The steps: exposures and their times and airmasses; per band, the ensemble
    solution and each comparison star's status; the light-curve points of the
    target and check stars with their quality bits; the night's report.

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
    accept_unusual
        Reduce a night that :func:`unusual_night` finds implausible anyway (its
        reasons are then recorded in the report under ``accepted_unusual``);
        by default such a night is refused with the reasons.
    """
    if table.empty:
        raise InputError("no measurements to reduce")
    settings = settings or settings_from_target(target)
    table = band_names(target, table)
    _check_bands(target, table)
    if label is None:
        label = str(night_label(table["jd"].to_numpy()[:1], target.site.longitude_deg)[0])
    exp, exposure_of_row = _exposures(table)
    times, airmass, warnings = _times(target, exp)
    warnings[:0] = table.attrs.get("warnings", [])  # what the measurement reader read generously (placeholders flagged, ...)
    unusual = unusual_night(target, table, exp, times.airmass)
    if unusual and not accept_unusual:
        raise InputError(
            f"{sources_of(table)} (night {label}): {'; '.join(unusual)}; nothing was written. Check the target "
            f"description's coordinates and site (to correct them: varstar edit-target ARCHIVE --set target.ra=... "
            f"--set site.longitude=...) and the time column (JD(UTC) at mid-exposure unless declared: ingest "
            f"--time-format, --time-system, --time-point); if the night really is so, ingest it with --accept-unusual "
            f"(the reasons are recorded in the night's report)"
        )
    stars = _night_stars(target, table)

    n_exp = len(exp)
    per_exposure = {k: np.full(n_exp, np.nan) for k in ("zero_point", "zero_point_err", "calibration_err")}
    n_comp = np.zeros(n_exp, dtype=np.int64)
    flags = np.full(n_exp, "", dtype=object)
    mag_cal = np.full(len(table), np.nan)
    err_cal = np.full(len(table), np.nan)
    comp_rows: list[dict[str, Any]] = []
    ens_rows: list[dict[str, Any]] = []
    band_reports: dict[str, Any] = {}
    exp_band = exp["band"].to_numpy()
    for band in sorted(pd.unique(exp_band)):
        in_band = np.flatnonzero(exp_band == band)  # global exposure indices, time order
        rows = np.flatnonzero(table["band"].to_numpy() == band)
        sol, mean_err = _solve_band(target, table, band, rows, in_band, exposure_of_row, exp, airmass, stars, settings)
        per_exposure["zero_point"][in_band] = sol.zero_point
        per_exposure["zero_point_err"][in_band] = sol.zero_point_err
        per_exposure["calibration_err"][in_band] = sol.calibration_err
        n_comp[in_band] = sol.n_comparisons
        flags[in_band] = np.asarray(sol.exposure_flags, dtype=object)
        mag_cal[rows] = sol.mag
        err_cal[rows] = sol.mag_err
        ens_rows.append({
            "band": band,
            "calibration_err": float(sol.calibration_err),
            "colour_extinction": float(sol.colour_extinction),
            "colour_extinction_err": float(sol.colour_extinction_err),
            "colour_reference": float(sol.colour_reference),
            "n_kept": int(sum(st == "kept" for st in sol.star_status)),
        })
        comp_rows += _comparison_rows(band, sol, mean_err, stars, settings)
        no_err = [stars.ids[i] for i in np.flatnonzero(stars.is_comparison)
                  if stars.local[i] >= 0 and band in target.stars[i].catalog and band not in target.stars[i].catalog_err]
        if no_err:
            warnings.append(
                f"{', '.join(no_err)}: no catalogue error in {band}; {CATALOGUE_ERR_ASSUMED:.3f} mag assumed for "
                f"{'each' if len(no_err) > 1 else 'it'} in the calibration error (give the catalogue's errors: "
                f"varstar edit-target ARCHIVE --set stars.{no_err[0]}.{band}_err=ERR, one --set per star)"
            )
        summary = sol.to_dict()
        for k, entry in enumerate(summary["stars"]):  # each star by its id (and its place in the target file)
            i = int(stars.measured[entry["index"]])
            summary["stars"][k] = {"star": target.stars[i].id, **entry, "index": i}
        band_reports[band] = {"ensemble": summary}

    exposures = pd.DataFrame({
        "frame": exp["frame"].astype(str).to_numpy(dtype=object),
        "band": exp_band,
        "jd_utc": exp["jd"].to_numpy(),
        "bjd_tdb": times.bjd_tdb,
        "hjd_utc": times.hjd_utc,
        "airmass": airmass,
        "airmass_given": exp["airmass"].to_numpy(dtype=float),
        "exptime_s": exp["exptime_s"].to_numpy(dtype=float),
        **per_exposure,
        "n_comparisons": n_comp,
        "flags": flags,
    })
    raw = table.copy()
    raw["exposure"] = exposure_of_row
    points = _points(table, exposures, exposure_of_row, stars, mag_cal, err_cal, warnings)
    comparisons = pd.DataFrame(comp_rows, columns=list(COMPARISON_COLUMNS))
    ensembles = pd.DataFrame(ens_rows, columns=list(ENSEMBLE_COLUMNS))
    report = _night_report(target, label, table, exposures, points, comparisons, band_reports, warnings)
    if unusual:
        report["accepted_unusual"] = unusual
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
