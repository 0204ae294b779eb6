"""The page of a whole archive: every night with its verdict, the light curve, the latest period, O − C, predictions."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # pragma: no cover
    import os


    from ..workflows.archive import Archive

from .figures import figure_html
from ..text import plural
from .markup import BAND_HEADERS, CHECK_HEADERS, STATUS_WORDS, band_rows, check_rows, document, esc, html_list, html_table, night_id, num, verdict_tag
from .verdict import NightVerdict, night_verdict


#: More nights than this: the archive page's overview light curve draws them in one colour (a legend of
#: hundreds of nights helps nobody); the night-by-night figure draws the latest this many.
MAX_NIGHTS_COLOURED = 12


#: Days after the last night over which the archive page lists predicted extrema.
PREDICT_DAYS = 7.0


#: The Unix epoch (1970-01-01 0 h UTC) as a Julian Date (common practice).
JD_UNIX_EPOCH = 2440587.5


def utc_iso_of_jd(jd: float) -> str:
    """A JD (UTC) as ``YYYY-MM-DDTHH:MM:SS`` (the Unix epoch is JD 2440587.5; leap seconds ignored, as a date needs)."""
    t = datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(days=float(jd) - JD_UNIX_EPOCH)
    return t.strftime("%Y-%m-%dT%H:%M:%S")


def archive_page(archive_path: str | os.PathLike[str]) -> str:
    """The whole archive's page: nights with verdicts, the light curve, period, O − C and predictions.

    Parameters
    ----------
    archive_path
        The target's archive.

    Returns
    -------
    str
        One self-contained HTML document (see the module docstring).

    Raises
    ------
    ArchiveError
        The archive cannot be read.
    """
    from .. import plots
    from ..workflows.archive import open_archive

    arch = open_archive(archive_path)
    tgt = arch.target
    name = tgt.name
    nights = arch.nights()
    reports = arch.night_reports()
    verdicts = {label: night_verdict(rep) for label, rep in reports.items()}
    parts = [f"<h1>{esc(name)}</h1>",
             f'<p class="note">Archive {esc(Path(str(archive_path)).name)}: {plural(len(nights), "night")}, '
             f"RA {tgt.ra_deg:.5f}°, Dec {tgt.dec_deg:+.5f}°.</p>"]
    rows = []
    for r in nights.itertuples():
        v = verdicts[str(r.night)]
        link = f'<a href="#{esc(night_id(str(r.night)))}">{esc(r.night)}</a>'
        rows.append([link, r.n_exposures, v.n_used, verdict_tag(v), num(v.check_ratio, ".2f"), v.sentence])
    parts.append("<h2>Nights</h2>" + html_table(["night", "exposures", "used", "verdict", "check ratio", "in one sentence"],
                                            rows, table_id="nights", raw_cols={0, 3}, numeric={1, 2, 4}))
    lc = arch.lightcurve(columns=["bjd_tdb", "mag", "mag_err", "band", "night", "quality"])
    parts.append("<h2>Light curve</h2>")
    n_nights = int(lc["night"].nunique()) if len(lc) else 0
    shown = lc if n_nights <= MAX_NIGHTS_COLOURED else lc.assign(night=f"{n_nights} nights")
    bands = sorted(pd.unique(lc["band"].astype(str))) if len(lc) else []
    parts.append(figure_html(
        plots.lightcurve_figure(shown, title=name),
        f"Light curve of {name}: {len(lc)} good points over {plural(n_nights, 'night')} in "
        f"{', '.join(bands) or 'no band'}, magnitude against BJD_TDB", "Magnitude axis inverted (brighter up)."))
    if len(lc):
        parts.append(figure_html(
            plots.nights_figure(lc, title=name, max_nights=MAX_NIGHTS_COLOURED),
            f"The light curve of {name} night by night (latest {min(n_nights, MAX_NIGHTS_COLOURED)} nights), one "
            "column per night and one row per band, against UT hours", ""))
    parts.append(_period_section(arch, name))
    parts.append(_timings_section(arch, name))
    parts.append(_predict_section(arch, nights))
    parts.append("<h2>Night by night</h2>")
    for r in nights.itertuples():
        parts.append(_night_summary(reports[str(r.night)], verdicts[str(r.night)], str(r.software)))
    parts.append("<details><summary>Target description in force</summary>"
                 f"<pre>{esc(tgt.source_text)}</pre></details>")
    return document(name, "\n".join(parts))


def _night_summary(report: dict[str, Any], v: NightVerdict, software: str) -> str:
    label = str(report.get("night", ""))
    rejected = sorted({f"{rj.get('star')} ({b}: {STATUS_WORDS.get(rj.get('status'), rj.get('status'))})"
                       for b, x in (report.get("bands") or {}).items() for rj in x.get("comparisons_rejected") or []})
    out = [f'<section class="night" id="{esc(night_id(label))}">',
           f"<h3>Night {esc(label)} {verdict_tag(v)}</h3>", f"<p>{esc(v.sentence)}</p>",
           html_table(BAND_HEADERS, band_rows(report), numeric={1, 2, 3, 5, 6, 7, 9})]
    if rejected:
        out.append(f"<p>Comparison stars rejected: {esc('; '.join(rejected))}.</p>")
    checks = check_rows(report)
    if checks:
        out.append(html_table(CHECK_HEADERS, checks, numeric={2, 3, 4, 5, 6, 7}))
    out.append(f'<p class="note">Reduced by {esc(software)}.</p></section>')
    return "\n".join(out)


def harmonic_model(fit: dict[str, Any], t: np.ndarray) -> np.ndarray:
    """A stored harmonic fit of one band evaluated at BJD_TDB ``t``.

    ``fit`` is one entry of a stored period analysis's ``fits`` (``frequency``,
    ``t_ref``, ``mean_mag``, ``amplitudes``, ``phases``); the series is
    ``mean_mag + sum_k A_k cos(2 pi k f (t - t_ref) + phi_k)``, the convention
    the fit stores in its ``phase_convention``.
    """
    f, t_ref = float(fit["frequency"]), float(fit["t_ref"])
    y = np.full(np.shape(t), float(fit["mean_mag"]))
    for k, (a, phi) in enumerate(zip(fit["amplitudes"], fit["phases"]), start=1):
        y = y + float(a) * np.cos(2.0 * np.pi * k * f * (np.asarray(t) - t_ref) + float(phi))
    return y


def _period_section(arch: Archive, name: str) -> str:
    from .. import plots
    from ..errors import VarstarError

    try:
        history = arch.periods()
    except VarstarError:
        history = pd.DataFrame()
    if not len(history):
        return "<h2>Period</h2><p>No period analysis is stored yet.</p>"
    last = history.iloc[-1]
    res = json.loads(str(last["result"]))
    period, epoch = float(res["period"]), float(res["epoch"])
    out = ["<h2>Period</h2>",
           f"<p>Latest analysis ({esc(last['computed_utc'])}, {esc(res.get('method', ''))}): period "
           f"{num(period, '.7f')} ± {num(res.get('period_err'), '.7f')} d, epoch BJD_TDB {num(epoch, '.5f')} "
           f"({esc(res.get('epoch_kind') or 'phase 0')}), peak-to-peak amplitude {num(res.get('amplitude'))} mag, "
           f"false-alarm probability {esc(res.get('fap_text', num(res.get('fap'), '.2g')))}; "
           f"{res.get('n_points', 0)} points over {num(res.get('baseline_d'), '.1f')} d.</p>"]
    notes = [str(res[k]) for k in ("alias_note", "modes_note") if res.get(k)] + [str(w) for w in res.get("warnings") or []]
    if notes:
        out.append(html_list(notes))
    bands = [str(b) for b in res.get("bands") or []]
    nights = set(map(str, res.get("nights") or []))
    star = res.get("star")
    lc = arch.lightcurve(star=star, columns=["bjd_tdb", "mag", "mag_err", "band", "night"])
    lc = lc[lc["band"].astype(str).isin(bands) & lc["night"].astype(str).isin(nights)].reset_index(drop=True)
    fits = res.get("fits") or {}
    model, resid = {}, np.full(len(lc), np.nan)
    grid = np.linspace(0.0, 1.0, 400, endpoint=False)
    for band in bands:
        fit = fits.get(band)
        if not fit or "amplitudes" not in fit:
            continue
        model[band] = (grid, harmonic_model(fit, epoch + grid * period))
        m = (lc["band"].astype(str) == band).to_numpy()
        resid[m] = lc["mag"].to_numpy(dtype=float)[m] - harmonic_model(fit, lc["bjd_tdb"].to_numpy(dtype=float)[m])
    if len(lc):
        fig = plots.phased_figure(lc, period=period, epoch=epoch, model=model, residuals=resid, title=name,
                                  period_err=res.get("period_err"))
        missing = [b for b in bands if b not in model]
        out.append(figure_html(
            fig, f"Phased light curve of {name} at period {period:.7f} d over two cycles, bands {', '.join(bands)}, "
                 f"{len(lc)} points, with the stored harmonic model and the residuals below",
            "Phase = ((BJD_TDB − epoch) / period) mod 1 with the stored period and epoch; the model is the stored fit"
            + (f" (no stored harmonic model for {', '.join(missing)}: its residuals are left blank)" if missing else "")
            + "."))
    peaks = res.get("aliases") or []
    if peaks:
        out.append("<h3>Periodogram peaks (stored)</h3>" + html_table(
            ["period (d)", "frequency (c/d)", "power", "power / best", "relation"],
            [[num(p.get("period"), ".6f"), num(p.get("frequency"), ".6f"), num(p.get("power"), ".4f"),
              num(p.get("power_ratio"), ".3f"), p.get("relation", "")] for p in peaks],
            table_id="peaks", numeric={0, 1, 2, 3}))
        out.append('<p class="note">The periodogram itself is not stored with the analysis; its highest peaks are. '
                   "Run the period analysis again to draw it.</p>")
    out.append("<h3>Period history</h3>" + html_table(
        ["analysis", "computed (UTC)", "software", "bands", "method", "points", "baseline (d)", "period (d)",
         "± (d)", "epoch (BJD_TDB)", "amplitude (mag)"],
        [[r.analysis, r.computed_utc, r.software, r.bands, r.method, r.n_points, num(r.baseline_days, ".1f"),
          num(r.period, ".7f"), num(r.period_err, ".7f"), num(r.epoch, ".5f"), num(r.amplitude)]
         for r in history.itertuples()], table_id="periods", numeric={0, 5, 6, 7, 8, 9, 10}))
    return "\n".join(out)


def _timings_section(arch: Archive, name: str) -> str:
    from .. import plots

    timings, ephs = arch.timings(), arch.ephemerides()
    out = ["<h2>Timings and O − C</h2>"]
    if not len(timings):
        out.append("<p>No timings of extrema are stored yet.</p>")
    else:
        used = sorted(set(int(x) for x in timings["ephemeris"]))
        ref_rows = ephs[ephs["ephemeris"] == used[0]] if len(ephs) else ephs
        cycle = timings["cycle"].to_numpy(dtype=float)
        oc = timings["o_minus_c"].to_numpy(dtype=float)
        note = ""
        if len(used) > 1 and len(ref_rows):
            # timings against different ephemerides: all against the first one used, so the diagram is one scale
            ref = ref_rows.iloc[0]
            t = timings["bjd_tdb"].to_numpy(dtype=float)
            step = np.where(timings["type"].astype(str) == "secondary", 0.5, 1.0)
            raw_e = (t - float(ref["epoch"])) / float(ref["period"])
            cycle = np.where(step == 0.5, np.round(raw_e * 2.0) / 2.0, np.round(raw_e))
            oc = t - (float(ref["epoch"]) + float(ref["period"]) * cycle + float(ref["quadratic"]) * cycle**2)
            note = "Timings measured against different ephemerides are drawn against the first of them."
        fit = None
        reference = ""
        if len(ref_rows):
            ref = ref_rows.iloc[0]
            reference = f"T0 = {float(ref['epoch']):.5f}, P = {float(ref['period']):.7f} d (BJD_TDB)"
            now = ephs.iloc[-1]
            if int(now["ephemeris"]) != int(ref["ephemeris"]):
                fit = {"reference": {k: float(ref[k]) for k in ("epoch", "period", "quadratic")},
                       "linear": {k: float(now[k]) for k in ("epoch", "period", "quadratic")}}
        fig = plots.oc_figure(cycle, oc, timings["err"].to_numpy(dtype=float), list(map(str, timings["type"])),
                              fit=fit, reference=reference, title=name, bands=list(map(str, timings["band"])),
                              disagree=[bool(x) for x in timings["disagree"]])
        out.append(figure_html(
            fig, f"O − C diagram of {name}: {len(timings)} timings, observed minus computed time in minutes against "
                 "cycle number" + ("; the dashed line is the ephemeris in force" if fit else ""),
            note or "O − C against the ephemeris the timings were measured with; the dashed line, when drawn, is the "
                    "ephemeris now in force."))
        out.append(html_table(
            ["night", "band", "type", "method", "BJD_TDB", "± (d)", "cycle", "O − C (min)", "estimates disagree"],
            [[r.night, r.band, r.type, r.method, num(r.bjd_tdb, ".5f"), num(r.err, ".5f"), num(c, "g"),
              num(o * 1440.0, "+.2f"), "yes" if r.disagree else "no"]
             for r, c, o in zip(timings.itertuples(), cycle, oc)], table_id="timings", numeric={4, 5, 6, 7}))
    if len(ephs):
        out.append("<h3>Ephemeris history</h3>" + html_table(
            ["entry", "set (UTC)", "source", "kind", "epoch (BJD_TDB)", "± (d)", "period (d)", "± (d)", "quadratic",
             "timings", "note"],
            [[r.ephemeris, r.set_utc, r.source, r.kind, num(r.epoch, ".5f"), num(r.epoch_err, ".5f"),
              num(r.period, ".7f"), num(r.period_err, ".7f"), num(r.quadratic, ".3g"), r.n_timings, r.note]
             for r in ephs.itertuples()], table_id="ephemerides", numeric={4, 5, 6, 7, 8, 9}))
    return "\n".join(out)


def _predict_section(arch: Archive, nights: pd.DataFrame) -> str:
    from ..workflows.extrema import active_ephemeris

    head = "<h2>Coming extrema</h2>"
    if not len(nights):
        return head + "<p>No night stored: nothing to predict from.</p>"
    _, eph = active_ephemeris(arch)
    if eph is None:
        return head + "<p>No ephemeris (neither fitted nor in the target description): no prediction.</p>"
    exp = arch.exposures()
    start_jd = float(np.nanmax(exp["jd_utc"].to_numpy(dtype=float)))
    start, end = utc_iso_of_jd(start_jd), utc_iso_of_jd(start_jd + PREDICT_DAYS)
    pred = arch.predict(start + "Z", end + "Z").to_dict()
    rows = [[e["utc"], num(e["bjd_tdb"], ".5f"), e["type"], num(e["cycle"], "g"),
             num(e["target_altitude_deg"], ".0f"), num(e["sun_altitude_deg"], ".0f"),
             "yes" if e["visible"] else "no"] for e in pred["events"]]
    text = (f"<p>Predicted {esc(pred['ephemeris'].get('kind', 'extrema'))} times from the ephemeris in force "
            f"(T0 = {num(pred['ephemeris'].get('epoch'), '.5f')}, P = {num(pred['ephemeris'].get('period'), '.7f')} d), "
            f"for the {PREDICT_DAYS:g} days after the last exposure ({esc(start)} UTC). Observable: the target at "
            f"least {num(pred['min_altitude_deg'], 'g')}° high with the Sun below "
            f"{num(pred['max_sun_altitude_deg'], 'g')}° at the site.</p>")
    table = html_table(["UTC", "BJD_TDB", "type", "cycle", "target altitude (°)", "Sun altitude (°)", "observable"], rows,
                   table_id="predictions", numeric={1, 3, 4, 5}) if rows else "<p>No extremum falls in that week.</p>"
    return head + text + table
