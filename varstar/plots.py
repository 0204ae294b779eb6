"""Every figure varstar draws (matplotlib, Agg backend); each function returns a Figure.

Conventions (common practice in the trade): magnitude axes run bright-up
(inverted), every point carries its error bar, axes name their units and time
system.  Colours come from the Okabe & Ito (2008) colour-blind-safe palette and
each series also differs by marker shape, so the figures read in grey too.

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
    if len(nights) == 1:
        _ut_axis(axes[0], lc, t0)
    if nights:
        # every panel's entries: a night seen in one band only, or flagged points in one band only, count too
        seen = {}
        for ax in axes:
            for h, lab in zip(*ax.get_legend_handles_labels()):
                seen.setdefault(lab, h)
        labels = [str(n) for n in nights if str(n) in seen] + (["flagged"] if "flagged" in seen else [])
        fig.legend([seen[lab] for lab in labels], labels, loc="outside right upper", title="night", fontsize="small")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


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
    import io
    import os
    from pathlib import Path

    import matplotlib

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
    buf = io.BytesIO()
    try:
        with matplotlib.rc_context({"text.usetex": False}):  # tick labels are made while drawing
            fig.savefig(buf, format=fmt, dpi=120)
    except (ValueError, RuntimeError, OverflowError) as exc:
        said = " ".join(str(exc).split())
        said = f"{type(exc).__name__}: {said[:300]}{'…' if len(said) > 300 else ''}" if said else type(exc).__name__
        raise OutputError(f"{path}: matplotlib could not draw the figure as {fmt} ({said}); nothing written") from exc
    write_atomic(path, buf.getvalue())


def coefficient_figure(fit) -> "Figure":
    """The two straight-line fits of a standard field: V - v against B - V, and B - V against b - v.

    Parameters
    ----------
    fit
        A :class:`varstar.transform.CoefficientFit`.  Rejected stars are drawn
        as crosses, used stars with error-free markers and the fitted line.
    """
    fig = _figure(1, width=10.0, height_per=4.2)
    ax1, ax2 = fig.subplots(1, 2)
    used = np.asarray(fit.used, dtype=bool)
    panels = (
        (ax1, fit.x_v, fit.y_v, fit.xerr_v, fit.yerr_v, fit.epsilon_v, fit.zeta_v, "catalogue B − V (mag)",
         "V − v (mag)", f"ε = {fit.epsilon_v:+.4f} ± {fit.epsilon_v_err:.4f}"),
        (ax2, fit.x_bv, fit.y_bv, fit.xerr_bv, fit.yerr_bv, fit.mu_bv, fit.zeta_bv, "instrumental b − v (mag)",
         "catalogue B − V (mag)", f"μ = {fit.mu_bv:.4f} ± {fit.mu_bv_err:.4f}"),
    )
    for ax, x, y, xe, ye, slope, zero, xl, yl, label in panels:
        x, y, xe, ye = (np.asarray(a, float) for a in (x, y, xe, ye))
        ax.errorbar(x[used], y[used], xerr=xe[used], yerr=ye[used], fmt="o", color=PALETTE[0], ms=6,
                    elinewidth=0.8, capsize=0, label="standard stars")
        bad = ~used & np.isfinite(x) & np.isfinite(y)
        if bad.any():
            ax.errorbar(x[bad], y[bad], xerr=xe[bad], yerr=ye[bad], fmt="x", color=PALETTE[5], ms=8, mew=2,
                        elinewidth=0.8, capsize=0, label="rejected")
        if np.isfinite(x[used]).any():
            xs = np.linspace(np.nanmin(x[used]) - 0.1, np.nanmax(x[used]) + 0.1, 50)
            ax.plot(xs, slope * xs + zero, "-", color="black", lw=1.2, label=label)
        for sid, xi, yi in zip(fit.star_ids, x, y):
            if np.isfinite(xi) and np.isfinite(yi):
                # a star id is a label, not a reason to shrink the panels (in_layout=False): a long one runs over
                ax.annotate(str(sid), (xi, yi), textcoords="offset points", xytext=(4, 3), fontsize=7, color="0.3",
                            in_layout=False)
        ax.set_xlabel(xl)
        ax.set_ylabel(yl)
        ax.grid(alpha=0.3)
        ax.legend(fontsize="small")
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
    kinds = (
        ("comparison", "kept", "o", PALETTE[0], "comparison stars"),
        ("comparison", "rejected", "X", PALETTE[5], "comparison stars, rejected"),
        ("check", None, "D", PALETTE[2], "check stars"),
    )
    for role, status, marker, colour, label in kinds:
        m = field["role"] == role
        if status == "kept":
            m &= field["status"] == "kept"
        elif status == "rejected":
            m &= field["status"] != "kept"
        sub = field[m]
        if len(sub):
            ax.errorbar(sub["bv"], sub["V"], xerr=sub["bv_err"], yerr=sub["V_err"], fmt=marker, ms=7, color=colour,
                        elinewidth=0.8, capsize=0, label=label)
            for r in sub.itertuples():
                ax.annotate(str(r.star), (r.bv, r.V), textcoords="offset points", xytext=(5, 4), fontsize=8, color="0.3",
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
    ax.legend(fontsize="small", loc="best")
    if title:
        ax.set_title(title)
    return literal_text(fig)


#: Peak notes closer than this fraction of the frequency axis are stacked, one level each
#: (a two-line note is about 8 % of a 10-inch figure's axis wide).
NOTE_CLOSE = 0.10
#: Height of one level of peak notes (points): two lines of 7-point text and a gap.
NOTE_STEP_PT = 20.0


def _span(x: np.ndarray) -> float:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    return float(np.ptp(x)) if x.size else 0.0


def _note_places(xs: Sequence[float], ys: Sequence[float], width: float) -> list[tuple[float, int]]:
    """Where each note of a peak at (``xs``, ``ys``) stands: a height (data) and a level above it.

    Peaks closer than ``NOTE_CLOSE * width`` form a group (chained); a group's
    notes share the height of its highest peak, and each takes the lowest level
    that no earlier, close note holds, so no two close notes print over each other.
    """
    near = NOTE_CLOSE * width
    order = sorted(range(len(xs)), key=lambda k: xs[k])
    group = {}
    for pos, k in enumerate(order):
        group[k] = group[order[pos - 1]] if pos and xs[k] - xs[order[pos - 1]] < near else k
    top = {}
    for k, g in group.items():
        top[g] = max(top.get(g, -np.inf), ys[k])
    places: list[tuple[float, int]] = []
    for k, x in enumerate(xs):
        taken = {places[j][1] for j in range(k) if abs(xs[j] - x) < near}
        level = 0
        while level in taken:
            level += 1
        places.append((top[group[k]], level))
    return places


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
) -> "Figure":
    """Periodogram against frequency, with false-alarm levels and the alias peaks marked.

    ``fap_levels`` maps a false-alarm probability to the power it needs;
    ``peaks`` are dicts with ``frequency``, ``power``, ``relation`` (the
    strongest peaks and how they relate to the best one); ``theta`` (same grid)
    adds a panel with the phase-dispersion statistic of the second method.
    """
    from matplotlib.transforms import offset_copy

    n = 2 if theta is not None else 1
    fig = _figure(n, width=10.0, height_per=3.4)
    axes = fig.subplots(n, 1, sharex=True, squeeze=False)[:, 0]
    ax = axes[0]
    ax.plot(freq, power, "-", color=PALETTE[0], lw=0.7)
    styles = ("--", ":", "-.")
    for k, (fap, level) in enumerate(sorted((fap_levels or {}).items())):
        ax.axhline(level, ls=styles[k % len(styles)], color="0.35", lw=0.9, label=f"false-alarm probability {fap:g}")
    places = _note_places([pk["frequency"] for pk in peaks or []], [pk["power"] for pk in peaks or []], _span(freq))
    for pk, (height, level) in zip(peaks or [], places):
        # the best peak may carry its refined frequency, off the grid's best_frequency: its relation names it
        best = pk.get("relation") == "best" or abs(pk["frequency"] - best_frequency) < 1e-12
        ax.plot(pk["frequency"], pk["power"], "v" if best else "^", color=PALETTE[5] if best else PALETTE[1], ms=8,
                label="best peak" if best else "other strong peaks")
        # close peaks' notes stand at their group's top, a level apart, so none overprints; each note still
        # starts at its own peak's frequency
        ax.annotate(("best" if best else pk.get("relation", "")) + f"\nP = {1 / pk['frequency']:.5f} d",
                    (pk["frequency"], pk["power"]), xytext=(pk["frequency"], height),
                    textcoords=offset_copy(ax.transData, fig=fig, x=4, y=6 + NOTE_STEP_PT * level, units="points"),
                    fontsize=7, color="0.25")
    ax.set_ylabel(ylabel)
    ax.set_ylim(bottom=0)
    ax.grid(alpha=0.3)
    handles, labels = ax.get_legend_handles_labels()
    seen = {}
    for h, lab in zip(handles, labels):
        seen.setdefault(lab, h)
    ax.legend(list(seen.values()), list(seen.keys()), fontsize="small", loc="upper right")
    if theta is not None:
        axes[1].plot(freq, theta, "-", color=PALETTE[2], lw=0.7)
        axes[1].axvline(best_frequency, color=PALETTE[5], lw=0.8, ls="--")
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
) -> "Figure":
    """Phased light curve over two cycles with the fitted model, and the residuals below.

    Parameters
    ----------
    lc
        Points with ``bjd_tdb, mag, mag_err, band``.
    model
        Per band: (phase grid in [0, 1), model magnitudes).
    residuals
        Data minus model, aligned with ``lc``.
    """
    fig = _figure(2, width=9.0, height_per=3.0)
    ax, axr = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    phase = np.mod((lc["bjd_tdb"].to_numpy() - epoch) / period, 1.0)
    model_label = "fitted model"  # a harmonic series or an eclipse template: named once, on the first band that has one
    for k, band in enumerate(sorted(pd.unique(lc["band"]))):
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
                ax.plot(ph[order] + shift, mag[order], "-", color="black", lw=1.1,
                        label=model_label if shift == 0 else None)
            model_label = None
    ax.invert_yaxis()
    ax.set_ylabel("magnitude")
    ax.grid(alpha=0.3)
    ax.legend(fontsize="small", loc="best")
    axr.axhline(0.0, color="black", lw=0.8)
    axr.invert_yaxis()
    axr.set_ylabel("data − fit (mag)")
    axr.set_xlabel(f"phase (P = {period:.6f} d, epoch BJD_TDB {epoch:.5f}); two cycles shown")
    axr.grid(alpha=0.3)
    if title:
        fig.suptitle(title)
    return literal_text(fig)


#: Marker and colour of each timing type in the O − C diagram (shape alone tells them apart).
TIMING_STYLE = {"primary": ("o", PALETTE[0]), "secondary": ("D", PALETTE[5]), "maximum": ("^", PALETTE[2])}


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
) -> "Figure":
    """O − C diagram: timings against cycle number with error bars, by type, with the fitted ephemerides.

    ``o_minus_c_d`` and ``err_d`` are in days (drawn in minutes) against the
    reference ephemeris; ``fit`` is the dict of an ephemeris fit (its linear and
    quadratic solutions are drawn as curves relative to the same reference).
    ``bands`` (one per timing) colours the timings by band, the marker still
    telling the type; ``disagree`` (one per timing) rings the timings whose two
    estimates disagree.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    fig = _figure(1, width=9.0, height_per=4.2)
    ax = fig.subplots()
    cycle = np.asarray(cycle, dtype=float)
    oc_min = np.asarray(o_minus_c_d, dtype=float) * 1440.0
    err_min = np.asarray(err_d, dtype=float) * 1440.0
    types = np.asarray(types, dtype=object)
    band_of = None if bands is None else np.asarray([str(b) for b in bands], dtype=object)
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
            ax.errorbar(cycle[m], oc_min[m], yerr=err_min[m], fmt=marker, color=colour, ms=6, capsize=2,
                        mfc="white" if hollow else colour, label=label)
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
    if fit is not None and cycle.size:
        e = np.linspace(cycle.min(), cycle.max(), 200)
        ref = fit.get("reference")
        styles = (("linear", "--", "linear ephemeris"), ("quadratic_fit", ":", "quadratic ephemeris"))
        for key, ls, label in styles:
            sol = fit.get(key)
            if sol and ref:
                model = sol["epoch"] + sol["period"] * e + sol.get("quadratic", 0.0) * e**2
                base = ref["epoch"] + ref["period"] * e + ref.get("quadratic", 0.0) * e**2
                ax.plot(e, (model - base) * 1440.0, ls, color="0.25", lw=1.1, label=label)
    ax.axhline(0.0, color="0.6", lw=0.8)
    ax.set_xlabel("cycle number E")
    ax.set_ylabel("O − C (minutes)")
    if reference:
        ax.set_title(f"against {reference}", fontsize="small", loc="left")
    ax.grid(alpha=0.3)
    if band_of is None:
        ax.legend(fontsize="small", loc="best")
    else:
        # the marker tells the type, the colour the band: one legend entry for each, then the lines
        lines = [ln for ln in ax.lines if not ln.get_label().startswith("_")]
        band_handles = [Patch(color=c, label=b) for b, c in band_colour.items()]
        handles = type_handles + band_handles + lines
        ax.legend(handles, [h.get_label() for h in handles], fontsize="small", loc="best")
    if title:
        fig.suptitle(title)
    return literal_text(fig)


# --------------------------------------------------------------------------- figures of whole results
# The command line and the demo draw the same figures of the same results: one call each.


def period_figures(stored, title: str) -> tuple["Figure", "Figure"]:
    """The periodogram and the phased light curve of a stored period analysis.

    ``stored`` is a :class:`varstar.workflows.periods.StoredPeriod` (its
    ``result`` and the ``lightcurve`` analysed); ``title`` starts both titles.
    """
    from .period import phased_data, phased_model

    res = stored.result
    peaks = stored.to_dict()["aliases"][:4]
    periodogram = periodogram_figure(res.freq, res.power, best_frequency=res.aliases.best_frequency,
                                     fap_levels=res.fap_levels, peaks=peaks, theta=res.theta,
                                     title=f"{title}, {res.method}", ylabel="normalised power")
    lc, resid = phased_data(res, stored.lightcurve)
    phased = phased_figure(lc, period=res.period, epoch=res.epoch, model=phased_model(res), residuals=resid,
                           title=f"{title}, P = {res.period:.7f} d, phase 0 at {res.epoch_kind} light")
    return periodogram, phased


def timings_figure(timed: dict, title: str) -> "Figure":
    """The O − C diagram of a timings result (``varstar timings --json``'s dict), with its ephemeris fit."""
    rows, eph = timed["timings"], timed["ephemeris"]
    fit = dict(timed["fit"], reference=eph) if timed["fit"] else None
    return oc_figure([t["cycle"] for t in rows], [t["o_minus_c"] for t in rows], [t["err"] for t in rows],
                     [t["type"] for t in rows], fit=fit,
                     reference=f"T0 = {eph['epoch']:.5f}, P = {eph['period']:.7f} d (BJD_TDB)", title=title,
                     bands=[t.get("band", "") for t in rows], disagree=[bool(t.get("disagree")) for t in rows])
