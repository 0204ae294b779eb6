"""Terminal text of every result: one function per result, taking its JSON-ready dict.

The command line prints these; ``varstar demo`` writes them into its report.
Nothing here computes: a number printed is a number the result holds.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any


#: Plurals that are not the noun plus "s".
_IRREGULAR = {"minimum": "minima", "maximum": "maxima", "extremum": "extrema", "analysis": "analyses",
              "entry": "entries", "ephemeris": "ephemerides"}


def plural(n: int, noun: str, plural_form: str | None = None) -> str:
    """``"1 exposure"``, ``"2 exposures"``, ``"0 exposures"``; irregular nouns through ``plural_form`` or the table."""
    return f"{n} {noun if n == 1 else (plural_form or _IRREGULAR.get(noun) or noun + 's')}"


def cycle(e: float | None) -> str:
    """A cycle number: ``3`` when whole, ``3.5`` for a half cycle (other fractions to 0.01)."""
    if e is None or e != e:
        return "n/a"
    if float(e).is_integer():
        return str(int(e))
    return format(e, ".2f").rstrip("0")


def _fmt(v: float | None, spec: str = ".3f") -> str:
    return "n/a" if v is None or v != v else format(v, spec)


def _pm(v: float | None, err: float | None, decimals: int) -> str:
    """``"v ± err"`` with at least ``decimals`` decimals and enough for two significant digits of ``err``."""
    if err is not None and err == err and 0 < err < math.inf:
        decimals = max(decimals, 1 - math.floor(math.log10(err)))
    return f"{_fmt(v, f'.{decimals}f')} ± {_fmt(err, f'.{decimals}f')}"


#: A fitted term is shown when it differs from zero by more than this many standard errors (about 1 in
#: 370 by chance for a normal error: common practice for "significant").
SIGNIFICANT_SIGMA = 3.0


def colour_extinction_line(ensemble: dict[str, Any]) -> str:
    """The ensemble's fitted colour-extinction term in words, or "" when it is not significant or not fitted."""
    k, k_err = ensemble.get("colour_extinction"), ensemble.get("colour_extinction_err")
    if k is None or k_err is None or not k_err > 0 or abs(k) <= SIGNIFICANT_SIGMA * k_err:
        return ""
    return (f"colour extinction {k:+.4f} ± {k_err:.4f} mag per airmass per mag of B - V (fitted tonight; "
            f"{abs(k) / k_err:.1f} standard errors from zero)")


def format_night_report(rep: dict[str, Any]) -> str:
    """A short, readable night summary for the terminal."""
    lines = [
        f"Night {rep['night']}  ({', '.join(Path(s).name for s in rep['sources'])}): "
        f"{plural(rep['n_exposures'], 'exposure')}, {rep['n_flagged']} flagged"
    ]
    for band, b in rep["bands"].items():
        counts = sorted(b["flag_reasons"].items(), key=lambda kv: (-kv[1], kv[0]))
        reasons = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in counts)
        several = sum(v for _, v in counts) > b["n_flagged"]
        lines.append(
            f"  {band}: {plural(b['n_exposures'], 'exposure')}, {b['n_used']} used, {b['n_flagged']} flagged"
            + (f" (for {reasons}{'; some for more than one reason' if several else ''})" if reasons else "")
        )
        frames = b["flagged_frames"]
        if frames:
            shown = ", ".join(f"{fr['frame']} [{fr['reasons']}]" for fr in frames[:6])
            more = f" and {len(frames) - 6} more" if len(frames) > 6 else ""
            lines.append(f"      flagged: {shown}{more}")
        lines.append(f"      comparison stars kept: {' '.join(b['comparisons_kept']) or 'none'}")
        for rj in b["comparisons_rejected"]:
            lines.append(f"      rejected {rj['star']} ({rj['status']}): {rj['reason']}")
        for sid, c in b["check_stars"].items():
            off = c.get("offset_from_catalog")
            cat = f", {_fmt(off, '+.3f')} from catalogue" if off is not None else ""
            lines.append(
                f"      check {sid}: mean {_fmt(c['mean'])}{cat}; rms {_fmt(c['rms'])} vs {_fmt(c['predicted_rms'])} predicted ({plural(c['n'], 'point')})"
            )
        t = b["target"]
        if t["n"]:
            lines.append(
                f"      target: {_fmt(t['mag_min'])} .. {_fmt(t['mag_max'])} mag, median error {_fmt(t['median_mag_err'])} ({plural(t['n'], 'point')}); "
                f"calibration ±{_fmt(b['calibration_err'])}"
            )
        line = colour_extinction_line(b["ensemble"])
        if line:
            lines.append(f"      {line}")
        for w in b["ensemble"].get("warnings", []):
            lines.append(f"      note: {w}")
    tr = rep.get("transformation")
    if tr:
        c = tr["coefficients"]
        lines.append(
            f"  standard system: {tr['n_transformed']} of {plural(tr['n_points'], 'point')} transformed "
            f"(epsilon_v {c['epsilon_v']:+.4f}, mu_bv {c['mu_bv']:.4f}, from {c['source']})"
        )
        t = tr.get("target")
        if t:
            shifts = ", ".join(f"{b} {v['mean_shift']:+.3f}" for b, v in sorted(t["by_band"].items()))
            lines.append(f"      target B - V {t['bv_min']:.3f} .. {t['bv_max']:.3f}; mean change from transformation: {shifts} mag")
        lines += [f"      note: {n}" for n in tr["notes"]]
    for why in rep.get("accepted_unusual", []):
        lines.append(f"  accepted although unusual (--accept-unusual): {why}")
    for w in rep.get("warnings", []):
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def format_summary(s: dict[str, Any]) -> str:
    t = s["target"]
    lines = [
        f"{t['name']}  (RA {t['ra_deg']:.5f}°, Dec {t['dec_deg']:+.5f}°; star {t['star']})",
        f"archive {s['archive']}, schema {s['schema_version']}, {plural(s['n_nights'], 'night')}",
    ]
    for n in s["nights"]:
        lines.append(f"  {n['night']}: {plural(n['n_exposures'], 'exposure')}, {n['n_flagged']} flagged by the reduction "
                     f"(ingested {n['ingested_utc']})")
    for band, b in s["bands"].items():
        lines.append(
            f"  {band}: {plural(b['n_points'], 'point')} ({b['n_standard']} on the standard system; {b['n_flagged']} left out: their exposure or measurement is flagged), "
            f"{b['mag_min']:.3f} .. {b['mag_max']:.3f} mag, "
            f"median error {b['median_mag_err']:.3f}, BJD_TDB {b['bjd_first']:.4f} .. {b['bjd_last']:.4f}"
        )
    a = s.get("analyses")
    if a:
        last = a["last_period"]
        lines.append(f"  period analyses: {a['n_periods']}" + (f" (latest P = {last['period']:.7f} ± {last['period_err']:.7f} d, {last['computed_utc']})" if last else ""))
        lines.append(f"  timings: {a['n_timings']}; ephemeris entries: {a['n_ephemerides']}; nights removed: {a['n_removed']}")
    return "\n".join(lines)


def format_coefficients(fit: dict[str, Any], k2_bv: float) -> str:
    lines = [
        f"Transformation coefficients from {plural(fit['n_stars'], 'standard star')} (B - V span {fit['colour_range']:.2f} mag):",
        f"  epsilon_v = {fit['epsilon_v']:+.4f} ± {fit['epsilon_v_err']:.4f}   (V - v = eps (B - V) + const; rms {fit['rms_v']:.4f} mag)",
        f"  mu_bv     = {fit['mu_bv']:.4f} ± {fit['mu_bv_err']:.4f}    ((B - V) = mu (b - v) + const; rms {fit['rms_bv']:.4f} mag)",
        (f"  k2_bv     = {k2_bv:+.4f} (given, removed from b before the fit)" if fit.get("k2_bv_given", True)
         else "  k2_bv     not given: 0 assumed (give --k2-bv to remove second-order extinction before the fit)"),
    ]
    for sid, why in fit.get("rejected", []):
        lines.append(f"  rejected {sid}: {why}")
    for w in fit.get("warnings", []):
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def format_colour(s: dict[str, Any]) -> str:
    ebv = f", dereddened with E(B-V) = {s['ebv']:.3f}" if s["dereddened"] else ""
    lines = [
        f"{s['star']}: standard B - V from {s['bv_min']:.3f} ± {s['bv_min_err']:.3f} to {s['bv_max']:.3f} ± {s['bv_max_err']:.3f} "
        f"(weighted mean {s['bv_mean']:.3f} ± {s['bv_mean_err']:.3f} incl. calibration; {plural(s['n_points'], 'point')})",
        f"  effective temperature ({s['temperature_method']}{ebv}):",
        f"    hottest {s['teff_max_k']:.0f} ± {s['teff_max_err_k']:.0f} K, coolest {s['teff_min_k']:.0f} ± {s['teff_min_err_k']:.0f} K, "
        f"at the mean colour {s['teff_mean_k']:.0f} ± {s['teff_mean_err_k']:.0f} K",
    ]
    if "caution" in s:
        lines.append(f"  caution: {s['caution']}")
    return "\n".join(lines)


def format_period(d: dict[str, Any]) -> str:
    """The adopted period first; every other number labelled for what it is."""
    main = d["frequencies"][0]
    lines = [
        f"{d['star']}: period {_pm(d['period'], d['period_err'], 7)} d (adopted; "
        f"frequency {_pm(d['frequency'], d['frequency_err'], 6)} c/d)",
        f"  refined by: {d['period_method']}",
        f"  errors: {d['errors']}",
        f"  data: {plural(d['n_points'], 'point')} in {', '.join(d['bands'])} over {d['baseline_d']:.1f} d, "
        f"{plural(len(d['nights']), 'night')}",
        f"  epoch of {d['epoch_kind']} light {_pm(d['epoch'], d['epoch_err'], 5)} BJD_TDB; "
        f"amplitude {_fmt(d['amplitude'])}" + (f" ± {_fmt(d['amplitude_err'])}" if d.get("amplitude_err") is not None else "")
        + f" mag peak to peak ({d['reference_band'] or 'one band'})",
        f"  {d['modes_note']}",
    ]
    if len(d["frequencies"]) > 1:
        lines.append("  frequencies of the model:")
        for f in d["frequencies"]:
            rel = f" = {f['relation']}" if f.get("relation") else ""
            lines.append(f"    {f['label']}: f = {_pm(f['frequency'], f['frequency_err'], 6)} c/d "
                         f"(P = {_pm(f['period'], f['period_err'], 7)} d), amplitude "
                         f"{_fmt(f['amplitude'], '.4f')} mag, S/N {_fmt(f['snr'], '.1f')}{rel}")
    else:
        lines.append(f"  main frequency: amplitude {_fmt(main['amplitude'], '.4f')} mag (first harmonic), "
                     f"S/N {_fmt(main['snr'], '.1f')}")
    lines.append(f"  significance: false-alarm probability of the periodogram peak {d['fap_text']} ({d['fap_method']})"
                 + (f"; bootstrap {d['fap_bootstrap']:.3g}" if d.get("fap_bootstrap") is not None else ""))
    lines.append("  how it was found (intermediate values, not the answer):")
    for c in d["candidates"]:
        note = f"; {c['note']}" if c.get("note") else ""
        lines.append(f"    {c['source']}: P = {c['period']:.7f} d{note}")
    lines.append(f"    PDM minimum (grid value): P = {d['pdm']['best_period']:.7f} d ({d['pdm']['relation_to_period']} "
                 f"of the adopted period); theta at the adopted period {_fmt(d['pdm']['theta_at_period'])}")
    lines.append("  strongest periodogram peaks (refined where fitted, else grid values):")
    for a in d["aliases"]:
        kind = "refined" if a["period_refined"] else "grid"
        lines.append(f"    P = {a['period']:.7f} d ({kind})  power {_fmt(a['power'])}  {a['relation']}")
    for c in d["alias_check"]:
        lines.append(f"    {c['note']}")
    for b, fit in d["fits"].items():
        r21 = ""
        if fit["r21"] is not None and not d["templates"]:
            r21 = f", R21 {fit['r21']:.3f} ± {_fmt(fit['r21_err'])}, phi21 {fit['phi21']:.3f} ± {_fmt(fit['phi21_err'])} rad"
        lines.append(f"  {b or 'fit'}: mean {fit['mean_mag']:.3f}, {plural(fit['nterms'], 'harmonic')}{r21}, "
                     f"reduced chi2 {_fmt(fit['reduced_chi2'], '.2f')}")
    for b, tpl in d["templates"].items():
        lines.append(f"  {b or 'template'}: eclipse template, reduced chi2 {_fmt(tpl['reduced_chi2'], '.2f')}")
    for w in d["warnings"]:
        lines.append(f"  note: {w}")
    if d.get("analysis") is not None:
        lines.append(f"  stored as analysis {d['analysis']} in the archive's period history")
    return "\n".join(lines)


def format_timings(d: dict[str, Any]) -> str:
    e = d["ephemeris"]
    lines = [f"ephemeris in force: T({e['kind']}) = {e['epoch']:.5f} + {e['period']:.7f} E"
             + (f" + {e['quadratic']:.3e} E²" if e.get("quadratic") else "") + " (BJD_TDB)"]
    lines.append(f"{'night':10s} {'band':4s} {'type':9s} {'E':>8s} {'BJD_TDB':>15s} {'± (d)':>8s} {'O − C (d)':>10s} "
                 f"{'(min)':>7s}  method")
    for t in d["timings"]:
        flag = (" *" if t["new"] else "") + (" !" if t.get("disagree") and not t.get("in_fit", True) else "")
        lines.append(f"{t['night']:10s} {t['band']:4s} {t['type']:9s} {cycle(t['cycle']):>8s} {t['bjd_tdb']:15.5f} "
                     f"{_fmt(t['err'], '.5f'):>8s} {t['o_minus_c']:+10.5f} {t['o_minus_c'] * 1440.0:+7.2f}  {t['method']}{flag}")
        if t["note"]:
            lines.append(f"{'':12s}note: {t['note']}")
    lines.append(f"(* new: {d['n_new']} stored now{'' if d['stored'] else ' - not stored (--no-store)'})")
    if any(t.get("disagree") and not t.get("in_fit", True) for t in d["timings"]):
        lines.append("(! its two estimates disagree: left out of the ephemeris fit; --include-disagreeing puts it in)")
    if d["refused"]:
        lines.append(f"{plural(len(d['refused']), 'predicted extremum', 'predicted extrema')} could not be timed:")
        for r in d["refused"][:10]:
            lines.append(f"  {r['night']} {r['band']} {r['type']} E={cycle(r['cycle'])}: {r['reason']}")
        if len(d["refused"]) > 10:
            lines.append(f"  ... and {len(d['refused']) - 10} more (see --json)")
    fit = d["fit"]
    if fit:
        q = f" + ({fit['quadratic']:.3e} ± {_fmt(fit['quadratic_err'], '.1e')}) E²" if fit["model"] == "quadratic" else ""
        lines.append(f"fit of {plural(fit['n_timings'], 'timing')} ({fit['model']}): T = {fit['epoch']:.5f} ± {_fmt(fit['epoch_err'], '.5f')} "
                     f"+ ({fit['period']:.8f} ± {_fmt(fit['period_err'], '.8f')}) E{q}; chi2 {fit['chi2']:.1f} for {fit['dof']} dof")
        if fit["note"]:
            lines.append(f"  {fit['note']}")
    elif d["fit_note"]:
        lines.append(d["fit_note"])
    if d["updated_ephemeris"]:
        lines.append(f"the fitted ephemeris is now the archive's ephemeris (entry {d['updated_ephemeris']['entry']}; older entries kept)")
    return "\n".join(lines)


def format_transform(res: dict[str, Any]) -> str:
    """What ``transform`` applied, and per night how many points it transformed."""
    c = res["coefficients"]
    lines = [f"applied epsilon_v = {c['epsilon_v']:+.4f} ± {c['epsilon_v_err']:.4f}, mu_bv = {c['mu_bv']:.4f} ± {c['mu_bv_err']:.4f}, "
             f"k2_bv = {c['k2_bv']:+.4f} (from {c['source']}; pairs within {res['max_gap_minutes']:.0f} min)"]
    for n in res["nights"]:
        lines.append(f"  {n['night']}: {n['n_transformed']} of {plural(n['n_points'], 'point')} transformed")
        lines += [f"      {note}" for note in n["notes"]]
    return "\n".join(lines)


def format_predict(d: dict[str, Any]) -> str:
    """The coming extrema, one a line, with the target's and the Sun's altitude."""
    lines = [f"{d['target']}: {plural(len(d['events']), d['ephemeris']['kind'])} predicted"
             + (f" while it stands above {d['min_altitude_deg']:g}° with the Sun below {d['max_sun_altitude_deg']:g}°" if d['site_visible'] else "")]
    lines.append(f"{'UTC':21s} {'BJD_TDB':>15s} {'type':9s} {'E':>8s} {'altitude':>8s} {'Sun':>6s}")
    for e in d["events"]:
        lines.append(f"{e['utc']:21s} {e['bjd_tdb']:15.5f} {e['type']:9s} {cycle(e['cycle']):>8s} {e['target_altitude_deg']:7.1f}° {e['sun_altitude_deg']:5.1f}°")
    return "\n".join(lines)


def format_verify(d: dict[str, Any]) -> str:
    """OK with what was checked, or every problem found, one a line; then the notes."""
    rows = d["checked"].get("rows", {})
    if d['ok']:
        text = (f"{d['archive']}: OK (schema {d['schema_version']}; {plural(d['checked'].get('nights', 0), 'night')}, "
                f"{plural(rows.get('raw', 0), 'raw measurement')}, {plural(rows.get('points', 0), 'light-curve point')}; "
                f"{plural(d['checked'].get('checksums_ok', 0), 'night checksum')} "
                f"{'matches' if d['checked'].get('checksums_ok', 0) == 1 else 'match'})")
    else:
        text = f"{d['archive']}: {plural(len(d['problems']), 'problem')} found:\n" + "\n".join(f"  - {p}" for p in d['problems'])
    text += "".join(f"\n  note: {n}" for n in d["notes"])
    return text


def format_upgrade(res: dict[str, Any]) -> str:
    """What an upgrade did (or that there was nothing to do)."""
    if res["upgraded"]:
        return (f"{res['archive']}: upgraded from schema {res['from_schema']} to {res['schema_version']} "
                f"(added {', '.join(res['tables_added']) or 'nothing'}; checksums of {plural(res['nights_checksummed'], 'night')}); "
                f"the old file is kept as {res['backup']}")
    else:
        return f"{res['archive']}: already at schema {res['schema_version']}; nothing to do"


def format_removal(res: dict[str, Any]) -> str:
    """What ``remove-night`` took out."""
    why = f", reason: {res['reason']}" if res.get("reason") else ", no reason given"
    return (f"removed night {res['night']} ({plural(res['n_exposures'], 'exposure')}, {plural(res['n_points'], 'point')}, from "
            f"{', '.join(res['sources']) or 'no file'}); the removal is recorded in the archive{why}")


def format_description_change(res: dict[str, Any]) -> str:
    """What ``edit-target`` changed (or, with ``--dry-run``, would change)."""
    if not res["changed"]:
        return "\n".join(res["notes"])
    would = res["dry_run"]
    head = (f"dry run: the description would become version {res['previous'] + 1} (nothing changed)" if would else
            f"target description {res['description']} is in force (version {res['previous']} and earlier are kept "
            f"in the archive's history)")
    lines = [head, "changes:"] + [f"  {c}" for c in res["changes"]]
    n, k = len(res["rereduced"]), len(res["unchanged_nights"])
    verb = "would be" if would else "were"
    if n:
        lines.append(f"{plural(n, 'night')} {verb} reduced again from their raw measurements and stored: "
                     f"{', '.join(res['rereduced'])}")
    if k:
        lines.append(f"{plural(k, 'night')} reduced again gave the stored result and {'would stay' if would else 'stay'} "
                     f"as they are")
    if not n and not k:
        lines.append("no night's reduction reads what changed: no night needs reducing again")
    lines += [f"note: {x}" for x in res["notes"]]
    return "\n".join(lines)


def format_descriptions(history: Any) -> str:
    """The versions of an archive's target description (``edit-target --history``)."""
    lines = []
    for r in history.itertuples():
        what = f"; re-reduced {r.rereduced}" if r.rereduced else ""
        lines.append(f"{int(r.description):>3}  {r.set_utc}  {r.note or '(no note)'}{what}")
    return "\n".join(lines)


def format_measure(res: dict[str, Any]) -> str:
    """What ``measure`` did: frames measured, rows written, frames refused with their reasons."""
    lines = [f"wrote {res['output']}: {plural(res['n_rows'], 'measurement')} ({res['n_flagged']} flagged) from "
             f"{res['n_frames'] - len(res['refused'])} of {plural(res['n_frames'], 'frame')} measured"]
    lines += _refused_frames(res["refused"])
    return "\n".join(lines)


def _refused_frames(refused: Any) -> list[str]:
    if not refused:
        return []
    lines = [f"{plural(len(refused), 'frame')} not measured:"]
    lines += [f"  {r['frame']}: {r['reason']}" for r in refused[:20]]
    if len(refused) > 20:
        lines.append(f"  ... and {len(refused) - 20} more (--json lists them all)")
    return lines


def format_ingest(res: dict[str, Any]) -> str:
    """Each night added (its report), the nights replaced and the files skipped."""
    lines = [format_night_report(r) for r in res["nights"]]
    lines += _refused_frames(res.get("frames_refused", ()))
    lines += [f"replaced the stored night {label} (its removal is recorded in the archive)" for label in res["replaced"]]
    lines += [f"skipped {s['file']}: {s['why']}" for s in res["skipped"]]
    if not res["nights"]:
        lines.append("nothing new: the archive is unchanged")
    return "\n".join(lines)
