"""Self-contained HTML pages of a night and of a whole archive, for a quick look after observing.

:func:`night_page` answers "was last night good?": a one-sentence verdict at
the top (:func:`night_verdict`, rules below), the light curve per band with the
check stars, the exposure zero points against time with the airmass (a passing
cloud shows as a dip or jump), the comparison stars' statuses and their own
curves against the ensemble, the check stars' measured against predicted
scatter, the standard colour when the night is transformed, and the settings,
software and target description used.  :func:`archive_page` lists every night
with its verdict and a short summary, draws the whole light curve, the latest
period analysis (phased curve and stored periodogram peaks), the period
history, O − C with the ephemeris history, and the extrema predicted for the
week after the last night.

Each page is one HTML document that needs nothing else: figures are PNG images
embedded as ``data:`` URIs (a PNG's size does not grow with the number of
points, as an SVG's does, and a browser reports its pixel size, so a test can
tell that it decoded), CSS sits in one ``<style>`` block, and there is no
script, font, stylesheet or link to another site, so a page works offline and
as an e-mail attachment.  A viewport meta tag, a max-width column and tables
that scroll sideways keep it readable on a phone.  Figures come from
:mod:`varstar.plots` (Okabe & Ito colour-blind-safe palette, shapes as well as
colours) and every figure has an ``alt`` text.  Every string that comes from a
user or a file (target name, star ids, reasons, file names, the description) is
escaped with :func:`html.escape`.

The module is a shell: it reads the archive through its public API
(:func:`varstar.workflows.archive.open_archive`) and imports matplotlib inside
functions.  :func:`write_page` writes a page through
:func:`varstar.export.write_atomic`.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # pragma: no cover
    import os

    from matplotlib.figure import Figure

    from .workflows.archive import Archive

# --------------------------------------------------------------------------- verdict rules
#: A night is "good" when at least this fraction of its exposures was used (varstar's own choice: one
#: exposure in ten lost to clouds, wind or bad frames is an ordinary night).
GOOD_MIN_USED = 0.90
#: Below this fraction of exposures used the night is "poor" (varstar's own choice: under 70 % used,
#: the light curve has gaps wide enough to miss a feature).
POOR_MIN_USED = 0.70
#: A check star scattering more than this multiple of its predicted rms makes the night at best "fair": the
#: errors understate the scatter by half again (varstar's own choice; a ratio near 1 is common practice's
#: sign of an error model that holds).
GOOD_MAX_CHECK_RATIO = 1.5
#: ... and more than this multiple makes it "poor" (the errors are off by a factor of two).
POOR_MAX_CHECK_RATIO = 2.0
#: Fewer comparison stars kept than this in some band makes the night at best "fair" (with two, one bad star
#: cannot be told from the other; common practice prefers three or more).
GOOD_MIN_KEPT = 3
#: Fewer than this in some band makes it "poor" (an ensemble needs two stars).
POOR_MIN_KEPT = 2

#: Resolution of the embedded PNG figures (dots per inch): a 9-inch figure is 720 pixels wide, sharp on a
#: desktop and small enough that a page of many figures stays well under a few megabytes.
FIGURE_DPI = 80
#: More nights than this: the archive page's overview light curve draws them in one colour (a legend of
#: hundreds of nights helps nobody); the night-by-night figure draws the latest this many.
MAX_NIGHTS_COLOURED = 12
#: Days after the last night over which the archive page lists predicted extrema.
PREDICT_DAYS = 7.0
#: The Unix epoch (1970-01-01 0 h UTC) as a Julian Date (common practice).
JD_UNIX_EPOCH = 2440587.5

#: How each comparison-star status of the ensemble reads on the page.
STATUS_WORDS = {
    "kept": "kept",
    "variable": "rejected: it varies",
    "catalog_offset": "rejected: far from its catalogue magnitude",
    "too_few_points": "rejected: too few points",
    "not_comparison": "not a comparison star",
}

#: Colours of the verdict bar (Okabe & Ito 2008, as in :mod:`varstar.plots`); the word is always written too.
VERDICT_COLOURS = {"good": "#009E73", "fair": "#E69F00", "poor": "#D55E00"}

CSS = """
:root { color-scheme: light; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; margin: 0; color: #1a1a1a;
       background: #fff; line-height: 1.45; }
main { max-width: 62rem; margin: 0 auto; padding: 0.8rem 1rem 3rem; }
h1 { font-size: 1.45rem; margin: 0.6rem 0 0.4rem; overflow-wrap: anywhere; }
h2 { font-size: 1.2rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
h3 { font-size: 1.05rem; margin-top: 1.4rem; }
#verdict { font-size: 1.15rem; padding: 0.6rem 0.9rem; border-left: 0.5rem solid #777; background: #f4f4f4; }
#verdict.good { border-left-color: #009E73; } #verdict.fair { border-left-color: #E69F00; }
#verdict.poor { border-left-color: #D55E00; }
.tag { display: inline-block; padding: 0 0.4rem; border-radius: 0.3rem; color: #000; font-weight: 600; }
.tag.good { background: #9fd9c6; } .tag.fair { background: #f3d08a; } .tag.poor { background: #eeb08c; }
figure { margin: 1rem 0; }
figure img { max-width: 100%; height: auto; display: block; border: 1px solid #eee; }
figcaption { font-size: 0.9rem; color: #444; }
.scroll { overflow-x: auto; -webkit-overflow-scrolling: touch; max-width: 100%; }
table { border-collapse: collapse; font-size: 0.9rem; margin: 0.4rem 0; }
th, td { padding: 0.25rem 0.55rem; border-bottom: 1px solid #ddd; text-align: left; vertical-align: top; }
th { background: #f0f0f0; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.why { min-width: 14rem; }
td a { white-space: nowrap; }
tr[data-status="kept"] td:first-child { border-left: 0.3rem solid #0072B2; }
tr[data-status]:not([data-status="kept"]) td:first-child { border-left: 0.3rem solid #D55E00; }
pre { white-space: pre-wrap; overflow-wrap: anywhere; background: #f7f7f7; padding: 0.6rem; font-size: 0.85rem; }
details { margin: 0.6rem 0; }
.night { border-top: 1px dashed #bbb; padding-top: 0.3rem; }
.note { color: #444; font-size: 0.92rem; }
@media (max-width: 40rem) { main { padding: 0.5rem; } table { font-size: 0.82rem; } }
"""


def _e(value: Any) -> str:
    """``value`` as text, escaped for HTML content and attribute values."""
    return html.escape(str(value), quote=True)


def _num(value: Any, spec: str = ".3f") -> str:
    """A number formatted with ``spec``, or "n/a" for None, NaN or text that is not a number."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return "n/a"
    return "n/a" if not math.isfinite(v) else format(v, spec)


def _plural(n: int, noun: str) -> str:
    return f"{n} {noun if n == 1 else noun + 's'}"


# --------------------------------------------------------------------------- the verdict


@dataclass(frozen=True)
class NightVerdict:
    """A night's verdict from its stored report (see :func:`night_verdict`).

    Attributes
    ----------
    verdict
        ``"good"``, ``"fair"`` or ``"poor"``.
    n_exposures, n_used
        Exposures of the night (every band) and how many the light curve uses.
    check_ratio
        The worst (largest) ratio of a check star's measured rms to its predicted rms
        over check stars and bands; None without a check star.
    check_star, check_band
        Which check star and band gave that ratio ("" when none).
    min_kept
        Fewest comparison stars kept in any band.
    reasons
        Why the night is not good, in words (empty for a good night).
    sentence
        The verdict in one sentence.
    """

    verdict: str
    n_exposures: int
    n_used: int
    check_ratio: float | None
    check_star: str
    check_band: str
    min_kept: int
    reasons: tuple[str, ...] = field(default_factory=tuple)
    sentence: str = ""


def night_verdict(report: dict[str, Any]) -> NightVerdict:
    """Judge a night from the report stored at ingest (:meth:`varstar.Archive.night_report`).

    Rules (the thresholds are this module's constants):

    - **poor** when fewer than :data:`POOR_MIN_USED` (70 %) of the exposures are
      used, when a check star scatters more than :data:`POOR_MAX_CHECK_RATIO`
      (2×) its predicted rms, or when a band keeps fewer than
      :data:`POOR_MIN_KEPT` (2) comparison stars;
    - else **fair** when fewer than :data:`GOOD_MIN_USED` (90 %) are used, a check
      star scatters more than :data:`GOOD_MAX_CHECK_RATIO` (1.5×) its prediction,
      or a band keeps fewer than :data:`GOOD_MIN_KEPT` (3) comparison stars;
    - else **good**.

    The check-star ratio is the largest over check stars and bands (a star with
    fewer than two points or no prediction does not count); a night without a
    check star is judged on the other rules, and the sentence says so.

    Parameters
    ----------
    report
        The stored night report (``n_exposures``, ``bands`` with ``n_used``,
        ``comparisons_kept`` and ``check_stars``).

    Returns
    -------
    NightVerdict
    """
    bands = report.get("bands") or {}
    total = int(report.get("n_exposures") or 0)
    used = int(sum(int(b.get("n_used") or 0) for b in bands.values()))
    ratio, star, band_of = None, "", ""
    for band, b in sorted(bands.items()):
        for sid, c in sorted((b.get("check_stars") or {}).items()):
            rms, pred, n = c.get("rms"), c.get("predicted_rms"), c.get("n") or 0
            if rms is None or pred is None or n < 2 or not (pred > 0) or not math.isfinite(rms):
                continue
            r = float(rms) / float(pred)
            if ratio is None or r > ratio:
                ratio, star, band_of = r, str(sid), str(band)
    min_kept = min((len(b.get("comparisons_kept") or []) for b in bands.values()), default=0)
    frac = used / total if total else 0.0
    poor, fair = [], []
    if total == 0:
        poor.append("no exposures")
    elif frac < POOR_MIN_USED:
        poor.append(f"only {100 * frac:.0f} % of the exposures used")
    elif frac < GOOD_MIN_USED:
        fair.append(f"{100 * (1 - frac):.0f} % of the exposures flagged")
    if ratio is not None and ratio > POOR_MAX_CHECK_RATIO:
        poor.append(f"check star scatter over {POOR_MAX_CHECK_RATIO:g}× predicted")
    elif ratio is not None and ratio > GOOD_MAX_CHECK_RATIO:
        fair.append(f"check star scatter over {GOOD_MAX_CHECK_RATIO:g}× predicted")
    if bands and min_kept < POOR_MIN_KEPT:
        poor.append(f"fewer than {POOR_MIN_KEPT} comparison stars kept in a band")
    elif bands and min_kept < GOOD_MIN_KEPT:
        fair.append(f"only {min_kept} comparison stars kept in a band")
    verdict = "poor" if poor else "fair" if fair else "good"
    reasons = tuple(poor + fair)
    check = (f"check star {star} scatter {ratio:.2f}× predicted in {band_of}" if ratio is not None
             else "no check star to compare")
    sentence = f"{verdict} night: {used} of {total} exposures used; {check}"
    if reasons:
        sentence += f" ({'; '.join(reasons)})"
    return NightVerdict(verdict, total, used, ratio, star, band_of, int(min_kept), reasons, sentence + ".")


# --------------------------------------------------------------------------- figures


def figure_html(fig: Figure, alt: str, caption: str = "") -> str:
    """``fig`` as a ``<figure>`` holding an embedded PNG (base64 ``data:`` URI) with ``alt`` text.

    The figure is drawn at :data:`FIGURE_DPI` without TeX (as :func:`varstar.plots.save`
    draws) and without the PNG's "Software" text chunk; a :class:`matplotlib.figure.Figure`
    made without pyplot needs no closing (it is freed with its last reference).
    """
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context({"text.usetex": False}):
        fig.savefig(buf, format="png", dpi=FIGURE_DPI, metadata={"Software": None})
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    cap = f"<figcaption>{_e(caption)}</figcaption>" if caption else ""
    return f'<figure><img src="data:image/png;base64,{data}" alt="{_e(alt)}">{cap}</figure>'


def zero_point_figure(exposures: pd.DataFrame, *, title: str = "") -> Figure:
    """Exposure zero points against time, one panel per band, with the airmass on a second axis.

    A zero point is the ensemble's instrumental-minus-standard offset of an
    exposure: it follows the airmass on a clear night and dips or jumps when a
    cloud passes (common practice for judging transparency).  Used exposures are
    drawn with their error bars in the band's colour; flagged ones hollow and
    grey; the airmass is a dashed black line on the right-hand axis.

    Parameters
    ----------
    exposures
        Rows of :meth:`varstar.Archive.exposures` (``band``, ``bjd_tdb``,
        ``zero_point``, ``zero_point_err``, ``airmass``, ``flags``), usually one night.
    title
        The figure's title.
    """
    from matplotlib.figure import Figure

    from .plots import MARKERS, PALETTE, literal_text

    bands = sorted(pd.unique(exposures["band"].astype(str))) if len(exposures) else []
    n = max(1, len(bands))
    fig = Figure(figsize=(9.0, max(3.0, 2.6 * n)), layout="constrained")
    axes = fig.subplots(n, 1, sharex=True, squeeze=False)[:, 0]
    t = pd.to_numeric(exposures["bjd_tdb"], errors="coerce").to_numpy(dtype=float) if len(exposures) else np.zeros(0)
    fin = t[np.isfinite(t)]
    t0 = float(np.floor(fin.min())) if fin.size else 0.0
    for k, (ax, band) in enumerate(zip(axes, bands)):
        d = exposures[exposures["band"].astype(str) == band]
        x = pd.to_numeric(d["bjd_tdb"], errors="coerce").to_numpy(dtype=float) - t0
        zp = pd.to_numeric(d["zero_point"], errors="coerce").to_numpy(dtype=float)
        err = pd.to_numeric(d["zero_point_err"], errors="coerce").to_numpy(dtype=float)
        flagged = d["flags"].fillna("").astype(str).str.len().to_numpy() > 0
        colour, marker = PALETTE[k % len(PALETTE)], MARKERS[k % len(MARKERS)]
        good = ~flagged & np.isfinite(zp)
        if good.any():
            ax.errorbar(x[good], zp[good], yerr=np.where(np.isfinite(err[good]), err[good], 0.0), fmt=marker, ms=3,
                        color=colour, elinewidth=0.6, capsize=0, label=f"{band} zero point")
        bad = flagged & np.isfinite(zp)
        if bad.any():
            ax.plot(x[bad], zp[bad], "o", ms=4, mfc="none", color="0.5", label="flagged exposure")
        ax.set_ylabel(f"{band} zero point (mag)")
        ax.grid(alpha=0.3)
        air = pd.to_numeric(d["airmass"], errors="coerce").to_numpy(dtype=float)
        if np.isfinite(air).any():
            ax2 = ax.twinx()
            order = np.argsort(x)
            ax2.plot(x[order], air[order], "--", color="black", lw=0.9, label="airmass")
            ax2.set_ylabel("airmass")
            h1, l1 = ax.get_legend_handles_labels()
            h2, l2 = ax2.get_legend_handles_labels()
            ax.legend(h1 + h2, l1 + l2, fontsize="small", loc="best")
        elif len(ax.get_legend_handles_labels()[1]) > 1:
            ax.legend(fontsize="small", loc="best")
        if not (good.any() or bad.any()):
            ax.text(0.5, 0.5, f"no {band} zero points", ha="center", va="center", transform=ax.transAxes)
    if not bands:
        axes[0].text(0.5, 0.5, "no exposures", ha="center", va="center", transform=axes[0].transAxes)
    axes[-1].set_xlabel(f"BJD_TDB − {t0:.0f} (d)")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


def comparison_residuals(raw: pd.DataFrame, exposures: pd.DataFrame, stars: list[str]) -> pd.DataFrame:
    """Each comparison star's magnitude against the ensemble, less its own mean, per band.

    A star's calibrated magnitude in an exposure is its instrumental magnitude
    minus the exposure's ensemble zero point, the same step that gives the
    target's and the check stars' magnitudes (``m = M + z`` of the ensemble);
    its mean over the used exposures is taken off, so a constant star scatters
    about zero by its errors and a variable one shows its own light curve.

    Parameters
    ----------
    raw
        Rows of :meth:`varstar.Archive.raw` (``frame``, ``band``, ``star``, ``mag``,
        ``mag_err``, ``flag``), one night.
    exposures
        Rows of :meth:`varstar.Archive.exposures` of the same night.
    stars
        The star ids to keep.

    Returns
    -------
    pandas.DataFrame
        ``star, band, bjd_tdb, dmag, mag_err, flagged`` (flagged: the exposure is
        flagged or the measurement was marked bad upstream).
    """
    cols = ["star", "band", "bjd_tdb", "dmag", "mag_err", "flagged"]
    r = raw[raw["star"].astype(str).isin(stars)]
    if not len(r) or not len(exposures):
        return pd.DataFrame({c: [] for c in cols})
    e = exposures[["frame", "band", "bjd_tdb", "zero_point", "flags"]].rename(columns={"flags": "exp_flags"})
    m = r[["frame", "band", "star", "mag", "mag_err", "flag"]].merge(e, on=["frame", "band"], how="inner")
    m["dmag"] = pd.to_numeric(m["mag"], errors="coerce") - pd.to_numeric(m["zero_point"], errors="coerce")
    m["flagged"] = (m["exp_flags"].fillna("").astype(str).str.len() > 0) | (m["flag"] != 0)
    ok = np.isfinite(m["dmag"].to_numpy(dtype=float))
    m = m[ok]
    means = m[~m["flagged"]].groupby(["star", "band"])["dmag"].mean()
    ref = np.array([means.get((s, b), np.nan) for s, b in zip(m["star"], m["band"])], dtype=float)
    m = m.assign(dmag=m["dmag"].to_numpy(dtype=float) - ref)
    return m[cols].sort_values(["star", "band", "bjd_tdb"]).reset_index(drop=True)


def comparison_figure(resid: pd.DataFrame, status: dict[str, str], *, title: str = "") -> Figure:
    """Small light curves of the comparison stars against the ensemble, one panel per star, bands by colour.

    Parameters
    ----------
    resid
        As :func:`comparison_residuals` returns it.
    status
        Star id -> the words of its status (e.g. "kept (B, V)"), put in the panel's title.
    title
        The figure's title.
    """
    from matplotlib.figure import Figure

    from .plots import MARKERS, PALETTE, literal_text

    stars = sorted(pd.unique(resid["star"].astype(str))) if len(resid) else []
    n = max(1, len(stars))
    ncols = 2 if n > 1 else 1
    nrows = (n + ncols - 1) // ncols
    fig = Figure(figsize=(9.0, max(2.6, 2.0 * nrows + 0.6)), layout="constrained")
    axes = fig.subplots(nrows, ncols, sharex=True, sharey=True, squeeze=False).ravel()
    t = resid["bjd_tdb"].to_numpy(dtype=float) if len(resid) else np.zeros(0)
    t0 = float(np.floor(t.min())) if t.size else 0.0
    bands = sorted(pd.unique(resid["band"].astype(str))) if len(resid) else []
    for ax, star in zip(axes, stars):
        for k, band in enumerate(bands):
            d = resid[(resid["star"] == star) & (resid["band"] == band)]
            good = d[~d["flagged"]]
            if len(good):
                ax.errorbar(good["bjd_tdb"] - t0, good["dmag"], yerr=good["mag_err"], fmt=MARKERS[k % len(MARKERS)],
                            ms=2.5, color=PALETTE[k % len(PALETTE)], elinewidth=0.5, capsize=0, label=band)
        ax.axhline(0.0, color="0.5", lw=0.8)
        ax.set_title(f"{star}: {status.get(star, '')}", fontsize="small", loc="left")
        ax.grid(alpha=0.3)
    for ax in axes[len(stars):]:
        ax.set_visible(False)
    if not stars:
        axes[0].set_visible(True)
        axes[0].text(0.5, 0.5, "no comparison-star points", ha="center", va="center", transform=axes[0].transAxes)
    if stars:
        axes[0].invert_yaxis()  # shared: once
        handles, labels = axes[0].get_legend_handles_labels()
        if len(labels) > 1:
            fig.legend(handles, labels, loc="outside right upper", fontsize="small", title="band")
    fig.supxlabel(f"BJD_TDB − {t0:.0f} (d)", fontsize="medium")
    fig.supylabel("magnitude − its mean (mag)", fontsize="medium")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


# --------------------------------------------------------------------------- HTML pieces


def _table(headers: list[str], rows: list[list[Any]], *, table_id: str = "", row_attrs: list[dict[str, str]] | None = None,
           numeric: set[int] | None = None, raw_cols: set[int] | None = None, caption: str = "",
           wide: set[int] | None = None) -> str:
    """A ``<table>`` in a sideways-scrolling box; every cell escaped except the columns in ``raw_cols``
    (which hold HTML this module built from escaped parts)."""
    numeric, raw_cols, wide = numeric or set(), raw_cols or set(), wide or set()
    head = "".join(f'<th scope="col">{_e(h)}</th>' for h in headers)
    body = []
    for i, row in enumerate(rows):
        attrs = "".join(f' {k}="{_e(v)}"' for k, v in (row_attrs[i] if row_attrs else {}).items())
        cells = []
        for j, v in enumerate(row):
            cls = ' class="num"' if j in numeric else ' class="why"' if j in wide else ""
            cells.append(f"<td{cls}>{v if j in raw_cols else _e(v)}</td>")
        body.append(f"<tr{attrs}>{''.join(cells)}</tr>")
    tid = f' id="{_e(table_id)}"' if table_id else ""
    cap = f"<caption>{_e(caption)}</caption>" if caption else ""
    return (f'<div class="scroll"><table{tid}>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


def _document(title: str, body: str) -> str:
    """The whole page around ``body``: doctype, language, charset, viewport, the inline CSS."""
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{_e(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n{body}\n</main>\n</body>\n</html>\n"
    )


def _list(items: list[str]) -> str:
    return "<ul>" + "".join(f"<li>{_e(i)}</li>" for i in items) + "</ul>" if items else ""


def _night_id(label: str) -> str:
    """The id of a night's section on the archive page."""
    return f"night-{label}"


def _check_rows(report: dict[str, Any]) -> list[list[Any]]:
    rows = []
    for band, b in sorted((report.get("bands") or {}).items()):
        for sid, c in sorted((b.get("check_stars") or {}).items()):
            rms, pred = c.get("rms"), c.get("predicted_rms")
            ratio = float(rms) / float(pred) if rms is not None and pred else None
            rows.append([sid, band, c.get("n", 0), _num(c.get("mean")), _num(rms, ".4f"), _num(pred, ".4f"),
                         _num(ratio, ".2f"), _num(c.get("offset_from_catalog"), "+.3f")])
    return rows


CHECK_HEADERS = ["check star", "band", "points", "mean (mag)", "measured rms (mag)", "predicted rms (mag)",
                 "measured / predicted", "mean − catalogue (mag)"]


def _band_rows(report: dict[str, Any]) -> list[list[Any]]:
    rows = []
    for band, b in sorted((report.get("bands") or {}).items()):
        reasons = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in sorted((b.get("flag_reasons") or {}).items()))
        t = b.get("target") or {}
        rows.append([band, b.get("n_exposures", 0), b.get("n_used", 0), b.get("n_flagged", 0), reasons or "—",
                     len(b.get("comparisons_kept") or []), len(b.get("comparisons_rejected") or []),
                     _num(b.get("calibration_err"), ".4f"),
                     f"{_num(t.get('mag_min'))} – {_num(t.get('mag_max'))}" if t.get("n") else "—",
                     _num(t.get("median_mag_err"), ".4f")])
    return rows


BAND_HEADERS = ["band", "exposures", "used", "flagged", "flagged for", "comparisons kept", "rejected",
                "calibration error (mag)", "target range (mag)", "target median error (mag)"]


def _verdict_tag(v: NightVerdict) -> str:
    return f'<span class="tag {v.verdict}">{_e(v.verdict)}</span>'


# --------------------------------------------------------------------------- the night page


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
    from . import plots
    from .workflows.archive import open_archive

    arch = open_archive(archive_path)
    report = arch.night_report(night)  # refuses an unknown night, naming the nights there are
    d = _night_data(arch, night)
    tgt = d["target"]
    verdict = night_verdict(report)
    name = tgt.name
    parts = [f"<h1>{_e(name)} — night {_e(night)}</h1>",
             f'<p id="verdict" class="{verdict.verdict}">{_e(verdict.sentence)}</p>']
    sources = ", ".join(Path(str(s)).name for s in report.get("sources") or [])
    software = str(d["night_row"]["software"].iloc[0]) if len(d["night_row"]) else ""
    ingested = str(d["night_row"]["ingested_utc"].iloc[0]) if len(d["night_row"]) else ""
    parts.append(f'<p class="note">Measurements from {_e(sources or "—")}; reduced by {_e(software or "—")} '
                 f"on {_e(ingested or '—')}; BJD_TDB {_num(report.get('bjd_start'), '.4f')} to "
                 f"{_num(report.get('bjd_end'), '.4f')}.</p>")
    parts.append("<h2>Exposures per band</h2>" + _table(BAND_HEADERS, _band_rows(report), table_id="bands",
                                                        numeric={1, 2, 3, 5, 6, 7, 9}))
    warnings = [str(w) for w in report.get("warnings") or []]
    for band, b in sorted((report.get("bands") or {}).items()):
        warnings += [f"{band}: {w}" for w in (b.get("ensemble") or {}).get("warnings") or []]
    unusual = [str(u) for u in report.get("accepted_unusual") or []]
    if warnings:
        parts.append("<h3>Warnings</h3>" + _list(warnings))
    if unusual:
        parts.append("<h3>Accepted although unusual</h3>" + _list(unusual))

    lc, checks = d["lc"], d["checks"]
    bands = sorted(pd.unique(lc["band"].astype(str))) if len(lc) else []
    parts.append("<h2>Light curve</h2>")
    n_flag = int((lc["quality"] != 0).sum()) if len(lc) else 0
    fig = plots.lightcurve_figure(lc, title=f"{name}, night {night}", show_flagged=True,
                                  checks=checks if len(checks) else None)
    parts.append(figure_html(
        fig, f"Light curve of {name} on night {night}: magnitude against BJD_TDB in {', '.join(bands) or 'no band'}, "
             f"{len(lc) - n_flag} good points and {n_flag} flagged points (hollow grey)"
             + (f"; a lower panel shows the check stars less their means" if len(checks) else ""),
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
        parts.append(f"<details><summary>{_e(_plural(len(flagged_rows), 'flagged exposure'))}</summary>"
                     + _table(["frame", "band", "why"], flagged_rows, table_id="flagged") + "</details>")

    parts.append(_comparison_section(d, night, name))
    parts.append("<h2>Check stars</h2>")
    rows = _check_rows(report)
    parts.append(_table(CHECK_HEADERS, rows, table_id="checks", numeric={2, 3, 4, 5, 6, 7}) if rows
                 else "<p>No check star in this night.</p>")
    parts.append('<p class="note">Predicted rms: what the points\' own errors allow; a ratio near 1 means the '
                 "errors describe the scatter. The check stars' curves are the light curve's lower panel.</p>")
    parts.append(_colour_section(lc, name, night))
    parts.append(_settings_section(arch, report, software))
    return _document(f"{name} — night {night}", "\n".join(parts))


def _comparison_section(d: dict[str, Any], night: str, name: str) -> str:
    comps = d["comparisons"]
    headers = ["star", "band", "status", "why", "excess scatter (mag)", "χ²/dof", "offset (mag)"]
    rows, attrs = [], []
    for r in comps.itertuples():
        reason = str(r.reason) if str(r.reason) else ("used in the ensemble" if r.status == "kept" else "")
        rows.append([r.star, r.band, STATUS_WORDS.get(str(r.status), str(r.status)), reason, _num(r.excess, ".4f"),
                     _num(r.chi2_dof, ".2f"), _num(r.offset, "+.3f")])
        attrs.append({"data-star": str(r.star), "data-status": str(r.status), "data-band": str(r.band)})
    out = ["<h2>Comparison stars</h2>",
           _table(headers, rows, table_id="comparisons", row_attrs=attrs, numeric={4, 5, 6}, wide={3})]
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
    from . import plots

    if not len(lc) or "transformed" not in lc or not lc["transformed"].any():
        return ("<h2>Standard colour</h2><p>This night is not on the standard system (no transformation "
                "applied), so there is no B − V.</p>")
    good = lc[(lc["quality"] == 0) & lc["transformed"] & np.isfinite(lc["bv"].to_numpy(dtype=float))]
    if not len(good):
        return "<h2>Standard colour</h2><p>No good transformed point carries a B − V.</p>"
    bv = good["bv"].to_numpy(dtype=float)
    text = (f"<p>Standard B − V of the target: {_num(np.min(bv))} to {_num(np.max(bv))} mag, median "
            f"{_num(np.median(bv))} ({_plural(len(bv), 'point')}).</p>")
    fig = plots.colour_figure(good, title=f"{name}, night {night}: standard B − V")
    return "<h2>Standard colour</h2>" + text + figure_html(
        fig, f"Standard B − V of {name} on night {night} against BJD_TDB, {len(bv)} points, "
             f"from {_num(np.min(bv))} to {_num(np.max(bv))} mag", "")


def _settings_section(arch: Archive, report: dict[str, Any], software: str) -> str:
    out = ["<h2>Settings and software</h2>", f"<p>Reduced by {_e(software or 'an unknown version')}."]
    if "description" in report:
        out.append(f" Target description number {_e(report['description'])} was in force for this reduction.")
    out.append("</p>")
    for band, b in sorted((report.get("bands") or {}).items()):
        ens = b.get("ensemble") or {}
        settings = ens.get("settings") or {}
        if settings:
            rows = [[k, v] for k, v in settings.items()]
            out.append(f"<h3>Ensemble settings, {_e(band)}</h3>"
                       f"<p class=\"note\">{_e(ens.get('method', ''))}; {_e(ens.get('iterations', '?'))} iterations, "
                       f"{'converged' if ens.get('converged') else 'not converged'}.</p>"
                       + _table(["setting", "value"], rows))
    text = arch.target.source_text
    out.append(f"<details><summary>Target description in force</summary><pre>{_e(text)}</pre></details>")
    return "\n".join(out)


# --------------------------------------------------------------------------- the archive page


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
    from . import plots
    from .workflows.archive import open_archive

    arch = open_archive(archive_path)
    tgt = arch.target
    name = tgt.name
    nights = arch.nights()
    verdicts = {str(n): night_verdict(arch.night_report(str(n))) for n in nights["night"]}
    parts = [f"<h1>{_e(name)}</h1>",
             f'<p class="note">Archive {_e(Path(str(archive_path)).name)}: {_plural(len(nights), "night")}, '
             f"RA {tgt.ra_deg:.5f}°, Dec {tgt.dec_deg:+.5f}°.</p>"]
    rows = []
    for r in nights.itertuples():
        v = verdicts[str(r.night)]
        link = f'<a href="#{_e(_night_id(str(r.night)))}">{_e(r.night)}</a>'
        rows.append([link, r.n_exposures, v.n_used, _verdict_tag(v), _num(v.check_ratio, ".2f"), v.sentence])
    parts.append("<h2>Nights</h2>" + _table(["night", "exposures", "used", "verdict", "check ratio", "in one sentence"],
                                            rows, table_id="nights", raw_cols={0, 3}, numeric={1, 2, 4}))
    lc = arch.lightcurve(columns=["bjd_tdb", "mag", "mag_err", "band", "night", "quality"])
    parts.append("<h2>Light curve</h2>")
    n_nights = int(lc["night"].nunique()) if len(lc) else 0
    shown = lc if n_nights <= MAX_NIGHTS_COLOURED else lc.assign(night=f"{n_nights} nights")
    bands = sorted(pd.unique(lc["band"].astype(str))) if len(lc) else []
    parts.append(figure_html(
        plots.lightcurve_figure(shown, title=name),
        f"Light curve of {name}: {len(lc)} good points over {_plural(n_nights, 'night')} in "
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
        parts.append(_night_summary(arch.night_report(str(r.night)), verdicts[str(r.night)], str(r.software)))
    parts.append("<details><summary>Target description in force</summary>"
                 f"<pre>{_e(tgt.source_text)}</pre></details>")
    return _document(name, "\n".join(parts))


def _night_summary(report: dict[str, Any], v: NightVerdict, software: str) -> str:
    label = str(report.get("night", ""))
    rejected = sorted({f"{rj.get('star')} ({b}: {STATUS_WORDS.get(rj.get('status'), rj.get('status'))})"
                       for b, x in (report.get("bands") or {}).items() for rj in x.get("comparisons_rejected") or []})
    out = [f'<section class="night" id="{_e(_night_id(label))}">',
           f"<h3>Night {_e(label)} {_verdict_tag(v)}</h3>", f"<p>{_e(v.sentence)}</p>",
           _table(BAND_HEADERS, _band_rows(report), numeric={1, 2, 3, 5, 6, 7, 9})]
    if rejected:
        out.append(f"<p>Comparison stars rejected: {_e('; '.join(rejected))}.</p>")
    checks = _check_rows(report)
    if checks:
        out.append(_table(CHECK_HEADERS, checks, numeric={2, 3, 4, 5, 6, 7}))
    out.append(f'<p class="note">Reduced by {_e(software)}.</p></section>')
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
    from . import plots
    from .errors import VarstarError

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
           f"<p>Latest analysis ({_e(last['computed_utc'])}, {_e(res.get('method', ''))}): period "
           f"{_num(period, '.7f')} ± {_num(res.get('period_err'), '.7f')} d, epoch BJD_TDB {_num(epoch, '.5f')} "
           f"({_e(res.get('epoch_kind') or 'phase 0')}), peak-to-peak amplitude {_num(res.get('amplitude'))} mag, "
           f"false-alarm probability {_e(res.get('fap_text', _num(res.get('fap'), '.2g')))}; "
           f"{res.get('n_points', 0)} points over {_num(res.get('baseline_d'), '.1f')} d.</p>"]
    notes = [str(res[k]) for k in ("alias_note", "modes_note") if res.get(k)] + [str(w) for w in res.get("warnings") or []]
    if notes:
        out.append(_list(notes))
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
        out.append("<h3>Periodogram peaks (stored)</h3>" + _table(
            ["period (d)", "frequency (c/d)", "power", "power / best", "relation"],
            [[_num(p.get("period"), ".6f"), _num(p.get("frequency"), ".6f"), _num(p.get("power"), ".4f"),
              _num(p.get("power_ratio"), ".3f"), p.get("relation", "")] for p in peaks],
            table_id="peaks", numeric={0, 1, 2, 3}))
        out.append('<p class="note">The periodogram itself is not stored with the analysis; its highest peaks are. '
                   "Run the period analysis again to draw it.</p>")
    out.append("<h3>Period history</h3>" + _table(
        ["analysis", "computed (UTC)", "software", "bands", "method", "points", "baseline (d)", "period (d)",
         "± (d)", "epoch (BJD_TDB)", "amplitude (mag)"],
        [[r.analysis, r.computed_utc, r.software, r.bands, r.method, r.n_points, _num(r.baseline_days, ".1f"),
          _num(r.period, ".7f"), _num(r.period_err, ".7f"), _num(r.epoch, ".5f"), _num(r.amplitude)]
         for r in history.itertuples()], table_id="periods", numeric={0, 5, 6, 7, 8, 9, 10}))
    return "\n".join(out)


def _timings_section(arch: Archive, name: str) -> str:
    from . import plots

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
        out.append(_table(
            ["night", "band", "type", "method", "BJD_TDB", "± (d)", "cycle", "O − C (min)", "estimates disagree"],
            [[r.night, r.band, r.type, r.method, _num(r.bjd_tdb, ".5f"), _num(r.err, ".5f"), _num(c, "g"),
              _num(o * 1440.0, "+.2f"), "yes" if r.disagree else "no"]
             for r, c, o in zip(timings.itertuples(), cycle, oc)], table_id="timings", numeric={4, 5, 6, 7}))
    if len(ephs):
        out.append("<h3>Ephemeris history</h3>" + _table(
            ["entry", "set (UTC)", "source", "kind", "epoch (BJD_TDB)", "± (d)", "period (d)", "± (d)", "quadratic",
             "timings", "note"],
            [[r.ephemeris, r.set_utc, r.source, r.kind, _num(r.epoch, ".5f"), _num(r.epoch_err, ".5f"),
              _num(r.period, ".7f"), _num(r.period_err, ".7f"), _num(r.quadratic, ".3g"), r.n_timings, r.note]
             for r in ephs.itertuples()], table_id="ephemerides", numeric={4, 5, 6, 7, 8, 9}))
    return "\n".join(out)


def _predict_section(arch: Archive, nights: pd.DataFrame) -> str:
    from .workflows.extrema import active_ephemeris

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
    rows = [[e["utc"], _num(e["bjd_tdb"], ".5f"), e["type"], _num(e["cycle"], "g"),
             _num(e["target_altitude_deg"], ".0f"), _num(e["sun_altitude_deg"], ".0f"),
             "yes" if e["visible"] else "no"] for e in pred["events"]]
    text = (f"<p>Predicted {_e(pred['ephemeris'].get('kind', 'extrema'))} times from the ephemeris in force "
            f"(T0 = {_num(pred['ephemeris'].get('epoch'), '.5f')}, P = {_num(pred['ephemeris'].get('period'), '.7f')} d), "
            f"for the {PREDICT_DAYS:g} days after the last exposure ({_e(start)} UTC). Observable: the target at "
            f"least {_num(pred['min_altitude_deg'], 'g')}° high with the Sun below "
            f"{_num(pred['max_sun_altitude_deg'], 'g')}° at the site.</p>")
    table = _table(["UTC", "BJD_TDB", "type", "cycle", "target altitude (°)", "Sun altitude (°)", "observable"], rows,
                   table_id="predictions", numeric={1, 3, 4, 5}) if rows else "<p>No extremum falls in that week.</p>"
    return head + text + table


# --------------------------------------------------------------------------- writing


def write_page(html_text: str, path: str | os.PathLike[str]) -> Path:
    """Write a page (UTF-8) through :func:`varstar.export.write_atomic`, the one writer of result files.

    Returns the path written; raises :class:`varstar.errors.OutputError` as
    :func:`~varstar.export.write_atomic` does (nothing partial is left).
    """
    from .export import write_atomic

    return write_atomic(path, html_text.encode("utf-8"))
