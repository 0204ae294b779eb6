"""The figures only a report page draws (zero points with airmass, comparison stars against the ensemble), and
how any figure goes into a page: a PNG at a modest resolution, embedded as a ``data:`` URI with its ``alt`` text."""

from __future__ import annotations

import base64
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .markup import esc

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure


#: Resolution of the embedded PNG figures (dots per inch): a 9-inch figure is 720 pixels wide, sharp on a
#: desktop and small enough that a page of many figures stays well under a few megabytes.
FIGURE_DPI = 80


def figure_html(fig: Figure, alt: str, caption: str = "") -> str:
    """``fig`` as a ``<figure>`` holding an embedded PNG (base64 ``data:`` URI) with ``alt`` text.

    The figure is drawn at :data:`FIGURE_DPI` without TeX (as :func:`varstar.plots.save`
    draws) and without the PNG's "Software" text chunk; a :class:`matplotlib.figure.Figure`
    made without pyplot needs no closing (it is freed with its last reference).
    """
    from ..plots import render

    data = base64.b64encode(render(fig, "png", dpi=FIGURE_DPI, metadata={"Software": None})).decode("ascii")
    cap = f"<figcaption>{esc(caption)}</figcaption>" if caption else ""
    return f'<figure><img src="data:image/png;base64,{data}" alt="{esc(alt)}">{cap}</figure>'


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

    from ..plots import MARKERS, PALETTE, literal_text

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

    from ..plots import MARKERS, PALETTE, literal_text

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
