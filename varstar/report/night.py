"""The page of one night: verdict, light curve with the check stars, zero points, comparison stars, colour, settings."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # pragma: no cover
    import os


    from ..workflows.archive import Archive

from .figures import comparison_figure, comparison_residuals, figure_html, zero_point_figure
from ..text import plural
from .markup import BAND_HEADERS, CHECK_HEADERS, STATUS_WORDS, band_rows, check_rows, document, esc, html_list, html_table, num
from .verdict import night_verdict


def _night_data(arch: Archive, night: str) -> dict[str, Any]:
    """What the night page draws, read from the archive once."""
    tgt = arch.target
    lc = arch.lightcurve(include_flagged=True)
    lc = lc[lc["night"].astype(str) == night].reset_index(drop=True)
    checks = []
    for s in tgt.stars:
        if s.role == "check":
            c = arch.lightcurve(star=s.id, include_flagged=True)
            checks.append(c[c["night"].astype(str) == night])
    checks_df = pd.concat(checks, ignore_index=True) if checks else pd.DataFrame()
    exp = arch.exposures()
    exp = exp[exp["night"].astype(str) == night].reset_index(drop=True)
    comps = arch.comparisons()
    comps = comps[comps["night"].astype(str) == night].reset_index(drop=True)
    nights = arch.nights()
    row = nights[nights["night"].astype(str) == night]
    raw = arch.raw()
    if len(row):
        raw = raw[raw["night"] == int(row["night_number"].iloc[0])]
    return {"target": tgt, "lc": lc, "checks": checks_df, "exposures": exp, "comparisons": comps,
            "night_row": row, "raw": raw}


def night_page(archive_path: str | os.PathLike[str], night: str) -> str:
    """One night's page: verdict, light curve, zero points, comparison and check stars, settings.

    Parameters
    ----------
    archive_path
        The target's archive.
    night
        The night's label (its evening date, as :meth:`varstar.Archive.nights` lists it).

    Returns
    -------
    str
        One self-contained HTML document (see the module docstring).

    Raises
    ------
    ArchiveError
        The archive cannot be read, or has no such night (the message lists the nights).
    """
    from .. import plots
    from ..workflows.archive import open_archive

    arch = open_archive(archive_path)
    report = arch.night_report(night)  # refuses an unknown night, naming the nights there are
    d = _night_data(arch, night)
    tgt = d["target"]
    verdict = night_verdict(report)
    name = tgt.name
    parts = [f"<h1>{esc(name)} — night {esc(night)}</h1>",
             f'<p id="verdict" class="{verdict.verdict}">{esc(verdict.sentence)}</p>']
    sources = ", ".join(Path(str(s)).name for s in report.get("sources") or [])
    software = str(d["night_row"]["software"].iloc[0]) if len(d["night_row"]) else ""
    ingested = str(d["night_row"]["ingested_utc"].iloc[0]) if len(d["night_row"]) else ""
    parts.append(f'<p class="note">Measurements from {esc(sources or "—")}; reduced by {esc(software or "—")} '
                 f"on {esc(ingested or '—')}; BJD_TDB {num(report.get('bjd_start'), '.4f')} to "
                 f"{num(report.get('bjd_end'), '.4f')}.</p>")
    parts.append("<h2>Exposures per band</h2>" + html_table(BAND_HEADERS, band_rows(report), table_id="bands",
                                                        numeric={1, 2, 3, 5, 6, 7, 9}))
    warnings = [str(w) for w in report.get("warnings") or []]
    for band, b in sorted((report.get("bands") or {}).items()):
        warnings += [f"{band}: {w}" for w in (b.get("ensemble") or {}).get("warnings") or []]
    unusual = [str(u) for u in report.get("accepted_unusual") or []]
    if warnings:
        parts.append("<h3>Warnings</h3>" + html_list(warnings))
    if unusual:
        parts.append("<h3>Accepted although unusual</h3>" + html_list(unusual))

    lc, checks = d["lc"], d["checks"]
    bands = sorted(pd.unique(lc["band"].astype(str))) if len(lc) else []
    parts.append("<h2>Light curve</h2>")
    n_flag = int((lc["quality"] != 0).sum()) if len(lc) else 0
    fig = plots.lightcurve_figure(lc, title=f"{name}, night {night}", show_flagged=True,
                                  checks=checks if len(checks) else None)
    parts.append(figure_html(
        fig, f"Light curve of {name} on night {night}: magnitude against BJD_TDB in {', '.join(bands) or 'no band'}, "
             f"{len(lc) - n_flag} good points and {n_flag} flagged points (hollow grey)"
             + ("; a lower panel shows the check stars less their means" if len(checks) else ""),
        "Magnitude axis inverted (brighter up); UT hours along the top; flagged points hollow and grey."))

    exp = d["exposures"]
    parts.append("<h2>Zero points and airmass</h2>")
    parts.append(figure_html(
        zero_point_figure(exp, title=f"{name}, night {night}: exposure zero points"),
        f"Exposure zero points of night {night} against BJD_TDB, one panel per band, with the airmass as a dashed "
        f"line; {len(exp)} exposures, {int((exp['flags'].fillna('').astype(str) != '').sum())} flagged",
        "A clear night's zero point follows the airmass smoothly; dips and jumps are passing clouds."))
    flagged_rows = [[fr.get("frame", ""), band, str(fr.get("reasons", "")).replace("_", " ").replace(";", ", ")]
                    for band, b in sorted((report.get("bands") or {}).items()) for fr in b.get("flagged_frames") or []]
    if flagged_rows:
        parts.append(f"<details><summary>{esc(plural(len(flagged_rows), 'flagged exposure'))}</summary>"
                     + html_table(["frame", "band", "why"], flagged_rows, table_id="flagged") + "</details>")

    parts.append(_comparison_section(d, night, name))
    parts.append("<h2>Check stars</h2>")
    rows = check_rows(report)
    parts.append(html_table(CHECK_HEADERS, rows, table_id="checks", numeric={2, 3, 4, 5, 6, 7}) if rows
                 else "<p>No check star in this night.</p>")
    parts.append('<p class="note">Predicted rms: what the points\' own errors allow; a ratio near 1 means the '
                 "errors describe the scatter. The check stars' curves are the light curve's lower panel.</p>")
    parts.append(_colour_section(lc, name, night))
    parts.append(_settings_section(arch, report, software))
    return document(f"{name} — night {night}", "\n".join(parts))


def _comparison_section(d: dict[str, Any], night: str, name: str) -> str:
    comps = d["comparisons"]
    headers = ["star", "band", "status", "why", "excess scatter (mag)", "χ²/dof", "offset (mag)"]
    rows, attrs = [], []
    for r in comps.itertuples():
        reason = str(r.reason) if str(r.reason) else ("used in the ensemble" if r.status == "kept" else "")
        rows.append([r.star, r.band, STATUS_WORDS.get(str(r.status), str(r.status)), reason, num(r.excess, ".4f"),
                     num(r.chi2_dof, ".2f"), num(r.offset, "+.3f")])
        attrs.append({"data-star": str(r.star), "data-status": str(r.status), "data-band": str(r.band)})
    out = ["<h2>Comparison stars</h2>",
           html_table(headers, rows, table_id="comparisons", row_attrs=attrs, numeric={4, 5, 6}, wide={3})]
    out.append('<p class="note">Excess scatter: what the star scatters beyond its errors about the ensemble; '
               "offset: its mean against its catalogue magnitude in the ensemble's fit.</p>")
    stars = sorted(set(map(str, comps["star"]))) if len(comps) else []
    resid = comparison_residuals(d["raw"], d["exposures"], stars)
    if len(resid):
        words = {}
        for s in stars:
            st = comps[comps["star"] == s]
            kept = sorted(map(str, st[st["status"] == "kept"]["band"]))
            rej = sorted(map(str, st[st["status"] != "kept"]["band"]))
            words[s] = "; ".join(x for x in (f"kept in {', '.join(kept)}" if kept else "",
                                             f"rejected in {', '.join(rej)}" if rej else "") if x)
        out.append(figure_html(
            comparison_figure(resid, words, title=f"{name}, night {night}: comparison stars against the ensemble"),
            f"Small light curves of the comparison stars {', '.join(stars)} on night {night}: each star's magnitude "
            "against the ensemble less its mean, one panel per star, bands by colour and marker",
            "A constant star scatters about zero by its errors; a rejected variable shows its own changes."))
    return "\n".join(out)


def _colour_section(lc: pd.DataFrame, name: str, night: str) -> str:
    from .. import plots

    if not len(lc) or "transformed" not in lc or not lc["transformed"].any():
        return ("<h2>Standard colour</h2><p>This night is not on the standard system (no transformation "
                "applied), so there is no B − V.</p>")
    good = lc[(lc["quality"] == 0) & lc["transformed"] & np.isfinite(lc["bv"].to_numpy(dtype=float))]
    if not len(good):
        return "<h2>Standard colour</h2><p>No good transformed point carries a B − V.</p>"
    bv = good["bv"].to_numpy(dtype=float)
    text = (f"<p>Standard B − V of the target: {num(np.min(bv))} to {num(np.max(bv))} mag, median "
            f"{num(np.median(bv))} ({plural(len(bv), 'point')}).</p>")
    fig = plots.colour_figure(good, title=f"{name}, night {night}: standard B − V")
    return "<h2>Standard colour</h2>" + text + figure_html(
        fig, f"Standard B − V of {name} on night {night} against BJD_TDB, {len(bv)} points, "
             f"from {num(np.min(bv))} to {num(np.max(bv))} mag", "")


def _settings_section(arch: Archive, report: dict[str, Any], software: str) -> str:
    out = ["<h2>Settings and software</h2>", f"<p>Reduced by {esc(software or 'an unknown version')}."]
    if "description" in report:
        out.append(f" Target description number {esc(report['description'])} was in force for this reduction.")
    out.append("</p>")
    for band, b in sorted((report.get("bands") or {}).items()):
        ens = b.get("ensemble") or {}
        settings = ens.get("settings") or {}
        if settings:
            rows = [[k, v] for k, v in settings.items()]
            out.append(f"<h3>Ensemble settings, {esc(band)}</h3>"
                       f"<p class=\"note\">{esc(ens.get('method', ''))}; {esc(ens.get('iterations', '?'))} iterations, "
                       f"{'converged' if ens.get('converged') else 'not converged'}.</p>"
                       + html_table(["setting", "value"], rows))
    text = arch.target.source_text
    out.append(f"<details><summary>Target description in force</summary><pre>{esc(text)}</pre></details>")
    return "\n".join(out)
