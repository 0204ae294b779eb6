"""Every figure varstar draws (matplotlib, Agg backend); each function returns a Figure.

Conventions (common practice in the trade): magnitude axes run bright-up
(inverted), every point carries its error bar, axes name their units and time
system.  Colours come from the Okabe & Ito (2008) colour-blind-safe palette and
each series also differs by marker shape, so the figures read in grey too.

Every figure answers one question, and its words say what it shows: a legend
only when it has two entries or more (one entry goes to a title or an axis
label instead), periods printed alike in titles and axes (:func:`period_text`),
and a constant taken off a difference of magnitudes named in the axis label.
The figures: :func:`lightcurve_figure` (all nights, or the night figure with a
check-star panel), :func:`nights_figure` (night by night), :func:`colour_figure`,
:func:`colour_magnitude_figure`, :func:`coefficient_figure`,
:func:`periodogram_figure`, :func:`phased_figure`, :func:`oc_figure`, and
:func:`period_figures` / :func:`timings_figure` for whole results.

User text (target names, star ids, bands) is drawn as written: no figure uses
matplotlib's mathtext or TeX, and :func:`literal_text` switches both off for
every text a figure function places.  :func:`save` renders into memory and
hands the bytes to :func:`varstar.export.write_atomic`, so plots go wherever
the other results go (a file, a link, a FIFO, ``-``).
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # pragma: no cover
    import os
    from collections.abc import Iterator

    from matplotlib.figure import Figure
    from matplotlib.text import Text

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


def _legend_or_title(ax, handles: list, labels: list[str], **kw) -> None:
    """A legend when there are two entries or more; a single entry becomes the panel's right-hand title.

    A legend of one entry names nothing a reader could confuse, so the words go
    where the panel's other information is; no entries, nothing is drawn.
    """
    if len(labels) >= 2:
        ax.legend(handles, labels, **kw)
    elif len(labels) == 1:
        ax.set_title(labels[0], loc="right", fontsize="small")


def _unique_entries(axes) -> dict[str, object]:
    """Legend entries of ``axes`` by label (first handle of each), in drawing order; private labels left out."""
    seen: dict[str, object] = {}
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            seen.setdefault(lab, h)
    return seen


def _flag_mask(df: pd.DataFrame) -> np.ndarray:
    """True for flagged points (quality other than 0); none flagged when there is no ``quality`` column."""
    if "quality" not in df or not len(df):
        return np.zeros(len(df), dtype=bool)
    return pd.to_numeric(df["quality"], errors="coerce").fillna(1).to_numpy() != 0


def lightcurve_figure(lc: pd.DataFrame, *, title: str = "", show_flagged: bool = False,
                      checks: pd.DataFrame | None = None) -> "Figure":
    """Light curve per band against BJD_TDB, nights told apart by colour and marker.

    The overview of any number of nights, and the night figure when ``lc``
    holds one night: then a UT axis runs along the top, the night's label is the
    top panel's right-hand title (no legend of one night), and a note on the
    left says what the hollow grey points are when flagged points are shown.

    Parameters
    ----------
    lc
        As returned by :meth:`varstar.Archive.lightcurve` (``include_flagged``
        may be true; flagged points are then drawn hollow in grey when
        ``show_flagged``).
    title
        The figure's title.
    show_flagged
        Draw flagged points (hollow, grey) beside the good ones.
    checks
        Check-star points (same columns as ``lc``, with ``star``): drawn in a
        panel of their own under the bands, each star and band as its
        difference from its own weighted mean magnitude, so every check star
        shares one scale and its scatter (σ, in the legend or the panel's
        title) reads directly against the target's variation.
    """
    bands = sorted(pd.unique(lc["band"])) if len(lc) else []
    with_checks = checks is not None and len(checks) > 0
    n_main = max(1, len(bands))
    fig = _figure(n_main + int(with_checks))
    all_axes = fig.subplots(n_main + int(with_checks), 1, sharex=True, squeeze=False)[:, 0]
    axes = all_axes[:n_main]
    times = lc["bjd_tdb"].to_numpy(dtype=float) if len(lc) else np.zeros(0)
    if with_checks:
        times = np.concatenate([times, pd.to_numeric(checks["bjd_tdb"], errors="coerce").to_numpy(dtype=float)])
    t0 = _time_offset(times[np.isfinite(times)])
    nights = sorted(pd.unique(lc["night"])) if len(lc) else []
    style = {n: (PALETTE[k % len(PALETTE)], MARKERS[(k // len(PALETTE) + k) % len(MARKERS)]) for k, n in enumerate(nights)}
    flagged_drawn = False
    for ax, band in zip(axes, bands):
        sub = lc[lc["band"] == band]
        flag = _flag_mask(sub)
        good = sub[~flag]
        for night, g in good.groupby("night", sort=True):
            colour, marker = style[night]
            ax.errorbar(
                g["bjd_tdb"] - t0, g["mag"], yerr=g["mag_err"], fmt=marker, ms=3.5, color=colour,
                ecolor=colour, elinewidth=0.7, capsize=0, alpha=0.9, label=str(night),
            )
        if show_flagged and flag.any():
            bad = sub[flag]
            ax.errorbar(
                bad["bjd_tdb"] - t0, bad["mag"], yerr=bad["mag_err"], fmt="o", ms=3.5, mfc="none",
                color="0.55", elinewidth=0.6, capsize=0, label="flagged",
            )
            flagged_drawn = True
        ax.invert_yaxis()
        ax.set_ylabel(f"{band} (mag)")
        ax.grid(alpha=0.3)
    if len(bands) == 0:
        axes[0].text(0.5, 0.5, "no observations", ha="center", va="center", transform=axes[0].transAxes)
    if with_checks:
        _check_panel(all_axes[-1], checks, t0, show_flagged)
    all_axes[-1].set_xlabel(f"BJD_TDB − {t0:.0f} (d)")
    if len(nights) == 1:
        _ut_axis(axes[0], lc, t0)
        # one night: its label is the panel's title, not a legend of one entry
        axes[0].set_title(str(nights[0]), loc="right", fontsize="small")
        if flagged_drawn:
            axes[0].set_title("hollow grey: flagged points", loc="left", fontsize="small")
    elif nights:
        # every panel's entries: a night seen in one band only, or flagged points in one band only, count too
        seen = _unique_entries(axes)
        labels = [str(n) for n in nights if str(n) in seen] + (["flagged"] if "flagged" in seen else [])
        fig.legend([seen[lab] for lab in labels], labels, loc="outside right upper", title="night", fontsize="small")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


def _check_panel(ax, checks: pd.DataFrame, t0: float, show_flagged: bool) -> None:
    """Check-star points on ``ax`` (x: BJD_TDB − ``t0``), each star and band less its weighted mean magnitude.

    The mean is taken over the star's good points in that band (inverse-variance
    weights; plain mean where an error is missing); its flagged points, when
    shown, are drawn hollow grey against the same mean.
    """
    t = pd.to_numeric(checks["bjd_tdb"], errors="coerce").to_numpy(dtype=float)
    mag = pd.to_numeric(checks["mag"], errors="coerce").to_numpy(dtype=float)
    err = pd.to_numeric(checks["mag_err"], errors="coerce").to_numpy(dtype=float)
    flag = _flag_mask(checks)
    ok = np.isfinite(t) & np.isfinite(mag)
    stars = checks["star"].astype(str).to_numpy()
    bands = checks["band"].astype(str).to_numpy() if "band" in checks else np.full(len(checks), "")
    keys = sorted({(s, b) for s, b, o in zip(stars, bands, ok) if o})
    for k, (star, band) in enumerate(keys):
        colour, marker = PALETTE[(k + 1) % len(PALETTE)], MARKERS[(k + 1) % len(MARKERS)]
        m = ok & (stars == star) & (bands == band)
        good = m & ~flag
        base = good if good.any() else m
        e = err[base]
        w = 1.0 / e**2 if np.all(np.isfinite(e) & (e > 0)) else np.ones(e.size)
        ref = float(np.sum(w * mag[base]) / np.sum(w))
        name = f"{star} {band}".strip()
        if good.any():
            sd = float(np.std(mag[good] - ref, ddof=1)) if good.sum() > 1 else float("nan")
            label = f"{name}: σ = {sd:.3f} mag" if np.isfinite(sd) else name
            ax.errorbar(t[good] - t0, mag[good] - ref, yerr=err[good], fmt=marker, ms=3.5, color=colour,
                        ecolor=colour, elinewidth=0.7, capsize=0, alpha=0.9, label=label)
        bad = m & flag
        if show_flagged and bad.any():
            ax.errorbar(t[bad] - t0, mag[bad] - ref, yerr=err[bad], fmt="o", ms=3.5, mfc="none", color="0.55",
                        elinewidth=0.6, capsize=0, label="flagged")
    ax.axhline(0.0, color="0.6", lw=0.8)
    ax.invert_yaxis()
    ax.set_ylabel("check star − its mean (mag)")
    ax.grid(alpha=0.3)
    if not keys:
        ax.text(0.5, 0.5, "no check-star points", ha="center", va="center", transform=ax.transAxes)
    seen = _unique_entries([ax])
    labels = [lab for lab in seen if lab != "flagged"] + (["flagged"] if "flagged" in seen else [])
    _legend_or_title(ax, [seen[lab] for lab in labels], labels, fontsize="small", loc="best")


def _ut_axis(ax, lc: pd.DataFrame, t0: float) -> None:
    """A secondary axis on top of ``ax`` (x: BJD_TDB − ``t0`` in days) reading UT in hours, from ``jd_utc``.

    Nothing is added when the light curve has no finite ``jd_utc``.  Over one
    night BJD_TDB − JD(UTC) changes by a few seconds at most (the light time
    drifts slowly, the leap-second count is constant), far below an hour tick, so one
    offset maps the axes.  Hours count from the UT midnight before the first
    point and are labelled modulo 24.
    """
    from matplotlib.ticker import FuncFormatter

    if "jd_utc" not in lc:
        return
    jd = pd.to_numeric(lc["jd_utc"], errors="coerce").to_numpy(dtype=float)
    bjd = lc["bjd_tdb"].to_numpy(dtype=float)
    ok = np.isfinite(jd) & np.isfinite(bjd)
    if not ok.any():
        return
    midnight = float(np.floor(jd[ok].min() - 0.5) + 0.5)  # JD of 0 h UT (a Julian day starts at noon)
    shift = (t0 - midnight) + float(np.median(jd[ok] - bjd[ok]))  # x (d) + shift = days since that midnight
    sec = ax.secondary_xaxis("top", functions=(lambda x: (np.asarray(x) + shift) * 24.0,
                                               lambda h: np.asarray(h) / 24.0 - shift))
    sec.xaxis.set_major_formatter(FuncFormatter(lambda h, _pos: f"{round(h, 6) % 24:g}"))
    sec.set_xlabel("UT (hours)")


#: Narrowest x range of a night panel (hours) and its margins (fraction of the widest night, at least 0.1 h).
NIGHT_MIN_SPAN_H = 0.5
NIGHT_PAD = 0.04


def _night_hours(d: pd.DataFrame) -> tuple[np.ndarray, str, bool]:
    """Each point's x in :func:`nights_figure`: hours within its night, the axis label, and whether it is UT.

    UT hours when every night has a finite ``jd_utc``: counted from the UT
    midnight before the night's first point (a Julian day starts at noon, so
    0 h UT is JD n + 0.5; common practice), so a night over midnight runs from
    21 to 26 and is labelled modulo 24.  A point without ``jd_utc`` takes its
    BJD_TDB plus the night's median JD(UTC) − BJD_TDB, which drifts by seconds
    over a night.  Otherwise hours since the night's first point in BJD_TDB.
    """
    bjd = d["bjd_tdb"].to_numpy(dtype=float)
    jd = pd.to_numeric(d["jd_utc"], errors="coerce").to_numpy(dtype=float) if "jd_utc" in d else np.full(len(d), np.nan)
    night = d["night"].astype(str).to_numpy()
    labels = pd.unique(night)
    has_ut = len(labels) > 0 and all(np.isfinite(jd[night == n]).any() for n in labels)
    hours = np.empty(len(d))
    for n in labels:
        m = night == n
        if has_ut:
            fin = np.isfinite(jd) & m
            ut = np.where(np.isfinite(jd[m]), jd[m], bjd[m] + float(np.median(jd[fin] - bjd[fin])))
            midnight = float(np.floor(ut.min() - 0.5) + 0.5)
            hours[m] = (ut - midnight) * 24.0
        else:
            hours[m] = (bjd[m] - bjd[m].min()) * 24.0
    label = "UT (hours)" if has_ut else "hours since the night's first point (BJD_TDB)"
    return hours, label, has_ut


def nights_figure(lc: pd.DataFrame, *, title: str = "", show_flagged: bool = False, max_nights: int = 12) -> "Figure":
    """The light curve night by night: one column per night, one row per band.

    Each panel's x axis is the hours of its own night (UT when the light curve
    has ``jd_utc``, else hours since the night's first point in BJD_TDB), and
    every panel spans the same number of hours, so a slope reads the same in
    every night.  Each row shares one inverted magnitude axis, so nights compare
    at a glance; the night's label heads its column.  With more nights than
    ``max_nights`` the latest are drawn and the title says how many were left
    out.  Bands keep the colour and marker they have in :func:`phased_figure`.

    Parameters
    ----------
    lc
        As :meth:`varstar.Archive.lightcurve` returns it (``bjd_tdb``, ``band``,
        ``mag``, ``mag_err``, ``night``; ``jd_utc`` and ``quality`` used when present).
    title
        The figure's title (a second line adds the notes).
    show_flagged
        Draw flagged points, hollow and grey; without it they are left out (their
        nights still count and keep their panel).
    max_nights
        Most nights drawn (the latest, by time), at least 1.

    Raises
    ------
    InputError
        ``max_nights`` is below 1.
    """
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    from .errors import InputError

    if int(max_nights) < 1:
        raise InputError(f"nights figure: max_nights must be at least 1 (got {max_nights})")
    if len(lc):
        ok = np.isfinite(pd.to_numeric(lc["bjd_tdb"], errors="coerce").to_numpy(dtype=float))
        ok &= np.isfinite(pd.to_numeric(lc["mag"], errors="coerce").to_numpy(dtype=float))
        d = lc[ok].copy()
    else:
        d = lc
    d = d.assign(night=d["night"].astype(str)) if len(d) else d
    order = d.groupby("night")["bjd_tdb"].min().sort_values() if len(d) else pd.Series(dtype=float)
    every = [str(n) for n in order.index]
    shown = every[-int(max_nights):]
    left_out = len(every) - len(shown)
    d = d[d["night"].isin(shown)] if len(d) else d
    bands = sorted(pd.unique(d["band"])) if len(d) else []
    n_rows, n_cols = max(1, len(bands)), max(1, len(shown))
    fig = Figure(figsize=(min(26.0, max(6.0, 1.6 * n_cols + 1.8)), 2.8 * n_rows + 1.2), layout="constrained")
    axes = fig.subplots(n_rows, n_cols, sharex="col", sharey="row", squeeze=False)
    if not shown:
        axes[0, 0].text(0.5, 0.5, "no observations", ha="center", va="center", transform=axes[0, 0].transAxes)
        if title:
            fig.suptitle(title)
        return literal_text(fig)
    hours, xlabel, is_ut = _night_hours(d)
    flag = _flag_mask(d)
    night_of, band_of = d["night"].to_numpy(), d["band"].to_numpy()
    mag, err = d["mag"].to_numpy(dtype=float), d["mag_err"].to_numpy(dtype=float)
    starts = {n: float(hours[night_of == n].min()) for n in shown}
    widest = max(float(np.ptp(hours[night_of == n])) for n in shown)
    widest = max(widest, NIGHT_MIN_SPAN_H)
    pad = max(NIGHT_PAD * widest, 0.1)
    tick_format = FuncFormatter(lambda h, _pos: f"{round(h, 6) % 24:g}")
    flagged_drawn = False
    for i, band in enumerate(bands):
        colour, marker = PALETTE[i % len(PALETTE)], MARKERS[i % len(MARKERS)]
        for j, night in enumerate(shown):
            ax = axes[i, j]
            m = (night_of == night) & (band_of == band)
            good, bad = m & ~flag, m & flag
            if good.any():
                ax.errorbar(hours[good], mag[good], yerr=err[good], fmt=marker, ms=3.0, color=colour, ecolor=colour,
                            elinewidth=0.6, capsize=0, alpha=0.9, label=str(band))
            if show_flagged and bad.any():
                ax.errorbar(hours[bad], mag[bad], yerr=err[bad], fmt="o", ms=3.0, mfc="none", color="0.55",
                            elinewidth=0.5, capsize=0, label="flagged")
                flagged_drawn = True
            if not (good.any() or (show_flagged and bad.any())):
                ax.text(0.5, 0.5, f"no {band} points", ha="center", va="center", fontsize="small", color="0.4",
                        transform=ax.transAxes)
        axes[i, 0].set_ylabel(f"{band} (mag)")
        axes[i, 0].yaxis.set_inverted(True)  # the row shares it: set once, not toggled per panel
    for j, night in enumerate(shown):
        axes[0, j].set_title(night, fontsize="small")
        axes[0, j].set_xlim(starts[night] - pad, starts[night] + widest + pad)
        for ax in axes[:, j]:
            ax.xaxis.set_major_locator(MaxNLocator(nbins=4, steps=[1, 2, 3, 5, 6, 10]))
            if is_ut:
                ax.xaxis.set_major_formatter(tick_format)
            ax.grid(alpha=0.3)
    fig.supxlabel(xlabel, fontsize="medium")
    notes = []
    if left_out:
        notes.append(f"latest {len(shown)} of {len(every)} nights; {left_out} earlier "
                     f"{'night' if left_out == 1 else 'nights'} left out")
    if flagged_drawn:
        notes.append("hollow grey: flagged points")
    heading = "\n".join(s for s in (title, "; ".join(notes)) if s)
    if heading:
        fig.suptitle(heading)
    return literal_text(fig)


def _own_texts(fig: "Figure") -> "Iterator[Text]":
    """Every text artist of ``fig`` that varstar placed: titles, labels, legends, annotations.

    Tick labels and the axes' offset texts are left out: matplotlib writes
    those itself, at drawing time, from numbers.
    """
    from matplotlib.axis import Axis, Tick
    from matplotlib.text import Text

    stack = [fig]
    while stack:
        artist = stack.pop()
        skip = {id(artist.offsetText)} if isinstance(artist, Axis) else set()
        for child in artist.get_children():
            if isinstance(child, Tick) or id(child) in skip:
                continue
            if isinstance(child, Text):
                yield child
            stack.append(child)


def literal_text(fig: "Figure") -> "Figure":
    """Make every text varstar placed in ``fig`` show its characters literally, and return ``fig``.

    Titles, labels, legends and annotations carry user text (target names,
    star ids, band names).  matplotlib would read a pair of ``$`` in them as
    mathematics (failing on ``"Star $x^$"``) and, with ``text.usetex`` set,
    pass everything to LaTeX; varstar's figures use neither, so both are
    switched off text by text.  Each figure function ends with this call.
    """
    for text in _own_texts(fig):
        text.set_parse_math(False)
        text.set_usetex(False)
    return fig


def _stdout_is_terminal() -> bool:
    try:
        return bool(sys.stdout.isatty())
    except (AttributeError, ValueError):
        return False


def save(fig: "Figure", path: "str | os.PathLike[str]") -> None:
    """Save a figure through :func:`varstar.export.write_atomic`.

    The format comes from the file name (png when it has no suffix, e.g. ``-``
    for stdout or a FIFO); the figure is rendered into memory first, so a
    FIFO, a device or stdout receives the finished bytes and a regular file is
    replaced atomically.

    Raises
    ------
    OutputError
        The format is unknown, the output cannot be written (see
        :func:`varstar.export.check_output_path`), a binary image would go to
        stdout on a terminal, or matplotlib fails to draw the figure (the
        message says what failed).
    """
    import os
    from pathlib import Path

    from .errors import OutputError
    from .export import STDOUT, check_output_path, write_atomic

    path = Path(path)
    suffix = path.suffix
    if not suffix and os.path.islink(path):  # a link named without a suffix: its target's name decides
        suffix = Path(os.path.realpath(path)).suffix
    fmt = suffix.lstrip(".").lower() or "png"
    supported = fig.canvas.get_supported_filetypes()
    if fmt not in supported:
        raise OutputError(f"{path}: unknown image format '{fmt}' (use .png, .pdf or .svg; matplotlib also writes "
                          f"{', '.join('.' + k for k in sorted(supported) if k not in ('png', 'pdf', 'svg'))})")
    check_output_path(path)  # before the cost of drawing
    if str(path) == STDOUT and _stdout_is_terminal():  # '-' has no suffix: always png, binary
        # as compressors do (common practice): binary data is not sent to a terminal
        raise OutputError("-: standard output is a terminal, where a png image prints as garbage; "
                          "redirect it (> file, | program) or give a file name")
    try:
        data = render(fig, fmt)
    except (ValueError, RuntimeError, OverflowError) as exc:
        said = " ".join(str(exc).split())
        said = f"{type(exc).__name__}: {said[:300]}{'…' if len(said) > 300 else ''}" if said else type(exc).__name__
        raise OutputError(f"{path}: matplotlib could not draw the figure as {fmt} ({said}); nothing written") from exc
    write_atomic(path, data)


def render(fig: "Figure", fmt: str = "png", *, dpi: float = 120, metadata: dict | None = None) -> bytes:
    """The figure drawn in memory as ``fmt`` bytes (the one place figures are drawn; :func:`save` writes them).

    Drawn without TeX (a target's name is shown literally, ``$`` included); ``metadata``
    goes to matplotlib (e.g. ``{"Software": None}`` leaves the PNG's software chunk out).
    """
    import io

    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context({"text.usetex": False}):  # tick labels are made while drawing
        fig.savefig(buf, format=fmt, dpi=dpi, metadata=metadata)
    return buf.getvalue()


#: A difference whose median lies further than this from 0 (mag) carries an instrumental zero point:
#: the figure removes a round constant from it and says so in the axis label.
ZERO_POINT_SHOWN = 2.0


def removed_constant(values: np.ndarray) -> float:
    """The round constant (0.1 mag) taken off a difference of magnitudes before it is drawn, or 0.

    An instrumental magnitude has an arbitrary zero point, so ``V − v`` is known
    only up to a constant (about −21 for counts of a small telescope); the fit's
    slope does not depend on it.  The constant is removed when the median lies
    further than :data:`ZERO_POINT_SHOWN` from zero, so the axis reads in
    hundredths of a magnitude rather than as offsets from −21.3.
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if not v.size or abs(float(np.median(v))) <= ZERO_POINT_SHOWN:
        return 0.0
    return float(np.round(np.median(v), 1))


def _less_constant(name: str, c: float) -> str:
    """``"V − v + 21.3 (mag)"``: the axis label of ``name`` with ``c`` removed (nothing added when ``c`` is 0)."""
    if c == 0.0:
        return f"{name} (mag)"
    return f"{name} {'−' if c > 0 else '+'} {abs(c):.1f} (mag; constant removed)"


def coefficient_figure(fit) -> "Figure":
    """The two straight-line fits of a standard field, each with its residuals below.

    Left: V − v against catalogue B − V (slope ε); right: catalogue B − V
    against instrumental b − v (slope μ).  Differences that hold an instrumental
    zero point are drawn less a round constant (:func:`removed_constant`), and
    the axis label says which; the residual panels do not depend on it.

    Parameters
    ----------
    fit
        A :class:`varstar.transform.CoefficientFit`.  Rejected stars are drawn
        as crosses, used stars with their error bars in both variables and the
        fitted line; each star is named beside its point.
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(10.0, 6.4), layout="constrained")
    axes = fig.subplots(2, 2, sharex="col", gridspec_kw={"height_ratios": [3, 1]})
    used = np.asarray(fit.used, dtype=bool)
    panels = (
        (axes[0, 0], axes[1, 0], fit.x_v, fit.y_v, fit.xerr_v, fit.yerr_v, fit.epsilon_v, fit.zeta_v,
         ("catalogue B − V", False), ("V − v", True), f"ε = {fit.epsilon_v:+.4f} ± {fit.epsilon_v_err:.4f}"),
        (axes[0, 1], axes[1, 1], fit.x_bv, fit.y_bv, fit.xerr_bv, fit.yerr_bv, fit.mu_bv, fit.zeta_bv,
         ("instrumental b − v", True), ("catalogue B − V", False), f"μ = {fit.mu_bv:.4f} ± {fit.mu_bv_err:.4f}"),
    )
    for ax, axr, x, y, xe, ye, slope, zero, (xname, x_inst), (yname, y_inst), label in panels:
        x, y, xe, ye = (np.asarray(a, float) for a in (x, y, xe, ye))
        cx = removed_constant(x[used]) if x_inst else 0.0
        cy = removed_constant(y[used]) if y_inst else 0.0
        resid = y - (slope * x + zero)  # the same straight line the fit reports, in the original variables
        rerr = np.hypot(ye, slope * xe)  # both variables' errors projected on y (common practice for straight lines)
        bad = ~used & np.isfinite(x) & np.isfinite(y)
        for panel, yy, yerr in ((ax, y - cy, ye), (axr, resid, rerr)):
            panel.errorbar(x[used] - cx, yy[used], xerr=xe[used], yerr=yerr[used], fmt="o", color=PALETTE[0], ms=6,
                           elinewidth=0.8, capsize=0, label="standard stars")
            if bad.any():
                panel.errorbar(x[bad] - cx, yy[bad], xerr=xe[bad], yerr=yerr[bad], fmt="x", color=PALETTE[5], ms=8,
                               mew=2, elinewidth=0.8, capsize=0, label="rejected")
            panel.grid(alpha=0.3)
        if np.isfinite(x[used]).any():
            xs = np.linspace(np.nanmin(x[used]) - 0.1, np.nanmax(x[used]) + 0.1, 50)
            ax.plot(xs - cx, slope * xs + zero - cy, "-", color="black", lw=1.2, label=label, zorder=3)
        for sid, xi, yi in zip(fit.star_ids, x, y):
            if np.isfinite(xi) and np.isfinite(yi):
                # a star id is a label, not a reason to shrink the panels (in_layout=False): a long one runs over
                ax.annotate(str(sid), (xi - cx, yi - cy), textcoords="offset points", xytext=(4, 3), fontsize=7,
                            color="0.3", in_layout=False)
        axr.axhline(0.0, color="black", lw=0.8)
        axr.set_xlabel(_less_constant(xname, cx))
        axr.set_ylabel("data − fit (mag)")
        ax.set_ylabel(_less_constant(yname, cy))
        seen = _unique_entries([ax])
        _legend_or_title(ax, list(seen.values()), list(seen.keys()), fontsize="small", loc="best")
    fig.suptitle(f"Transformation coefficients from {fit.n_stars} standard stars")
    return literal_text(fig)


def colour_figure(lc: pd.DataFrame, *, title: str = "", phase: np.ndarray | None = None, period: float | None = None) -> "Figure":
    """The star's standard B − V against BJD_TDB (and against phase when given).

    A second axis gives the Ballesteros (2012) temperature of the colour (before
    any dereddening), so a reader sees how hot the star gets.
    """
    from .transform import ballesteros_temperature

    n = 2 if phase is not None else 1
    fig = _figure(n)
    axes = fig.subplots(n, 1, squeeze=False)[:, 0]
    sel = np.isfinite(lc["bv"].to_numpy()) if len(lc) else np.zeros(0, bool)
    d = lc[sel]
    t0 = _time_offset(d["bjd_tdb"].to_numpy()) if len(d) else 0.0
    nights = sorted(pd.unique(d["night"])) if len(d) else []
    style = {nt: (PALETTE[k % len(PALETTE)], MARKERS[(k // len(PALETTE) + k) % len(MARKERS)]) for k, nt in enumerate(nights)}
    xs = [(axes[0], d["bjd_tdb"].to_numpy() - t0, f"BJD_TDB − {t0:.0f} (d)")]
    if phase is not None:
        xs.append((axes[1], np.asarray(phase)[sel], f"phase (period {period:.6f} d)" if period else "phase"))
    for ax, x, xlabel in xs:
        for nt in nights:
            m = (d["night"] == nt).to_numpy()
            colour, marker = style[nt]
            ax.errorbar(x[m], d["bv"].to_numpy()[m], yerr=d["bv_err"].to_numpy()[m], fmt=marker, ms=3.5,
                        color=colour, elinewidth=0.7, capsize=0, label=str(nt))
        ax.set_xlabel(xlabel)
        ax.set_ylabel("B − V (mag)")
        ax.grid(alpha=0.3)
        if len(d):
            lo, hi = ax.get_ylim()
            sec = ax.secondary_yaxis(
                "right",
                functions=(lambda c: ballesteros_temperature(np.clip(c, -0.39, 1.99))[0] / 1000.0,
                           lambda tk: _bv_of_temperature(tk * 1000.0)),
            )
            sec.set_ylabel("T_eff, Ballesteros 2012 (kK)")
    if len(d) == 0:
        axes[0].text(0.5, 0.5, "no transformed points (no colour)", ha="center", va="center", transform=axes[0].transAxes)
    elif len(nights) == 1:
        axes[0].set_title(str(nights[0]), loc="right", fontsize="small")  # one night: no legend of one entry
    elif nights:
        handles, labels = axes[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside right upper", title="night", fontsize="small")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


def _bv_of_temperature(t_k: np.ndarray) -> np.ndarray:
    """Inverse of the Ballesteros relation on its monotonic range (for the axis only)."""
    from .transform import ballesteros_temperature

    grid = np.linspace(-0.39, 1.99, 800)
    temps = ballesteros_temperature(grid)[0]
    return np.interp(np.asarray(t_k, float), temps[::-1], grid[::-1])


def colour_magnitude_figure(field: pd.DataFrame, track: pd.DataFrame, *, title: str = "") -> "Figure":
    """Colour–magnitude diagram of the field: V against B − V, bright up.

    Comparison stars the night's ensemble kept are filled circles; one it
    rejected (its ``status`` is not ``"kept"``) is a cross, its reason beside
    its name; check stars are diamonds.

    Parameters
    ----------
    field
        One row per star (``star, role, status, V, V_err, bv, bv_err``): the
        comparison and check stars' standard values for the night.
    track
        The target's transformed points of the night (``bv, bv_err, mag,
        mag_err, bjd_tdb``), V band, drawn as a path coloured by time.
    """
    fig = _figure(1, width=7.5, height_per=6.0)
    ax = fig.subplots()
    status = field["status"].astype(str) if "status" in field else pd.Series("kept", index=field.index)
    kinds = (
        ("comparison", "kept", "o", PALETTE[0], "comparison stars"),
        ("comparison", "rejected", "x", PALETTE[5], "rejected comparison"),
        ("check", None, "D", PALETTE[2], "check stars"),
    )
    for role, which, marker, colour, label in kinds:
        m = field["role"] == role
        if which == "kept":
            m &= status == "kept"
        elif which == "rejected":
            m &= status != "kept"
        sub = field[m]
        if len(sub):
            rejected = which == "rejected"
            ax.errorbar(sub["bv"], sub["V"], xerr=sub["bv_err"], yerr=sub["V_err"], fmt=marker, ms=9 if rejected else 7,
                        mew=2.2 if rejected else 1.0, color=colour, elinewidth=0.8, capsize=0, label=label)
            for r, st in zip(sub.itertuples(), status[m]):
                # a rejected star carries the ensemble's reason (stored words, spaced for reading)
                name = f"{r.star} ({st.replace('_', ' ')})" if rejected and st not in ("rejected", "") else str(r.star)
                ax.annotate(name, (r.bv, r.V), textcoords="offset points", xytext=(5, 4), fontsize=8, color="0.3",
                            in_layout=False)
    if len(track):
        t = track["bjd_tdb"].to_numpy()
        ax.errorbar(track["bv"], track["mag"], xerr=track["bv_err"], yerr=track["mag_err"], fmt="none",
                    ecolor="0.7", elinewidth=0.5, capsize=0, zorder=1)
        ax.plot(track["bv"], track["mag"], "-", color="0.6", lw=0.6, zorder=2)
        sc = ax.scatter(track["bv"], track["mag"], c=(t - t.min()) * 24.0, cmap="cividis", s=14, zorder=3,
                        label="target over the night")
        fig.colorbar(sc, ax=ax, label="hours since first point (BJD_TDB)")
    ax.invert_yaxis()
    ax.set_xlabel("B − V (mag)")
    ax.set_ylabel("V (mag)")
    ax.grid(alpha=0.3)
    seen = _unique_entries([ax])
    labels = [k[-1] for k in kinds if k[-1] in seen] + [lab for lab in seen if lab not in {k[-1] for k in kinds}]
    _legend_or_title(ax, [seen[lab] for lab in labels], labels, fontsize="small", loc="best")
    if title:
        ax.set_title(title)
    return literal_text(fig)


def period_text(period: float, period_err: float | None = None) -> str:
    """A period as every figure prints it: ``"P = 0.4617312 ± 0.0000021 d"`` (seven decimals, as the text output).

    The error is left out when it is missing or not finite.
    """
    if period_err is not None and np.isfinite(period_err):
        return f"P = {period:.7f} ± {period_err:.7f} d"
    return f"P = {period:.7f} d"


#: Width of a peak note as a fraction of the frequency axis (two lines of 7-point text, the longer
#: about 16 characters, on a 10-inch figure); notes whose spans overlap are stacked, one level each.
NOTE_CLOSE = 0.12
#: Height of one level of peak notes (points): two lines of 7-point text and a gap.
NOTE_STEP_PT = 20.0
#: Smallest distance between two false-alarm labels in the right margin (points): a 7-point line and a gap.
FAP_LABEL_PT = 10.0


def _note_places(xs: Sequence[float], ys: Sequence[float], lo: float, hi: float) -> list[tuple[float, int, bool]]:
    """Where each note of a peak at (``xs``, ``ys``) stands on an axis from ``lo`` to ``hi``.

    Returns, per note, a height (data), a level above it and whether it is
    flipped: a note runs ``NOTE_CLOSE`` of the axis to the right of its peak,
    or to the left when it would run past ``hi`` (into the false-alarm labels
    of the right margin).  Notes whose spans overlap form a group (chained);
    a group's notes share the height of its highest peak, and each takes the
    lowest level that no earlier, overlapping note holds, so no two notes print
    over each other.
    """
    w = NOTE_CLOSE * (hi - lo)
    flips = [x + w > hi for x in xs]
    spans = [(x - w, x) if f else (x, x + w) for x, f in zip(xs, flips)]
    order = sorted(range(len(xs)), key=lambda k: spans[k][0])
    group: dict[int, int] = {}
    head, reach = -1, -np.inf
    for k in order:  # by the start of their spans: a note joins the group whose reach it starts within
        if head >= 0 and spans[k][0] < reach:
            group[k], reach = head, max(reach, spans[k][1])
        else:
            group[k], head, reach = k, k, spans[k][1]
    top: dict[int, float] = {}
    for k, g in group.items():
        top[g] = max(top.get(g, -np.inf), ys[k])
    places: list[tuple[float, int, bool]] = []
    for k in range(len(xs)):
        a0, a1 = spans[k]
        taken = {places[j][1] for j in range(k) if spans[j][0] < a1 and a0 < spans[j][1]}
        level = 0
        while level in taken:
            level += 1
        places.append((top[group[k]], level, flips[k]))
    return places


def _fap_labels(ax, levels: list[tuple[float, float]], top: float, height_pt: float) -> None:
    """Name each false-alarm line in the right margin, beside its end, at least ``FAP_LABEL_PT`` apart.

    ``height_pt`` is a lower bound of the panel's height in points: labels set
    that far apart in the panel's fraction stand at least as far apart once
    drawn.  A label moved off its line is joined to it by a thin leader.
    """
    from matplotlib.transforms import offset_copy

    if not levels or top <= 0:
        return
    gap = FAP_LABEL_PT / max(height_pt, 1.0)
    order = sorted(range(len(levels)), key=lambda k: levels[k][1])
    want = [min(max(levels[k][1] / top, 0.0), 1.0) for k in order]
    placed: list[float] = []
    for y in want:
        placed.append(max(y, placed[-1] + gap) if placed else y)
    over = placed[-1] - 1.0
    if over > 0:  # pushed past the top: slide the stack down, keeping the gaps
        placed = [y - over for y in placed]
    at = offset_copy(ax.transAxes, fig=ax.figure, x=6, y=0, units="points")
    for k, y in zip(order, placed):
        fap, level = levels[k]
        moved = abs(y - want[order.index(k)]) > 1e-9
        ax.annotate(f"FAP {fap:g}", xy=(1.0, level), xycoords=ax.get_yaxis_transform(), xytext=(1.0, y),
                    textcoords=at, va="center", ha="left", fontsize=7, color="0.25", annotation_clip=False,
                    arrowprops=dict(arrowstyle="-", color="0.55", lw=0.5, shrinkA=0, shrinkB=0) if moved else None)


def _adopted_peak(peaks: list[dict], adopted_period: float, step: float) -> tuple[int | None, int]:
    """Which listed peak the adopted period comes from, and the factor (P = factor / f; 2 after a P-or-2P choice).

    A peak matches when its frequency is within three grid steps (or a millionth)
    of ``factor / adopted_period``; factor 1 is tried first.
    """
    f_ad = 1.0 / adopted_period
    for factor in (1, 2):
        for i, pk in enumerate(peaks):
            f = float(pk["frequency"])
            if abs(f - factor * f_ad) <= max(3.0 * step, 1e-6 * f):
                return i, factor
    return None, 1


def periodogram_figure(
    freq: np.ndarray,
    power: np.ndarray,
    *,
    best_frequency: float,
    fap_levels: dict[float, float] | None = None,
    peaks: list[dict] | None = None,
    theta: np.ndarray | None = None,
    title: str = "",
    ylabel: str = "power (generalised Lomb–Scargle)",
    adopted_period: float | None = None,
) -> "Figure":
    """Periodogram against frequency, with false-alarm levels and the strong peaks noted.

    The frequency axis spans the searched grid exactly (no margins).  Each
    peak in ``peaks`` carries a marker and a note; with ``adopted_period`` the
    peak it comes from (at ``1/P``, or ``2/P`` when the light curve repeats only
    after twice the peak's period) is marked "adopted" and its note prints the
    adopted period itself, the refined one the result reports, rather than the
    peak's grid value.  False-alarm levels are named in the right margin
    ("FAP" for false-alarm probability), apart from each other and from the notes.

    Parameters
    ----------
    freq, power
        The grid (cycles per day) and the periodogram.
    best_frequency
        The grid's best frequency: marked on the PDM panel when no adopted period
        is given or its frequency is off the grid's range.
    fap_levels
        False-alarm probability -> the power it needs.
    peaks
        Dicts with ``frequency``, ``power`` and ``relation`` (the strongest peaks
        and how they relate to the best one).
    theta
        PDM's statistic on the same grid: a second panel (lower is better).
    title, ylabel
        The figure's title and the periodogram's axis label.
    adopted_period
        The period the analysis adopted (days).
    """
    from matplotlib.transforms import offset_copy

    freq, power = np.asarray(freq, dtype=float), np.asarray(power, dtype=float)
    peaks = list(peaks or [])
    n = 2 if theta is not None else 1
    fig = _figure(n, width=10.0, height_per=3.4)
    axes = fig.subplots(n, 1, sharex=True, squeeze=False)[:, 0]
    ax = axes[0]
    ax.plot(freq, power, "-", color=PALETTE[0], lw=0.7)
    fin = np.isfinite(freq)
    lo, hi = (float(freq[fin].min()), float(freq[fin].max())) if fin.any() else (0.0, 1.0)
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    ax.set_xlim(lo, hi)  # the searched range, edge to edge
    levels = [(float(f), float(v)) for f, v in sorted((fap_levels or {}).items()) if np.isfinite(v)]
    finite_power = power[np.isfinite(power)]
    top = 1.08 * max([float(finite_power.max()) if finite_power.size else 1.0] + [v for _, v in levels])
    ax.set_ylim(0.0, top if top > 0 else 1.0)
    styles = ("--", ":", "-.")
    for k, (fap, level) in enumerate(levels):
        ax.axhline(level, ls=styles[k % len(styles)], color="0.35", lw=0.9, label=f"false-alarm probability {fap:g}")
    # the panel is at least 55 % of its share of the figure's height once titles and labels are placed
    _fap_labels(ax, levels, top, 0.55 * 72.0 * fig.get_figheight() / n)

    step = float(np.median(np.diff(np.sort(freq[fin])))) if fin.sum() > 1 else 0.0
    adopted = adopted_period is not None and np.isfinite(adopted_period) and adopted_period > 0
    marked, factor = _adopted_peak(peaks, float(adopted_period), step) if adopted else (None, 1)
    notes = []  # (frequency, power, first line, second line, is the marked one)
    for i, pk in enumerate(peaks):
        f, p, rel = float(pk["frequency"]), float(pk["power"]), str(pk.get("relation", ""))
        if adopted:
            if i == marked:
                notes.append((f, p, "adopted" if factor == 1 else f"adopted, P = {factor}/f",
                              period_text(adopted_period), True))
            else:
                notes.append((f, p, "highest peak" if rel == "best" else rel, f"P = {1 / f:.5f} d", False))
        else:
            # the best peak may carry its refined frequency, off the grid's best_frequency: its relation names it
            best = rel == "best" or abs(f - best_frequency) < 1e-12
            notes.append((f, p, "best" if best else rel, f"P = {1 / f:.5f} d", best))
    if adopted and marked is None and lo <= 1.0 / adopted_period <= hi:
        # no listed peak holds the adopted period: mark it on the curve
        f = 1.0 / adopted_period
        notes.insert(0, (f, float(np.interp(f, freq[fin], np.nan_to_num(power[fin]))), "adopted",
                         period_text(adopted_period), True))
    places = _note_places([nt[0] for nt in notes], [nt[1] for nt in notes], lo, hi)
    for (f, p, first, second, is_marked), (height, level, flipped) in zip(notes, places):
        ax.plot(f, p, "v" if is_marked else "^", color=PALETTE[5] if is_marked else PALETTE[1], ms=8,
                label=("adopted period" if adopted else "best peak") if is_marked else "other strong peaks")
        # overlapping notes stand at their group's top, a level apart, so none overprints; each note still
        # starts (or, flipped at the right edge, ends) at its own peak's frequency
        ax.annotate(f"{first}\n{second}", (f, p), xytext=(f, height), ha="right" if flipped else "left",
                    textcoords=offset_copy(ax.transData, fig=fig, x=-4 if flipped else 4,
                                           y=6 + NOTE_STEP_PT * level, units="points"),
                    fontsize=7, color="0.25")
    # every marker carries its note and every level its name: no legend to cover the curve
    ax.set_ylabel(ylabel)
    ax.grid(alpha=0.3)
    if theta is not None:
        axes[1].plot(freq, theta, "-", color=PALETTE[2], lw=0.7)
        f_mark = 1.0 / adopted_period if adopted and lo <= 1.0 / adopted_period <= hi else best_frequency
        axes[1].axvline(f_mark, color=PALETTE[5], lw=0.8, ls="--")
        axes[1].set_ylabel("PDM θ, Stellingwerf 1978 (lower is better)")
        axes[1].grid(alpha=0.3)
    axes[-1].set_xlabel("frequency (cycles per day)")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


def phased_figure(
    lc: pd.DataFrame,
    *,
    period: float,
    epoch: float,
    model: dict[str, tuple[np.ndarray, np.ndarray]],
    residuals: np.ndarray,
    title: str = "",
    period_err: float | None = None,
) -> "Figure":
    """Phased light curve over two cycles with the fitted model, and the residuals below.

    The model is drawn over the points (a black line on a white halo), so it
    stays visible through a dense cloud of points; the period is printed by
    :func:`period_text`, as :func:`period_figures` prints it in the title.

    Parameters
    ----------
    lc
        Points with ``bjd_tdb, mag, mag_err, band``.
    period, epoch
        The period (days) and the BJD_TDB of phase 0.
    model
        Per band: (phase grid in [0, 1), model magnitudes).
    residuals
        Data minus model, aligned with ``lc``.
    title
        The figure's title.
    period_err
        The period's error (days), printed beside it when given.
    """
    from matplotlib import patheffects

    fig = _figure(2, width=9.0, height_per=3.0)
    ax, axr = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    phase = np.mod((lc["bjd_tdb"].to_numpy() - epoch) / period, 1.0)
    bands = sorted(pd.unique(lc["band"]))
    model_label = "fitted model"  # a harmonic series or an eclipse template: named once, on the first band that has one
    halo = [patheffects.Stroke(linewidth=3.2, foreground="white"), patheffects.Normal()]
    for k, band in enumerate(bands):
        m = (lc["band"] == band).to_numpy()
        colour, marker = PALETTE[k % len(PALETTE)], MARKERS[k % len(MARKERS)]
        for shift in (0.0, 1.0):
            ax.errorbar(phase[m] + shift, lc["mag"].to_numpy()[m], yerr=lc["mag_err"].to_numpy()[m], fmt=marker, ms=2.5,
                        color=colour, elinewidth=0.5, capsize=0, alpha=0.8, label=f"{band}" if shift == 0 else None)
            axr.errorbar(phase[m] + shift, residuals[m], yerr=lc["mag_err"].to_numpy()[m], fmt=marker, ms=2.5,
                         color=colour, elinewidth=0.5, capsize=0, alpha=0.8)
        if band in model:
            ph, mag = model[band]
            order = np.argsort(ph)
            for shift in (0.0, 1.0):
                # above the points (errorbar draws at zorder 2), on a white halo
                ax.plot(ph[order] + shift, mag[order], "-", color="black", lw=1.2, zorder=4, path_effects=halo,
                        label=model_label if shift == 0 else None)
            model_label = None
    ax.invert_yaxis()
    ax.set_ylabel(f"{bands[0]} (mag)" if len(bands) == 1 else "magnitude")
    ax.grid(alpha=0.3)
    seen = _unique_entries([ax])
    order = [b for b in map(str, bands) if b in seen] + [lab for lab in seen if lab not in set(map(str, bands))]
    if len(order) >= 2:  # one band without a model: its name is in the axis label already
        ax.legend([seen[lab] for lab in order], order, fontsize="small", loc="best")
    axr.axhline(0.0, color="black", lw=0.8)
    axr.invert_yaxis()
    axr.set_ylabel("data − fit (mag)")
    axr.set_xlabel(f"phase ({period_text(period, period_err)}, epoch BJD_TDB {epoch:.5f}); two cycles shown")
    axr.grid(alpha=0.3)
    if title:
        fig.suptitle(title)
    return literal_text(fig)


#: Marker and colour of each timing type in the O − C diagram (shape alone tells them apart).
TIMING_STYLE = {"primary": ("o", PALETTE[0]), "secondary": ("D", PALETTE[5]), "maximum": ("^", PALETTE[2])}
#: Minutes per day: O − C is computed in days and drawn in minutes.
MINUTES_PER_DAY = 1440.0


def oc_figure(
    cycle: np.ndarray,
    o_minus_c_d: np.ndarray,
    err_d: np.ndarray,
    types: Sequence[str],
    *,
    fit: dict | None = None,
    reference: str = "",
    title: str = "",
    bands: Sequence[str] | None = None,
    disagree: Sequence[bool] | None = None,
    in_fit: Sequence[bool] | None = None,
) -> "Figure":
    """O − C diagram: timings against cycle number with error bars, by type, with the fitted ephemerides.

    ``o_minus_c_d`` and ``err_d`` are in days against the reference ephemeris
    and are drawn in minutes (the axis says "O − C (min)"); ``fit`` is the dict
    of an ephemeris fit (its linear and quadratic solutions are drawn as curves
    relative to the same reference).  ``bands`` (one per timing) colours the
    timings by band, the marker still telling the type; ``disagree`` (one per
    timing) rings the timings whose two estimates disagree with a large circle;
    ``in_fit`` (one per timing) rings those the ephemeris fit left out with a
    large square ("left out of the fit").
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    fig = _figure(1, width=9.0, height_per=4.2)
    ax = fig.subplots()
    cycle = np.asarray(cycle, dtype=float)
    oc_min = np.asarray(o_minus_c_d, dtype=float) * MINUTES_PER_DAY
    err_min = np.asarray(err_d, dtype=float) * MINUTES_PER_DAY
    types = np.asarray(types, dtype=object)
    band_of = None if bands is None else np.asarray([str(b) for b in bands], dtype=object)
    if band_of is not None and not any(band_of):  # no band named: nothing to tell apart
        band_of = None
    band_colour = {} if band_of is None else {
        b: PALETTE[k % len(PALETTE)] for k, b in enumerate(sorted(set(band_of.tolist())))}
    type_handles = []
    for typ, (marker, colour) in TIMING_STYLE.items():
        m = types == typ
        if not m.any():
            continue
        hollow = typ == "secondary"
        label = f"{typ} ({int(m.sum())})"
        if band_of is None:
            c = ax.errorbar(cycle[m], oc_min[m], yerr=err_min[m], fmt=marker, color=colour, ms=6, capsize=2,
                            mfc="white" if hollow else colour, label=label)
            type_handles.append(c)
            continue
        for band, bcolour in band_colour.items():
            mb = m & (band_of == band)
            if mb.any():
                ax.errorbar(cycle[mb], oc_min[mb], yerr=err_min[mb], fmt=marker, color=bcolour, ms=6, capsize=2,
                            mfc="white" if hollow else bcolour, label=f"{typ}, {band}")
        type_handles.append(Line2D([], [], ls="none", marker=marker, ms=6, color="0.3",
                                   mfc="white" if hollow else "0.3", label=label))
    if disagree is not None:
        bad = np.asarray([bool(v) for v in disagree], dtype=bool)
        if bad.any():
            ax.plot(cycle[bad], oc_min[bad], ls="none", marker="o", ms=13, mfc="none", mec="black", mew=1.0,
                    label="estimates disagree")
    if in_fit is not None:
        out = ~np.asarray([bool(v) for v in in_fit], dtype=bool)
        if out.any():
            ax.plot(cycle[out], oc_min[out], ls="none", marker="s", ms=15, mfc="none", mec=PALETTE[5], mew=1.3,
                    label="left out of the fit")
    if fit is not None and cycle.size:
        e = np.linspace(cycle.min(), cycle.max(), 200)
        ref = fit.get("reference")
        styles = (("linear", "--", "linear ephemeris"), ("quadratic_fit", ":", "quadratic ephemeris"))
        for key, ls, label in styles:
            sol = fit.get(key)
            if sol and ref:
                model = sol["epoch"] + sol["period"] * e + sol.get("quadratic", 0.0) * e**2
                base = ref["epoch"] + ref["period"] * e + ref.get("quadratic", 0.0) * e**2
                ax.plot(e, (model - base) * MINUTES_PER_DAY, ls, color="0.25", lw=1.1, label=label)
    ax.axhline(0.0, color="0.6", lw=0.8)
    ax.set_xlabel("cycle number E")
    ax.set_ylabel("O − C (min)")
    if reference:
        ax.set_title(f"against {reference}", fontsize="small", loc="left")
    ax.grid(alpha=0.3)
    # the marker tells the type, the colour the band: one legend entry for each, then the rings and lines
    lines = [ln for ln in ax.lines if not ln.get_label().startswith("_")]
    band_handles = [Patch(color=c, label=b) for b, c in band_colour.items()]
    handles = type_handles + band_handles + lines
    _legend_or_title(ax, handles, [h.get_label() for h in handles], fontsize="small", loc="best")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


# --------------------------------------------------------------------------- figures of whole results
# The command line and the demo draw the same figures of the same results: one call each.


def period_figures(stored, title: str) -> tuple["Figure", "Figure"]:
    """The periodogram and the phased light curve of a stored period analysis.

    ``stored`` is a :class:`varstar.workflows.periods.StoredPeriod` (its
    ``result`` and the ``lightcurve`` analysed); ``title`` is the first line of
    both titles, whose second line ends with the adopted period as the phased
    curve's axis prints it (two lines, so that a long target name fits).
    """
    from .period import phased_data, phased_model

    res = stored.result
    peaks = stored.to_dict()["aliases"][:4]
    adopted = period_text(res.period, res.period_err)
    periodogram = periodogram_figure(res.freq, res.power, best_frequency=res.aliases.best_frequency,
                                     fap_levels=res.fap_levels, peaks=peaks, theta=res.theta,
                                     title=f"{title}\n{res.method}; adopted {adopted}", ylabel="normalised power",
                                     adopted_period=res.period)
    lc, resid = phased_data(res, stored.lightcurve)
    phased = phased_figure(lc, period=res.period, epoch=res.epoch, model=phased_model(res), residuals=resid,
                           title=f"{title}\n{adopted}, phase 0 at {res.epoch_kind} light", period_err=res.period_err)
    return periodogram, phased


def timings_figure(timed: dict, title: str) -> "Figure":
    """The O − C diagram of a timings result (``varstar timings --json``'s dict), with its ephemeris fit.

    A timing's ``in_fit`` (true when missing) says whether the ephemeris fit
    used it; the ones left out are ringed.
    """
    rows, eph = timed["timings"], timed["ephemeris"]
    fit = dict(timed["fit"], reference=eph) if timed["fit"] else None
    return oc_figure([t["cycle"] for t in rows], [t["o_minus_c"] for t in rows], [t["err"] for t in rows],
                     [t["type"] for t in rows], fit=fit,
                     reference=f"T0 = {eph['epoch']:.5f}, P = {eph['period']:.7f} d (BJD_TDB)", title=title,
                     bands=[t.get("band", "") for t in rows], disagree=[bool(t.get("disagree")) for t in rows],
                     in_fit=[bool(t.get("in_fit", True)) for t in rows])
