"""Every figure varstar draws (matplotlib, Agg backend); each function returns a Figure.

Conventions (common practice in the trade): magnitude axes run bright-up
(inverted), every point carries its error bar, axes name their units and time
system.  Colours come from the Okabe & Ito (2008) colour-blind-safe palette and
each series also differs by marker shape, so the figures read in grey too.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

#: Okabe & Ito (2008) palette, without black (kept for models and text).
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")


def _figure(n_panels: int, width: float = 9.0, height_per: float = 3.2) -> "Figure":
    from matplotlib.figure import Figure

    return Figure(figsize=(width, max(3.0, height_per * n_panels)), layout="constrained")


def _time_offset(t: np.ndarray) -> float:
    """A round offset to subtract from BJD on an axis (whole days for a short span, else hundreds)."""
    if not t.size:
        return 0.0
    lo, hi = float(np.nanmin(t)), float(np.nanmax(t))
    return float(np.floor(lo)) if hi - lo < 5.0 else float(np.floor(lo / 100.0) * 100.0)


def lightcurve_figure(lc: pd.DataFrame, *, title: str = "", show_flagged: bool = False) -> "Figure":
    """Light curve per band against BJD_TDB, nights told apart by colour and marker.

    Parameters
    ----------
    lc
        As returned by :meth:`varstar.Archive.lightcurve` (``include_flagged``
        may be true; flagged points are then drawn hollow in grey when
        ``show_flagged``).
    """
    bands = sorted(pd.unique(lc["band"])) if len(lc) else []
    fig = _figure(max(1, len(bands)))
    axes = fig.subplots(max(1, len(bands)), 1, sharex=True, squeeze=False)[:, 0]
    t0 = _time_offset(lc["bjd_tdb"].to_numpy()) if len(lc) else 0.0
    nights = sorted(pd.unique(lc["night"])) if len(lc) else []
    style = {n: (PALETTE[k % len(PALETTE)], MARKERS[(k // len(PALETTE) + k) % len(MARKERS)]) for k, n in enumerate(nights)}
    for ax, band in zip(axes, bands):
        sub = lc[lc["band"] == band]
        good = sub[sub["quality"] == 0] if "quality" in sub else sub
        for night, g in good.groupby("night", sort=True):
            colour, marker = style[night]
            ax.errorbar(
                g["bjd_tdb"] - t0, g["mag"], yerr=g["mag_err"], fmt=marker, ms=3.5, color=colour,
                ecolor=colour, elinewidth=0.7, capsize=0, alpha=0.9, label=str(night),
            )
        if show_flagged and "quality" in sub:
            bad = sub[sub["quality"] != 0]
            if len(bad):
                ax.errorbar(
                    bad["bjd_tdb"] - t0, bad["mag"], yerr=bad["mag_err"], fmt="o", ms=3.5, mfc="none",
                    color="0.55", elinewidth=0.6, capsize=0, label="flagged",
                )
        ax.invert_yaxis()
        ax.set_ylabel(f"{band} (mag)")
        ax.grid(alpha=0.3)
    if len(bands) == 0:
        axes[0].text(0.5, 0.5, "no observations", ha="center", va="center", transform=axes[0].transAxes)
    axes[-1].set_xlabel(f"BJD_TDB − {t0:.0f} (d)")
    if nights:
        handles, labels = axes[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside right upper", title="night", fontsize="small")
    if title:
        fig.suptitle(title)
    return fig


def save(fig: "Figure", path) -> None:
    """Save a figure (format from the file name, png by default), atomically."""
    import io
    from pathlib import Path

    from .errors import OutputError
    from .export import write_atomic

    path = Path(path)
    fmt = path.suffix.lstrip(".").lower() or "png"
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format=fmt, dpi=120)
    except ValueError:
        raise OutputError(f"{path}: unknown image format '{fmt}' (use .png, .pdf or .svg)") from None
    write_atomic(path, buf.getvalue())
