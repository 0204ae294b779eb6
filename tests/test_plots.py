"""Tests of varstar.plots: what every figure draws, and saving it.

Conventions checked (common practice in the trade): magnitude axes are
inverted (brighter up), every point has its error bar, axes name the band, the
unit and the time system.  Colours: the Okabe & Ito (2008) colour-blind-safe
palette (black #000000, orange #E69F00, sky blue #56B4E9, bluish green #009E73,
yellow #F0E442, blue #0072B2, vermillion #D55E00, reddish purple #CC79A7; from
memory), nights told apart by colour *and* marker.  File signatures: PNG
(ISO/IEC 15948: 89 50 4E 47 0D 0A 1A 0A), PDF ("%PDF-").

Each figure function is called the way ``varstar.demo`` and ``varstar.cli``
call it, on the demo's own data (the invented field of ``varstar.simulate``,
fixed seed, ingested, transformed, period and timings found), and on small
hand-built inputs with fixed seeds where a case needs a feature the demo lacks
(a rejected standard star, a rejected comparison star, a night seen in one band
only, primary and secondary timings, several check stars).  The tests read the
returned Figure's artists: panels, series, the plotted numbers, error bars, axis
direction and limits, labels and legends (never one of a single entry), and,
where the question is whether words can be read, the drawn extents of texts.
The night-by-night figure has its own file, ``test_plots_nights.py``.
"""

from __future__ import annotations

import re
import shutil

import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection
from matplotlib.colors import to_hex, to_rgb
from matplotlib.container import ErrorbarContainer
from matplotlib.figure import Figure
from matplotlib.image import imread

from varstar.errors import OutputError
from varstar.plots import (
    PALETTE,
    coefficient_figure,
    colour_figure,
    colour_magnitude_figure,
    lightcurve_figure,
    oc_figure,
    period_figures,
    period_text,
    periodogram_figure,
    phased_figure,
    save,
    timings_figure,
)

OKABE_ITO = {"#000000", "#e69f00", "#56b4e9", "#009e73", "#f0e442", "#0072b2", "#d55e00", "#cc79a7"}
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
LC_COLUMNS = ["bjd_tdb", "hjd_utc", "jd_utc", "band", "star", "mag", "mag_err", "cal_err", "airmass", "night", "frame", "quality", "flags"]


def make_lc(n_nights: int = 4, bands=("V", "B"), per_night: int = 12, n_flagged: int = 3, seed: int = 5) -> pd.DataFrame:
    """A light curve shaped like Archive.lightcurve(include_flagged=True) returns it."""
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(n_nights):
        label = f"2026-09-{11 + 2 * k:02d}"
        t0 = 2461295.65 + 2 * k
        for b in bands:
            t = t0 + np.sort(rng.uniform(0, 0.25, per_night))
            mag = (13.05 if b == "V" else 13.43) + 0.3 * np.sin(2 * np.pi * t / 0.46173)
            q = np.zeros(per_night, dtype=np.uint8)
            if k == 1:
                q[:n_flagged] = 1
            for i in range(per_night):
                rows.append(
                    dict(bjd_tdb=t[i], hjd_utc=t[i] - 1e-4, jd_utc=t[i] - 4e-3, band=b, star="V1", mag=mag[i],
                         mag_err=0.004 + 0.002 * i / per_night, cal_err=0.01, airmass=1.2, night=label,
                         frame=f"{label.replace('-', '')}-{i:03d}", quality=q[i], flags="zero_point_jump" if q[i] else "")
                )
    return pd.DataFrame(rows, columns=LC_COLUMNS).sort_values(["bjd_tdb", "band"]).reset_index(drop=True)


def night_containers(ax):
    return {c.get_label(): c for c in ax.containers if isinstance(c, ErrorbarContainer) and c.get_label() != "flagged"}


def xy(container) -> tuple[np.ndarray, np.ndarray]:
    line = container.lines[0]
    return np.asarray(line.get_xdata(), dtype=float), np.asarray(line.get_ydata(), dtype=float)


def x_offset(fig) -> float:
    label = fig.axes[-1].get_xlabel()
    m = re.search(r"BJD_TDB\s*[−-]\s*(\d+)", label)
    assert m, label
    return float(m.group(1))


def test_axes_inverted_labelled_and_one_panel_per_band():
    lc = make_lc()
    fig = lightcurve_figure(lc, title="Wren-Hollow 7: V1")
    axes = fig.axes
    assert len(axes) == 2
    fig.draw_without_rendering()  # limits and labels as they will be rendered
    for ax, band in zip(axes, ["B", "V"]):  # bands in sorted order, one panel each
        lo, hi = ax.get_ylim()
        assert lo > hi, f"{band}: magnitude axis must be inverted (bright up), got ylim {lo, hi}"
        ylab = ax.get_ylabel()
        assert band in ylab and "mag" in ylab
        # The panel shows exactly this band's good points.
        ys = np.concatenate([xy(c)[1] for c in night_containers(ax).values()])
        want = lc[(lc["band"] == band) & (lc["quality"] == 0)]["mag"].to_numpy()
        np.testing.assert_allclose(np.sort(ys), np.sort(want))
        # Every good point is inside the visible range.
        assert hi <= ys.min() and ys.max() <= lo
    xlab = axes[-1].get_xlabel()
    assert "BJD_TDB" in xlab and "(d)" in xlab
    assert axes[0].get_xlim() == axes[1].get_xlim()  # shared time axis
    assert fig._suptitle is not None and fig._suptitle.get_text() == "Wren-Hollow 7: V1"


def test_points_and_error_bars_are_the_data():
    lc = make_lc(n_nights=3)
    fig = lightcurve_figure(lc)
    t0 = x_offset(fig)
    # A whole-day offset at or below the first time, small enough to leave readable numbers.
    assert t0 == int(t0) and 0 <= lc["bjd_tdb"].min() - t0 < 100
    for ax, band in zip(fig.axes, ["B", "V"]):
        conts = night_containers(ax)
        assert conts, "no error-bar series"
        for night, c in conts.items():
            assert isinstance(c, ErrorbarContainer) and c.has_yerr
            want = lc[(lc["band"] == band) & (lc["night"] == night) & (lc["quality"] == 0)]
            x, y = xy(c)
            np.testing.assert_allclose(x + t0, want["bjd_tdb"], rtol=0, atol=1e-9)
            np.testing.assert_allclose(y, want["mag"], rtol=0, atol=1e-12)
            # Each bar spans mag - mag_err .. mag + mag_err at the point's time.
            segs = np.asarray(c.lines[2][0].get_segments())
            np.testing.assert_allclose(segs[:, 0, 0], segs[:, 1, 0])
            np.testing.assert_allclose(np.abs(segs[:, 1, 1] - segs[:, 0, 1]) / 2, want["mag_err"], rtol=1e-12)
            np.testing.assert_allclose((segs[:, 1, 1] + segs[:, 0, 1]) / 2, want["mag"], rtol=0, atol=1e-12)


def test_nights_have_distinct_okabe_ito_colours_and_distinct_markers():
    lc = make_lc(n_nights=5)
    fig = lightcurve_figure(lc)
    nights = sorted(lc["night"].unique())
    style_per_axis = []
    for ax in fig.axes:
        conts = night_containers(ax)
        assert sorted(conts) == nights
        style = {}
        for night, c in conts.items():
            line = c.lines[0]
            colour = to_hex(line.get_color())
            assert colour in OKABE_ITO, colour
            assert to_hex(c.lines[2][0].get_colors()[0]) == colour  # bars in the night's colour too
            style[night] = (colour, line.get_marker())
        colours = [s[0] for s in style.values()]
        markers = [s[1] for s in style.values()]
        assert len(set(colours)) == len(nights), colours
        assert len(set(markers)) == len(nights), markers
        style_per_axis.append(style)
    # A night looks the same in every band.
    assert style_per_axis[0] == style_per_axis[1]
    # The legend names every night once.
    texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert texts == nights


def test_many_nights_still_differ_in_colour_or_marker():
    lc = make_lc(n_nights=12, bands=("V",), per_night=3, n_flagged=0)
    fig = lightcurve_figure(lc)
    conts = night_containers(fig.axes[0])
    pairs = {(to_hex(c.lines[0].get_color()), c.lines[0].get_marker()) for c in conts.values()}
    assert len(conts) == 12 and len(pairs) == 12
    assert {p[0] for p in pairs} <= OKABE_ITO


def test_show_flagged_adds_hollow_grey_series():
    lc = make_lc(n_nights=3, n_flagged=3)
    flagged = lc[lc["quality"] != 0]
    assert len(flagged) == 6  # 3 per band on the second night

    hidden = lightcurve_figure(lc, show_flagged=False)
    for ax in hidden.axes:
        assert all(c.get_label() != "flagged" for c in ax.containers)
        xs = np.concatenate([xy(c)[0] for c in ax.containers])
        assert xs.size == 3 * 12 - 3  # good points of this band only

    shown = lightcurve_figure(lc, show_flagged=True)
    t0 = x_offset(shown)
    for ax, band in zip(shown.axes, ["B", "V"]):
        bad = [c for c in ax.containers if c.get_label() == "flagged"]
        assert len(bad) == 1
        line = bad[0].lines[0]
        want = flagged[flagged["band"] == band]
        x, y = xy(bad[0])
        np.testing.assert_allclose(x + t0, want["bjd_tdb"], atol=1e-9)
        np.testing.assert_allclose(y, want["mag"])
        assert line.get_markerfacecolor() == "none"  # hollow
        r, g, b = to_rgb(line.get_color())
        assert r == g == b and 0.3 < r < 0.8  # grey
        assert to_hex(line.get_color()) not in OKABE_ITO
        # The good points are still there, unchanged.
        assert sum(xy(c)[0].size for c in night_containers(ax).values()) == 33
    assert "flagged" in [t.get_text() for t in shown.legends[0].get_texts()]


def test_empty_light_curve_does_not_crash(tmp_path):
    empty = pd.DataFrame({c: pd.Series(dtype=float if c in ("bjd_tdb", "mag", "mag_err") else object) for c in LC_COLUMNS})
    fig = lightcurve_figure(empty, title="nothing yet", show_flagged=True)
    assert len(fig.axes) == 1
    assert any("no observations" in t.get_text() for t in fig.axes[0].texts)
    save(fig, tmp_path / "empty.png")
    assert (tmp_path / "empty.png").read_bytes()[:8] == PNG_MAGIC


def test_only_flagged_points_give_empty_panel_without_crash():
    lc = make_lc(n_nights=1, bands=("V",), per_night=4)
    lc["quality"] = 1
    fig = lightcurve_figure(lc)
    assert len(fig.axes) == 1 and not fig.axes[0].containers
    fig2 = lightcurve_figure(lc, show_flagged=True)
    assert [c.get_label() for c in fig2.axes[0].containers] == ["flagged"]


def test_save_png_pdf_svg(tmp_path):
    fig = lightcurve_figure(make_lc(n_nights=2))
    save(fig, tmp_path / "lc.png")
    data = (tmp_path / "lc.png").read_bytes()
    assert data[:8] == PNG_MAGIC
    # IHDR: width and height at 120 dpi of the 9 x max(3, 3.2 * 2) inch figure.
    width, height = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    assert (width, height) == (9 * 120, round(6.4 * 120))
    save(fig, tmp_path / "lc.pdf")
    assert (tmp_path / "lc.pdf").read_bytes()[:5] == b"%PDF-"
    save(fig, tmp_path / "lc.svg")
    assert b"<svg" in (tmp_path / "lc.svg").read_bytes()[:2000]
    save(fig, tmp_path / "noext")  # no suffix: PNG
    assert (tmp_path / "noext").read_bytes()[:8] == PNG_MAGIC
    assert sorted(p.name for p in tmp_path.iterdir()) == ["lc.pdf", "lc.png", "lc.svg", "noext"]


def test_save_unknown_extension_is_output_error_and_writes_nothing(tmp_path):
    fig = lightcurve_figure(make_lc(n_nights=1))
    with pytest.raises(OutputError, match=r"lc\.xyz.*xyz"):
        save(fig, tmp_path / "lc.xyz")
    assert list(tmp_path.iterdir()) == []


def test_save_into_missing_folder_is_output_error(tmp_path):
    fig = lightcurve_figure(make_lc(n_nights=1))
    with pytest.raises(OutputError, match="missing"):
        save(fig, tmp_path / "missing" / "lc.png")
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- reading a figure


def drawn(fig: Figure) -> Figure:
    """Lay the figure out as it will be rendered (autoscaled limits, secondary axes), without pixels."""
    fig.draw_without_rendering()
    return fig


def errorbar_series(ax) -> list[ErrorbarContainer]:
    return [c for c in ax.containers if isinstance(c, ErrorbarContainer)]


def series_by_label(ax) -> dict[str, ErrorbarContainer]:
    return {c.get_label(): c for c in errorbar_series(ax)}


def bars(container: ErrorbarContainer, axis: str = "y") -> tuple[np.ndarray, np.ndarray]:
    """Centres and half-lengths of a series' error bars along ``axis`` (as drawn, from the bar segments)."""
    assert container.has_yerr if axis == "y" else container.has_xerr, f"no {axis} error bars"
    cols = container.lines[2]
    col = cols[-1] if axis == "y" else cols[0]  # matplotlib draws x bars first, then y bars
    segs = np.asarray(col.get_segments(), dtype=float)
    k = 1 if axis == "y" else 0
    return (segs[:, 0, k] + segs[:, 1, k]) / 2, np.abs(segs[:, 1, k] - segs[:, 0, k]) / 2


def assert_magnitude_axis(ax) -> None:
    lo, hi = ax.get_ylim()
    assert lo > hi, f"magnitude axis must be inverted (bright up), got ylim {lo, hi}"


def assert_view_fits(ax, x, y, xerr=0.0, yerr=0.0, slack: float = 1.3) -> None:
    """Every point with its bars is inside the view, and the view is not much wider than the data.

    matplotlib's default margins add 5 % a side (common practice: its documented
    ``axes.xmargin``/``ymargin``), so a view over 1.3 times the data's span means
    something else (a stray point, a wrong unit, a wrong offset) stretched it.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    xerr, yerr = np.broadcast_to(np.asarray(xerr, float), x.shape), np.broadcast_to(np.asarray(yerr, float), y.shape)
    for (lo_v, hi_v), v, e, name in ((sorted(ax.get_xlim()), x, xerr, "x"), (sorted(ax.get_ylim()), y, yerr, "y")):
        lo_d, hi_d = float(np.nanmin(v - e)), float(np.nanmax(v + e))
        assert lo_v <= lo_d and hi_d <= hi_v, f"{name}: data {lo_d, hi_d} outside the view {lo_v, hi_v}"
        assert hi_v - lo_v < slack * (hi_d - lo_d), f"{name}: view {lo_v, hi_v} much wider than the data {lo_d, hi_d}"


def legend_texts(legend) -> list[str]:
    assert legend is not None, "no legend"
    return [t.get_text() for t in legend.get_texts()]


def labelled_lines(ax, label: str):
    return [ln for ln in ax.lines if ln.get_label() == label]


# --------------------------------------------------------------------------- the demo's own inputs


@pytest.fixture(scope="module")
def demo(demo_data, demo_archive_path, tmp_path_factory):
    """Every figure's input as ``varstar.demo`` makes it: standard-field fit, transformed archive, colour,
    field diagram of the last night, period and timings (on a copy of the six-night demo archive)."""
    from types import SimpleNamespace

    from varstar.colour import colour_summary, phases
    from varstar.setups import read_setup, save_setup
    from varstar.standards import fit_standard_field
    from varstar.workflows.archive import open_archive
    from varstar.period import phased_data, phased_model
    from varstar.workflows.standard import field_diagram, transform_archive

    folder = tmp_path_factory.mktemp("plots-demo")
    archive = folder / "demo.h5"
    shutil.copyfile(demo_archive_path, archive)
    k2_bv = -0.03  # the demo's k''_bv (common practice for B - V)
    fit = fit_standard_field([demo_data.folder / "standards.csv"], demo_data.folder / "standards.toml", k2_bv=k2_bv)
    setups = folder / "setups.toml"
    save_setup(setups, "demo-camera", fit.coefficients("standards.toml fit", k2_bv=k2_bv))
    coeffs, gap = read_setup(setups, "demo-camera")
    transform_archive(archive, coeffs, gap)
    arch = open_archive(archive)
    lc = arch.lightcurve()
    colour = colour_summary(lc, arch.target)
    last = str(arch.nights()["label"].iloc[-1])
    field, track = field_diagram(arch, last)
    found = arch.period(store=False)
    lcp, resid = phased_data(found.result, found.lightcurve)
    return SimpleNamespace(
        name=arch.target.name, star=arch.target.target_star.id, fit=fit, lc_all=arch.lightcurve(include_flagged=True),
        lc=lc, phase=phases(lc["bjd_tdb"].to_numpy(), arch.target), period_eph=colour["ephemeris"]["period"],
        last=last, field=field, track=track, found=found, res=found.result, payload=found.to_dict(), lcp=lcp,
        resid=resid, model=phased_model(found.result), timed=arch.time_extrema(store=False).to_dict(),
        checks=pd.concat([arch.lightcurve(star=s.id, include_flagged=True) for s in arch.target.stars_with_role("check")],
                         ignore_index=True),
    )


def demo_lightcurve_figure(demo) -> Figure:
    return lightcurve_figure(demo.lc_all, title=f"{demo.name}: {demo.star}", show_flagged=True)


def demo_colour_figure(demo) -> Figure:
    return colour_figure(demo.lc, title=f"{demo.name}: {demo.star}", phase=demo.phase, period=demo.period_eph)


def demo_cmd_figure(demo) -> Figure:
    return colour_magnitude_figure(demo.field, demo.track, title=f"{demo.name}, night {demo.last}")


def demo_periodogram_figure(demo) -> Figure:
    return period_figures(demo.found, f"{demo.name}: {demo.star}")[0]  # as the command line and the demo draw it


def demo_phased_figure(demo) -> Figure:
    return period_figures(demo.found, f"{demo.name}: {demo.star}")[1]


def oc_inputs(timed: dict) -> tuple[list, list, list, list]:
    ts = timed["timings"]
    return [t["cycle"] for t in ts], [t["o_minus_c"] for t in ts], [t["err"] for t in ts], [t["type"] for t in ts]


def demo_oc_figure(demo) -> Figure:
    return timings_figure(demo.timed, f"{demo.name}: O − C")  # as the command line and the demo draw it


# --------------------------------------------------------------------------- the checks themselves


def test_the_checks_fail_on_wrong_figures():
    """Each reading helper rejects the figure it guards against (so a test using it can fail)."""
    fig = Figure()
    ax = fig.subplots()
    ax.errorbar([1.0, 2.0, 3.0], [13.0, 13.4, 13.2], yerr=[0.01, 0.01, 0.01], fmt="o")
    drawn(fig)
    with pytest.raises(AssertionError, match="inverted"):
        assert_magnitude_axis(ax)  # magnitudes drawn faint-up
    assert_view_fits(ax, [1.0, 2.0, 3.0], [13.0, 13.4, 13.2], yerr=0.01)
    ax.plot([0.0], [0.0], "o")  # a stray point stretches the view
    ax.relim()
    ax.autoscale_view()
    with pytest.raises(AssertionError, match="wider"):
        assert_view_fits(ax, [1.0, 2.0, 3.0], [13.0, 13.4, 13.2], yerr=0.01)
    with pytest.raises(AssertionError, match="outside"):
        assert_view_fits(ax, [1.0, 2.0, 30.0], [13.0, 13.4, 13.2])
    ax.invert_yaxis()
    assert_magnitude_axis(ax)
    # points without error bars are no error-bar series, and a series without x bars has none to read
    fig2 = Figure()
    ax2 = fig2.subplots()
    ax2.plot([1.0, 2.0], [13.0, 13.1], "o")
    assert errorbar_series(ax2) == []
    c = ax2.errorbar([1.0, 2.0], [13.0, 13.1], yerr=[0.02, 0.03], fmt="o")
    with pytest.raises(AssertionError, match="no x error bars"):
        bars(c, "x")
    np.testing.assert_allclose(bars(c, "y")[1], [0.02, 0.03])
    with pytest.raises(AssertionError, match="no legend"):
        legend_texts(ax2.get_legend())


# --------------------------------------------------------------------------- light curve


def test_lightcurve_of_the_demo_archive(demo):
    lc = demo.lc_all
    fig = drawn(demo_lightcurve_figure(demo))
    bands = sorted(lc["band"].unique())
    assert bands == ["B", "V"] and len(fig.axes) == 2  # one panel per band
    t0 = x_offset(fig)
    assert fig.axes[-1].get_xlabel() == f"BJD_TDB − {t0:.0f} (d)"
    assert 0 <= lc["bjd_tdb"].min() - t0 < 100
    assert lc["quality"].ne(0).any()  # the demo has flagged points (passing clouds)
    for ax, band in zip(fig.axes, bands):
        assert_magnitude_axis(ax)
        assert ax.get_ylabel() == f"{band} (mag)"
        sub = lc[lc["band"] == band]
        good, bad = sub[sub["quality"] == 0], sub[sub["quality"] != 0]
        series = series_by_label(ax)
        # one series per night with good points, plus the flagged points apart
        assert sorted(k for k in series if k != "flagged") == sorted(good["night"].unique())
        assert ("flagged" in series) == (len(bad) > 0)
        n_drawn = sum(xy(c)[0].size for c in series.values())
        assert n_drawn == len(sub)
        for c in series.values():
            assert c.has_yerr
        if len(bad):
            x, y = xy(series["flagged"])
            np.testing.assert_allclose(np.sort(x + t0), np.sort(bad["bjd_tdb"]), atol=1e-9)
            good_x = np.concatenate([xy(c)[0] for k, c in series.items() if k != "flagged"])
            assert not np.isin(np.round(x, 9), np.round(good_x, 9)).any()  # a flagged point is not among the good
        assert_view_fits(ax, sub["bjd_tdb"] - t0, sub["mag"], yerr=sub["mag_err"])
    nights = sorted(lc["night"].unique())
    assert legend_texts(fig.legends[0]) == nights + ["flagged"]


def test_lightcurve_legend_names_nights_and_flagged_points_of_every_panel():
    """A night observed in V only, and flagged points in V only, still reach the legend (V is the second panel)."""
    lc = make_lc(n_nights=3, n_flagged=2)
    nights = sorted(lc["night"].unique())
    lc = lc[~((lc["band"] == "B") & (lc["night"] == nights[2]))].copy()
    lc.loc[lc["band"] == "B", "quality"] = 0
    fig = lightcurve_figure(lc, show_flagged=True)
    b_series, v_series = (series_by_label(ax) for ax in fig.axes)
    assert sorted(b_series) == nights[:2] and sorted(v_series) == nights + ["flagged"]
    assert legend_texts(fig.legends[0]) == nights + ["flagged"]
    # the legend's entry for the V-only night is drawn in that night's colour (its error-bar proxy)
    handle = fig.legends[0].legend_handles[2]
    assert to_hex(handle.get_colors()[0], keep_alpha=False) == to_hex(v_series[nights[2]].lines[0].get_color())


def all_legends(fig) -> list:
    return list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend() is not None]


def check_lc(n: int = 30, stars=("K1",), bands=("V",), seed: int = 9, t0: float = 2461295.65,
             night: str = "2026-09-11") -> pd.DataFrame:
    """Invented check-star points (seed ``seed``): constant stars with 0.005-0.012 mag errors, the first point
    of each series flagged."""
    rng = np.random.default_rng(seed)
    rows = []
    for k, s in enumerate(stars):
        for b in bands:
            t = t0 + np.sort(rng.uniform(0, 0.25, n))
            err = rng.uniform(0.005, 0.012, n)
            mag = 12.6 + 0.4 * k + (0.5 if b == "B" else 0.0) + rng.normal(0, err)
            for i in range(n):
                rows.append(dict(bjd_tdb=t[i], jd_utc=t[i] - 4e-3, band=b, star=s, mag=mag[i], mag_err=err[i],
                                 night=night, quality=1 if i == 0 else 0))
    return pd.DataFrame(rows).sort_values(["bjd_tdb", "band"]).reset_index(drop=True)


def weighted_mean(mag, err) -> float:
    w = 1.0 / np.asarray(err, float) ** 2
    return float(np.sum(w * np.asarray(mag, float)) / np.sum(w))


def test_one_night_has_no_one_entry_legend_and_names_the_night_in_the_title():
    lc = make_lc(n_nights=1, n_flagged=0)
    fig = drawn(lightcurve_figure(lc, title="one night"))
    assert all_legends(fig) == []  # one night: a legend would say nothing
    assert fig.axes[0].get_title(loc="right") == "2026-09-11"
    assert fig.axes[0].get_title(loc="left") == ""  # nothing flagged shown: no note
    # two nights: the legend is back, and no title names a night
    two = drawn(lightcurve_figure(make_lc(n_nights=2, n_flagged=0)))
    assert legend_texts(two.legends[0]) == ["2026-09-11", "2026-09-13"]
    assert two.axes[0].get_title(loc="right") == ""


def test_one_night_with_flagged_points_says_what_the_grey_points_are():
    lc = make_lc(n_nights=2, n_flagged=3)
    second = lc[lc["night"] == "2026-09-13"]  # the night with flagged points
    fig = drawn(lightcurve_figure(second, show_flagged=True))
    assert all_legends(fig) == []
    assert fig.axes[0].get_title(loc="left") == "hollow grey: flagged points"
    assert all("flagged" in series_by_label(ax) for ax in fig.axes)
    hidden = drawn(lightcurve_figure(second))
    assert hidden.axes[0].get_title(loc="left") == ""


def test_night_figure_draws_check_stars_in_a_panel_of_their_own():
    lc = make_lc(n_nights=1, n_flagged=0)
    checks = check_lc(stars=("K1", "K2"), bands=("V", "B"))
    fig = drawn(lightcurve_figure(lc, title="with checks", checks=checks))
    assert len(fig.axes) == 3  # B, V, then the check stars
    *bands_axes, axc = fig.axes
    assert [ax.get_ylabel() for ax in bands_axes] == ["B (mag)", "V (mag)"]
    assert axc.get_ylabel() == "check star − its mean (mag)"
    assert_magnitude_axis(axc)
    assert axc.get_xlim() == bands_axes[0].get_xlim()  # the same time axis
    t0 = x_offset(fig)
    assert fig.axes[-1].get_xlabel() == f"BJD_TDB − {t0:.0f} (d)"
    series = series_by_label(axc)
    labels = []
    for star, band in (("K1", "B"), ("K1", "V"), ("K2", "B"), ("K2", "V")):
        sub = checks[(checks["star"] == star) & (checks["band"] == band)]
        good = sub[sub["quality"] == 0]
        ref = weighted_mean(good["mag"], good["mag_err"])
        sd = float(np.std(good["mag"] - ref, ddof=1))
        label = f"{star} {band}: σ = {sd:.3f} mag"
        labels.append(label)
        c = series[label]
        np.testing.assert_allclose(xy(c)[0] + t0, good["bjd_tdb"], atol=1e-9)
        np.testing.assert_allclose(xy(c)[1], good["mag"] - ref, atol=1e-12)
        np.testing.assert_allclose(bars(c)[1], good["mag_err"])
        assert to_hex(c.lines[0].get_color()) in OKABE_ITO
        assert abs(np.mean(xy(c)[1])) < 0.01  # around its own mean (mag), whatever the star's brightness
    assert len({(to_hex(series[lab].lines[0].get_color()), series[lab].lines[0].get_marker()) for lab in labels}) == 4
    assert legend_texts(axc.get_legend()) == labels
    # the zero line, and no flagged check points unless asked for
    assert [list(ln.get_ydata()) for ln in axc.lines if ln.get_transform() == axc.get_yaxis_transform()] == [[0.0, 0.0]]
    assert "flagged" not in series
    shown = drawn(lightcurve_figure(lc, checks=checks, show_flagged=True))
    flagged = [c for c in errorbar_series(shown.axes[-1]) if c.get_label() == "flagged"]
    assert sum(xy(c)[0].size for c in flagged) == 4  # the first point of each star and band
    assert all(c.lines[0].get_markerfacecolor() == "none" for c in flagged)
    assert legend_texts(shown.axes[-1].get_legend()) == labels + ["flagged"]  # named once
    # without checks the figure is as before
    assert len(lightcurve_figure(lc).axes) == 2


def test_one_check_star_is_named_in_the_panel_title_not_a_legend():
    lc = make_lc(n_nights=1, bands=("V",), n_flagged=0)
    checks = check_lc(stars=("K1",), bands=("V",))
    fig = drawn(lightcurve_figure(lc, checks=checks))
    axc = fig.axes[-1]
    assert axc.get_legend() is None and all_legends(fig) == []
    (c,) = errorbar_series(axc)
    assert axc.get_title(loc="right") == c.get_label() and c.get_label().startswith("K1 V: σ = ")


def test_check_panel_of_a_demo_night(demo):
    last = demo.last
    lc = demo.lc_all[demo.lc_all["night"] == last]
    checks = demo.checks[demo.checks["night"] == last]
    assert set(checks["star"]) == {"K1"} and set(checks["band"]) == {"B", "V"}
    fig = drawn(lightcurve_figure(lc, title=f"{demo.name}: {demo.star}, night {last}", show_flagged=True, checks=checks))
    assert len(fig.axes) == 3
    axc = fig.axes[-1]
    assert_magnitude_axis(axc)
    texts = legend_texts(axc.get_legend())
    assert [t.split(":")[0] for t in texts] == ["K1 B", "K1 V"]
    # the invented check star is constant: its drawn scatter is that of its errors, a few millimagnitudes
    for c in errorbar_series(axc):
        y = xy(c)[1]
        assert 0.001 < np.std(y) < 0.02 and abs(np.median(y)) < 0.005
    assert fig.axes[0].get_title(loc="right") == last and not fig.legends


# --------------------------------------------------------------------------- transformation coefficients


def invented_standard_fit():
    """A standard field of 10 invented stars (seed 2026): V - v = 0.06 (B - V) - 21.3, B - V = 0.93 (b - v) + 0.12,
    with star F07 read 0.25 mag too faint in v, so the fit rejects it."""
    from varstar.transform import fit_coefficients

    rng = np.random.default_rng(2026)
    n = 10
    bv = np.linspace(-0.1, 1.6, n)
    V = np.linspace(10.2, 13.9, n)[rng.permutation(n)]
    v_inst = V - 0.06 * bv + 21.3 + rng.normal(0, 0.006, n)
    b_inst = v_inst + (bv - 0.12) / 0.93 + rng.normal(0, 0.006, n)
    v_inst[6] += 0.25
    ids = [f"F{k + 1:02d}" for k in range(n)]
    return fit_coefficients(ids, V, np.full(n, 0.008), V + bv, np.full(n, 0.010), v_inst, np.full(n, 0.004),
                            b_inst, np.full(n, 0.004))


def removed_from(label: str) -> float:
    """The constant an axis label says was taken off its values (``"V − v + 21.3 (mag; constant removed)"`` -> -21.3)."""
    m = re.search(r" ([−+]) (\d+\.\d) \(mag; constant removed\)$", label)
    if not m:
        assert label.endswith(" (mag)"), label
        return 0.0
    return float(m.group(2)) * (1.0 if m.group(1) == "−" else -1.0)


def boxes_overlap(a, b) -> bool:
    return a.x0 < b.x1 and b.x0 < a.x1 and a.y0 < b.y1 and b.y0 < a.y1


def assert_labels_clear(fig) -> None:
    """No axis label or title of one panel runs into another panel, its labels, or the figure's title."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    texts = []
    for k, ax in enumerate(fig.axes):
        for t in (ax.xaxis.label, ax.yaxis.label, ax.title, ax._left_title, ax._right_title):
            if t.get_text():
                texts.append((k, t.get_text(), t.get_window_extent(r)))
    if fig._suptitle is not None:
        texts.append((-1, fig._suptitle.get_text(), fig._suptitle.get_window_extent(r)))
    for i, (ka, ta, a) in enumerate(texts):
        for kb, tb, b in texts[i + 1:]:
            assert not boxes_overlap(a, b), (ta, tb)
        for k, ax in enumerate(fig.axes):
            if k != ka:
                assert not boxes_overlap(a, ax.get_window_extent(r)), (ta, k)


def check_coefficient_panels(fig, fit) -> None:
    used = np.asarray(fit.used, bool)
    assert len(fig.axes) == 4  # each fit above its residuals
    panels = ((fit.x_v, fit.y_v, fit.xerr_v, fit.yerr_v, fit.epsilon_v, fit.zeta_v, fit.resid_v, "ε"),
              (fit.x_bv, fit.y_bv, fit.xerr_bv, fit.yerr_bv, fit.mu_bv, fit.zeta_bv, fit.resid_bv, "μ"))
    for ax, axr, (x, y, xe, ye, slope, zero, resid, sym) in zip(fig.axes[:2], fig.axes[2:], panels):
        x, y, xe, ye, resid = (np.asarray(a, float) for a in (x, y, xe, ye, resid))
        assert ax.get_xlim() == axr.get_xlim()  # the residuals under their own fit
        cx, cy = removed_from(axr.get_xlabel()), removed_from(ax.get_ylabel())
        series = series_by_label(ax)
        std = series["standard stars"]
        xs, ys = xy(std)
        np.testing.assert_allclose(xs + cx, x[used])
        np.testing.assert_allclose(ys + cy, y[used])
        np.testing.assert_allclose(bars(std, "x")[1], xe[used])  # both variables carry errors
        np.testing.assert_allclose(bars(std, "y")[1], ye[used])
        assert to_hex(std.lines[0].get_color()) in OKABE_ITO
        # the fitted line: the slope the fit reports, running through the used stars
        (line,) = [ln for ln in ax.lines if ln.get_label().startswith(f"{sym} = ")]
        lx, ly = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
        np.testing.assert_allclose(np.diff(ly) / np.diff(lx), slope, rtol=1e-9)
        np.testing.assert_allclose(ly + cy, slope * (lx + cx) + zero, atol=1e-9)  # the fit's own intercept
        assert lx.min() <= xs.min() and xs.max() <= lx.max()
        off = ys - np.interp(xs, lx, ly)
        assert np.all(np.abs(off) < 5 * np.hypot(ye[used], slope * xe[used]) + 0.05)
        assert line.get_zorder() > std.lines[0].get_zorder()  # the line over the points
        assert line.get_label().startswith(f"{sym} = {slope:+.4f} ± " if sym == "ε" else f"{sym} = {slope:.4f} ± ")
        # every star named beside its point
        fin = np.isfinite(x) & np.isfinite(y)
        assert sorted(t.get_text() for t in ax.texts) == sorted(np.asarray(fit.star_ids)[fin])
        assert_view_fits(ax, np.concatenate([x[fin] - cx, lx]), np.concatenate([y[fin] - cy, ly]), slack=1.5)
        want = ["standard stars", line.get_label()] + (["rejected"] if (~used & fin).any() else [])
        assert sorted(legend_texts(ax.get_legend())) == sorted(want)
        # the residual panel: data minus the fitted line, the fit's own residuals, with both errors projected on y
        rs = series_by_label(axr)
        rx, ry = xy(rs["standard stars"])
        np.testing.assert_allclose(rx + cx, x[used])
        np.testing.assert_allclose(ry, y[used] - (slope * x[used] + zero), atol=1e-12)
        np.testing.assert_allclose(ry, resid[used], atol=1e-9)
        np.testing.assert_allclose(bars(rs["standard stars"])[1], np.hypot(ye[used], slope * xe[used]))
        assert ("rejected" in rs) == bool((~used & fin).any())
        assert axr.get_ylabel() == "data − fit (mag)"
        assert [list(ln.get_ydata()) for ln in axr.lines if ln.get_transform() == axr.get_yaxis_transform()] == [[0.0, 0.0]]
        assert_view_fits(axr, x[fin] - cx, y[fin] - (slope * x[fin] + zero), yerr=np.hypot(ye, slope * xe)[fin])
    x1, y1 = fig.axes[2].get_xlabel(), fig.axes[0].get_ylabel()
    x2, y2 = fig.axes[3].get_xlabel(), fig.axes[1].get_ylabel()
    assert "B − V" in x1 and "V − v" in y1 and "b − v" in x2 and "B − V" in y2
    assert removed_from(x1) == removed_from(y2) == 0.0  # catalogue colours are drawn as they are
    assert fig.get_suptitle() == f"Transformation coefficients from {fit.n_stars} standard stars"


def test_coefficient_figure_of_the_demo_standard_field(demo):
    fig = drawn(coefficient_figure(demo.fit))
    check_coefficient_panels(fig, demo.fit)
    assert_labels_clear(fig)


def test_coefficient_figure_shows_rejected_star_apart():
    fit = invented_standard_fit()
    assert [sid for sid, _ in fit.rejected] == ["F07"] and not fit.used[6]
    # the slopes come back from the invented truth (numbers this test made)
    assert abs(fit.epsilon_v - 0.06) < 0.01 and abs(fit.mu_bv - 0.93) < 0.03
    fig = drawn(coefficient_figure(fit))
    check_coefficient_panels(fig, fit)
    for ax, axr, x, y in ((fig.axes[0], fig.axes[2], fit.x_v, fit.y_v), (fig.axes[1], fig.axes[3], fit.x_bv, fit.y_bv)):
        for panel in (ax, axr):
            series = series_by_label(panel)
            rej, std = series["rejected"], series["standard stars"]
            np.testing.assert_allclose(xy(rej)[0] + removed_from(fig.axes[2 + (ax is fig.axes[1])].get_xlabel()), [x[6]])
            assert xy(std)[0].size == 9
            assert rej.lines[0].get_marker() != std.lines[0].get_marker()
            assert to_hex(rej.lines[0].get_color()) != to_hex(std.lines[0].get_color())
            assert to_hex(rej.lines[0].get_color()) in OKABE_ITO
        np.testing.assert_allclose(xy(series_by_label(ax)["rejected"])[1] + removed_from(ax.get_ylabel()), [y[6]])
    # F07 was read 0.25 mag too faint in v, so its V - v is 0.25 mag too small: its residual shows it
    assert xy(series_by_label(fig.axes[2])["rejected"])[1][0] == pytest.approx(-0.25, abs=0.03)
    assert_labels_clear(fig)


def test_coefficient_figure_says_when_a_constant_was_removed():
    """The invented field's V - v is near -21.3 (an instrumental zero point): the axis reads V - v + 21.3."""
    fit = invented_standard_fit()
    fig = drawn(coefficient_figure(fit))
    ax = fig.axes[0]
    assert ax.get_ylabel() == "V − v + 21.3 (mag; constant removed)"
    _, ys = xy(series_by_label(ax)["standard stars"])
    assert np.all(np.abs(ys) < 0.3)  # hundredths of a magnitude around zero, not -21.3
    lo, hi = sorted(ax.get_ylim())
    assert hi - lo < 0.6
    # b - v of this field lies near 0.3 (already near zero): left as it is, and the label says nothing removed
    assert fig.axes[3].get_xlabel() == "instrumental b − v (mag)"


# --------------------------------------------------------------------------- colour curve


def ballesteros_kk(bv):
    """Ballesteros (2012) T = 4600 K (1/(0.92 (B-V) + 1.7) + 1/(0.92 (B-V) + 0.62)), in kK (from memory)."""
    bv = np.asarray(bv, float)
    return 4.6 * (1.0 / (0.92 * bv + 1.7) + 1.0 / (0.92 * bv + 0.62))


def test_colour_figure_of_the_demo_archive(demo):
    lc = demo.lc
    sel = np.isfinite(lc["bv"].to_numpy())
    d = lc[sel]
    assert len(d) > 100
    fig = drawn(demo_colour_figure(demo))
    assert len(fig.axes) == 2  # against time, and against phase
    found = re.search(r"BJD_TDB − (\d+) \(d\)", fig.axes[0].get_xlabel())
    assert found, fig.axes[0].get_xlabel()  # the time system and unit on the time axis
    t0 = float(found.group(1))
    assert fig.axes[0].get_xlabel() == f"BJD_TDB − {t0:.0f} (d)" and 0 <= d["bjd_tdb"].min() - t0 < 100
    assert fig.axes[1].get_xlabel() == f"phase (period {demo.period_eph:.6f} d)"
    nights = sorted(d["night"].unique())
    xs_of = (d["bjd_tdb"].to_numpy() - t0, np.asarray(demo.phase)[sel])
    for ax, x_all in zip(fig.axes, xs_of):
        assert ax.get_ylabel() == "B − V (mag)"
        series = series_by_label(ax)
        assert sorted(series) == nights
        style = set()
        for night, c in series.items():
            m = (d["night"] == night).to_numpy()
            x, y = xy(c)
            np.testing.assert_allclose(x, x_all[m], atol=1e-9)
            np.testing.assert_allclose(y, d["bv"].to_numpy()[m])
            np.testing.assert_allclose(bars(c)[1], d["bv_err"].to_numpy()[m])
            colour = to_hex(c.lines[0].get_color())
            assert colour in OKABE_ITO
            style.add((colour, c.lines[0].get_marker()))
        assert len(style) == len(nights)
        assert_view_fits(ax, x_all, d["bv"], yerr=d["bv_err"])
        # the temperature scale on the right reads the Ballesteros temperature of the B - V at the same height
        (sec,) = ax.child_axes
        assert "T_eff" in sec.get_ylabel() and "Ballesteros 2012" in sec.get_ylabel() and "(kK)" in sec.get_ylabel()
        for bv in np.quantile(d["bv"], [0.1, 0.5, 0.9]):
            y_parent = ax.transData.transform((0.0, bv))[1]
            y_sec = sec.transData.transform((0.0, float(ballesteros_kk(bv))))[1]
            assert abs(y_parent - y_sec) < 0.5, (bv, y_parent, y_sec)  # pixels
    assert np.all((xs_of[1] >= 0) & (xs_of[1] < 1))
    assert legend_texts(fig.legends[0]) == nights


def test_colour_figure_without_phase_skips_points_without_colour():
    lc = make_lc(n_nights=2, bands=("V",), n_flagged=0)
    rng = np.random.default_rng(8)
    lc["bv"] = 0.35 + 0.1 * rng.standard_normal(len(lc))
    lc["bv_err"] = 0.01
    lc.loc[lc.index[:5], "bv"] = np.nan  # untransformed points: no colour
    fig = drawn(colour_figure(lc))
    assert len(fig.axes) == 1
    ax = fig.axes[0]
    ys = np.concatenate([xy(c)[1] for c in errorbar_series(ax)])
    np.testing.assert_allclose(np.sort(ys), np.sort(lc["bv"].dropna()))
    assert len(ax.child_axes) == 1


# --------------------------------------------------------------------------- colour-magnitude diagram


def check_cmd(fig, field, track) -> None:
    ax, cax = fig.axes  # the diagram and its colour bar
    assert_magnitude_axis(ax)
    assert ax.get_xlabel() == "B − V (mag)" and ax.get_ylabel() == "V (mag)"
    series = series_by_label(ax)
    kinds = {
        "comparison stars": (field["role"] == "comparison") & (field["status"] == "kept"),
        "rejected comparison": (field["role"] == "comparison") & (field["status"] != "kept"),
        "check stars": field["role"] == "check",
    }
    markers, colours = set(), set()
    for label, m in kinds.items():
        sub = field[m]
        assert (label in series) == bool(len(sub)), label
        if not len(sub):
            continue
        c = series[label]
        np.testing.assert_allclose(xy(c)[0], sub["bv"])
        np.testing.assert_allclose(xy(c)[1], sub["V"])
        np.testing.assert_allclose(bars(c, "x")[1], sub["bv_err"])
        np.testing.assert_allclose(bars(c, "y")[1], sub["V_err"])
        markers.add(c.lines[0].get_marker())
        colours.add(to_hex(c.lines[0].get_color()))
    assert len(markers) == len(colours) == sum(bool(m.any()) for m in kinds.values())
    assert colours <= OKABE_ITO
    # every star named beside its point; a rejected comparison star with the reason the ensemble gave
    rejected = kinds["rejected comparison"] & (field["status"] != "rejected")
    names = [f"{s} ({st.replace('_', ' ')})" if r else s for s, st, r in zip(field["star"], field["status"], rejected)]
    assert sorted(t.get_text() for t in ax.texts) == sorted(names)
    # the target's path over the night: points coloured by hours since the first one, with their error bars
    (sc,) = [c for c in ax.collections if isinstance(c, PathCollection)]  # the scatter; bars are LineCollections
    t = track["bjd_tdb"].to_numpy()
    np.testing.assert_allclose(sc.get_offsets(), np.column_stack([track["bv"], track["mag"]]))
    np.testing.assert_allclose(sc.get_array(), (t - t.min()) * 24.0)
    assert sc.get_cmap().name == "cividis"  # a colour map made for colour-blind readers (Nuñez et al. 2018, from memory)
    (path_bars,) = [c for c in errorbar_series(ax) if c.lines[0] is None]
    np.testing.assert_allclose(bars(path_bars, "y")[0], track["mag"])
    np.testing.assert_allclose(bars(path_bars, "y")[1], track["mag_err"])
    np.testing.assert_allclose(bars(path_bars, "x")[1], track["bv_err"])
    assert "hours" in cax.get_ylabel() and "BJD_TDB" in cax.get_ylabel()
    assert sorted(legend_texts(ax.get_legend())) == sorted([k for k, m in kinds.items() if m.any()] + ["target over the night"])
    assert_view_fits(ax, np.concatenate([field["bv"], track["bv"]]), np.concatenate([field["V"], track["mag"]]),
                     xerr=np.concatenate([field["bv_err"], track["bv_err"]]),
                     yerr=np.concatenate([field["V_err"], track["mag_err"]]))


def test_colour_magnitude_figure_of_the_demo_night(demo):
    field, track = demo.field, demo.track
    assert set(field["role"]) == {"comparison", "check"} and len(track) > 50
    fig = drawn(demo_cmd_figure(demo))
    check_cmd(fig, field, track)
    assert fig.axes[0].get_title() == f"{demo.name}, night {demo.last}"


@pytest.mark.parametrize("status", ["rejected", "variable", "catalog_offset"])
def test_colour_magnitude_figure_shows_a_rejected_comparison_apart(demo, status):
    field = demo.field.copy()
    field.loc[field["star"] == "C3", "status"] = status
    fig = drawn(colour_magnitude_figure(field, demo.track))
    check_cmd(fig, field, demo.track)
    ax = fig.axes[0]
    series = series_by_label(ax)
    c3 = field[field["star"] == "C3"]
    rej = series["rejected comparison"]
    np.testing.assert_allclose(xy(rej)[1], c3["V"])
    assert not np.isin(xy(series["comparison stars"])[1], c3["V"]).any()
    assert rej.lines[0].get_marker() == "x" and series["comparison stars"].lines[0].get_marker() == "o"
    assert "rejected comparison" in legend_texts(ax.get_legend())
    note = "C3" if status == "rejected" else f"C3 ({status.replace('_', ' ')})"
    assert note in [t.get_text() for t in ax.texts]


# --------------------------------------------------------------------------- periodogram


def rendered(fig: Figure):
    """Draw ``fig`` with Agg and return its renderer (text extents in pixels)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    fig.canvas.draw()
    return fig.canvas.get_renderer()


def text_box(text, renderer):
    """The extent of a text's own characters (an annotation's leader line left out)."""
    from matplotlib.text import Text

    return Text.get_window_extent(text, renderer)


def test_periodogram_figure_of_the_demo_period(demo):
    res, peaks = demo.res, demo.payload["aliases"][:4]
    fig = demo_periodogram_figure(demo)
    renderer = rendered(fig)
    assert len(fig.axes) == 2  # periodogram, and the PDM statistic on the same grid
    ax, axt = fig.axes
    freq, power = np.asarray(res.freq), np.asarray(res.power)
    curve = ax.lines[0]
    np.testing.assert_allclose(curve.get_xdata(), freq)
    np.testing.assert_allclose(curve.get_ydata(), power)
    assert to_hex(curve.get_color()) in OKABE_ITO
    lo, hi = ax.get_ylim()
    assert lo == 0 and power.max() <= hi < 1.3 * power.max()
    # the frequency axis is the searched range, edge to edge: no margins
    assert ax.get_xlim() == pytest.approx((1 / res.grid["max_period"], 1 / res.grid["min_period"]), rel=1e-12)
    assert ax.get_xlim() == (freq.min(), freq.max())
    assert ax.get_ylabel() == "normalised power" and axt.get_xlabel() == "frequency (cycles per day)"
    # false-alarm levels: one horizontal line each, at the power it needs, named in the right margin
    fap_texts = {t.get_text(): t for t in ax.texts if t.get_text().startswith("FAP ")}
    assert sorted(fap_texts) == sorted(f"FAP {fap:g}" for fap in res.fap_levels)
    right = ax.get_window_extent(renderer).x1
    for fap, level in res.fap_levels.items():
        (line,) = labelled_lines(ax, f"false-alarm probability {fap:g}")
        assert list(line.get_ydata()) == [level, level]
        assert text_box(fap_texts[f"FAP {fap:g}"], renderer).x0 > right  # beside the panel, not on the curve
    assert len({ln.get_linestyle() for ln in ax.lines if ln.get_label().startswith("false-alarm")}) == len(res.fap_levels)
    # the adopted period is what the marked peak's note prints: the refined one the result reports
    assert peaks[0]["relation"] == "best"
    (best,) = labelled_lines(ax, "adopted period")
    assert best.get_xdata()[0] == peaks[0]["frequency"] and best.get_ydata()[0] == peaks[0]["power"]
    assert best.get_ydata()[0] == pytest.approx(power.max())
    assert abs(best.get_xdata()[0] - freq[np.argmax(power)]) < 0.01  # refined, within a grid step or so
    others = labelled_lines(ax, "other strong peaks")
    assert sorted(float(ln.get_xdata()[0]) for ln in others) == sorted(p["frequency"] for p in peaks[1:])
    assert best.get_marker() != others[0].get_marker()
    assert to_hex(best.get_color()) in OKABE_ITO and to_hex(others[0].get_color()) in OKABE_ITO
    notes = [t for t in ax.texts if not t.get_text().startswith("FAP ")]
    assert len(notes) == len(peaks)
    assert notes[0].get_text() == f"adopted\n{period_text(res.period)}"
    grid_period = f"{1 / res.aliases.best_frequency:.7f}"
    if grid_period != f"{res.period:.7f}":  # the grid's value would be a different number
        assert grid_period not in notes[0].get_text()
    for p, note in zip(peaks[1:], notes[1:]):
        assert f"P = {1 / p['frequency']:.5f} d" in note.get_text()
    # every drawn text of the panel stands clear of every other
    boxes = [(t.get_text(), text_box(t, renderer)) for t in ax.texts]
    for i, (ta, a) in enumerate(boxes):
        for tb, b in boxes[i + 1:]:
            assert not a.overlaps(b), (ta, tb)
    assert ax.get_legend() is None  # every marker carries its note, every level its name
    assert fig.get_suptitle() == f"{demo.name}: {demo.star}\n{res.method}; adopted {period_text(res.period, res.period_err)}"
    # the PDM panel: theta on the same grid, the adopted frequency marked, lower is better
    np.testing.assert_allclose(axt.lines[0].get_xdata(), freq)
    np.testing.assert_allclose(axt.lines[0].get_ydata(), res.theta)
    assert "PDM" in axt.get_ylabel() and "lower is better" in axt.get_ylabel()
    assert [ln.get_xdata()[0] for ln in axt.lines[1:]] == [1 / res.period]
    assert ax.get_xlim() == axt.get_xlim()


def test_periodogram_figure_alone():
    freq = np.linspace(0.1, 6.0, 600)
    power = 0.9 * np.exp(-0.5 * ((freq - 2.5) / 0.01) ** 2) + 0.02
    fig = drawn(periodogram_figure(freq, power, best_frequency=freq[np.argmax(power)]))
    assert len(fig.axes) == 1
    ax = fig.axes[0]
    assert len(ax.lines) == 1 and ax.get_xlabel() == "frequency (cycles per day)"
    assert ax.get_ylabel() == "power (generalised Lomb–Scargle)" and ax.get_ylim()[0] == 0
    assert ax.get_xlim() == (0.1, 6.0)
    assert ax.get_legend() is None and not ax.texts


# --------------------------------------------------------------------------- phased light curve


def test_phased_figure_of_the_demo_period(demo):
    res, lc, resid = demo.res, demo.lcp, demo.resid
    fig = drawn(demo_phased_figure(demo))
    assert len(fig.axes) == 2
    ax, axr = fig.axes
    assert_magnitude_axis(ax)
    assert_magnitude_axis(axr)  # positive residual = fainter than the fit, drawn down like the data
    assert ax.get_ylabel() == "magnitude" and axr.get_ylabel() == "data − fit (mag)"
    xlabel = axr.get_xlabel()
    shown = period_text(res.period, res.period_err)
    assert shown == f"P = {res.period:.7f} ± {res.period_err:.7f} d"
    assert f"({shown}, epoch BJD_TDB {res.epoch:.5f})" in xlabel and "two cycles" in xlabel
    # the title prints the period exactly as the axis does
    assert fig.get_suptitle() == f"{demo.name}: {demo.star}\n{shown}, phase 0 at {res.epoch_kind} light"
    assert len(re.findall(r"\d+\.\d+", shown)) == 2 and re.findall(r"P = [\d.]+", fig.get_suptitle()) == re.findall(
        r"P = [\d.]+", xlabel)
    bands = sorted(lc["band"].unique())
    assert bands == ["B", "V"]
    phase = np.mod((lc["bjd_tdb"].to_numpy() - res.epoch) / res.period, 1.0)
    main, rest = errorbar_series(ax), errorbar_series(axr)
    assert len(main) == len(rest) == 2 * len(bands)  # each band twice: two cycles
    styles = set()
    for k, band in enumerate(bands):
        m = (lc["band"] == band).to_numpy()
        for j, shift in enumerate((0.0, 1.0)):
            c, r = main[2 * k + j], rest[2 * k + j]
            np.testing.assert_allclose(xy(c)[0], phase[m] + shift)
            np.testing.assert_allclose(xy(c)[1], lc["mag"].to_numpy()[m])
            np.testing.assert_allclose(bars(c)[1], lc["mag_err"].to_numpy()[m])
            np.testing.assert_allclose(xy(r)[0], phase[m] + shift)
            np.testing.assert_allclose(xy(r)[1], resid[m])
            np.testing.assert_allclose(bars(r)[1], lc["mag_err"].to_numpy()[m])
            assert to_hex(c.lines[0].get_color()) == to_hex(r.lines[0].get_color())
        styles.add((to_hex(main[2 * k].lines[0].get_color()), main[2 * k].lines[0].get_marker()))
        # the model drawn over both cycles, and the data minus that curve are the residuals drawn below
        model_lines = [ln for ln in ax.lines if to_hex(ln.get_color()) == "#000000"][2 * k: 2 * k + 2]
        # the model is drawn over the points, on a white halo that keeps it visible through them
        for ln in model_lines:
            assert ln.get_zorder() > max(c.lines[0].get_zorder() for c in main)
            assert ln.get_zorder() > max(bar.get_zorder() for c in main for bar in c.lines[2])
            effects = ln.get_path_effects()
            assert effects and to_hex(effects[0]._gc["foreground"]) == "#ffffff"
            assert effects[0]._gc["linewidth"] > ln.get_linewidth()
        px, py = (np.asarray(a, float) for a in (model_lines[0].get_xdata(), model_lines[0].get_ydata()))
        np.testing.assert_allclose(np.asarray(model_lines[1].get_xdata()), px + 1.0)
        np.testing.assert_allclose(np.asarray(model_lines[1].get_ydata()), py)
        drawn_resid = lc["mag"].to_numpy()[m] - np.interp(phase[m], px, py, period=1.0)
        assert np.median(np.abs(drawn_resid - resid[m])) < 0.003, band  # mag; the model grid's interpolation
        # a curve drawn shifted by a tenth of a cycle would not match
        shifted = lc["mag"].to_numpy()[m] - np.interp(phase[m] + 0.1, px, py, period=1.0)
        assert np.median(np.abs(shifted - resid[m])) > 0.03
    assert len(styles) == len(bands) and {s[0] for s in styles} <= OKABE_ITO
    assert legend_texts(ax.get_legend()) == bands + ["fitted model"]
    assert_view_fits(ax, np.concatenate([phase, phase + 1.0]), np.tile(lc["mag"].to_numpy(), 2),
                     yerr=np.tile(lc["mag_err"].to_numpy(), 2))
    zero = [ln for ln in axr.lines if ln.get_transform() == axr.get_yaxis_transform()]  # lines across the panel
    assert [list(ln.get_ydata()) for ln in zero] == [[0.0, 0.0]]  # the zero line of the residuals


def test_phased_figure_names_the_model_when_only_a_later_band_has_one():
    lc = make_lc(n_nights=2, n_flagged=0)
    ph = np.linspace(0, 1, 100, endpoint=False)
    model = {"V": (ph, 13.05 + 0.3 * np.sin(2 * np.pi * ph))}  # B (the first band) has no model
    fig = phased_figure(lc, period=0.46173, epoch=2461295.65, model=model, residuals=np.zeros(len(lc)))
    assert sorted(legend_texts(fig.axes[0].get_legend())) == ["B", "V", "fitted model"]


# --------------------------------------------------------------------------- O - C diagram


def assert_oc_view(ax, cycle, oc_min, err_min) -> None:
    """The view holds the timings with their bars, the zero line and the ephemeris curves, and little else."""
    curves = [ln for ln in ax.lines if ln.get_label().endswith(" ephemeris")]
    xs = np.concatenate([cycle] + [np.asarray(ln.get_xdata(), float) for ln in curves])
    ys = np.concatenate([oc_min, [0.0]] + [np.asarray(ln.get_ydata(), float) for ln in curves])
    assert_view_fits(ax, xs, ys, yerr=np.concatenate([err_min, np.zeros(ys.size - cycle.size)]))


def test_oc_figure_of_the_demo_timings(demo):
    timed = demo.timed
    cycle, oc, err, types = (np.asarray(a, dtype=object) for a in oc_inputs(timed))
    cycle, oc, err = (a.astype(float) for a in (cycle, oc, err))
    bands = np.asarray([t["band"] for t in timed["timings"]])
    assert len(cycle) >= 4 and set(types) == {"maximum"} and set(bands) == {"B", "V"}
    assert all(t["in_fit"] for t in timed["timings"])  # the demo's timings all agree
    fig = drawn(demo_oc_figure(demo))
    assert len(fig.axes) == 1
    ax = fig.axes[0]
    assert ax.get_xlabel() == "cycle number E" and ax.get_ylabel() == "O − C (min)"
    assert "BJD_TDB" in ax.get_title(loc="left")
    series = series_by_label(ax)
    assert sorted(series) == ["maximum, B", "maximum, V"]
    for band in ("B", "V"):
        c, m = series[f"maximum, {band}"], bands == band
        np.testing.assert_allclose(xy(c)[0], cycle[m])
        np.testing.assert_allclose(xy(c)[1], oc[m] * 1440.0)  # days in the result, minutes on the axis
        np.testing.assert_allclose(bars(c)[1], err[m] * 1440.0)
    # the linear ephemeris fitted to these timings runs through them
    (lin,) = labelled_lines(ax, "linear ephemeris")
    at = np.interp(cycle, np.asarray(lin.get_xdata()), np.asarray(lin.get_ydata()))
    assert abs(np.median(oc * 1440.0 - at)) < 3 * np.median(err * 1440.0)
    assert_oc_view(ax, cycle, oc * 1440.0, err * 1440.0)
    assert legend_texts(ax.get_legend()) == [f"maximum ({len(cycle)})", "B", "V", "linear ephemeris"]
    assert not labelled_lines(ax, "left out of the fit")


def test_oc_figure_tells_timing_types_apart_and_draws_both_ephemerides():
    """Invented eclipse timings (seed 31): primaries at whole cycles, secondaries at half cycles, against a
    reference ephemeris whose epoch is 0.00045 d early and period 5e-6 d short."""
    from varstar.timings import fit_ephemeris

    rng = np.random.default_rng(31)
    t0_ref, p_ref = 2461300.1230, 1.2345678
    t0_true, p_true = t0_ref + 0.00045, p_ref + 5e-6
    e_prim = np.sort(rng.choice(np.arange(0, 401), 24, replace=False)).astype(float)
    e_sec = np.sort(rng.choice(np.arange(0, 400), 12, replace=False)) + 0.5
    cycle = np.concatenate([e_prim, e_sec])
    types = ["primary"] * e_prim.size + ["secondary"] * e_sec.size
    err = np.full(cycle.size, 0.0002)
    times = t0_true + p_true * cycle + rng.normal(0, 0.0002, cycle.size)
    oc = times - (t0_ref + p_ref * cycle)
    fit = fit_ephemeris(cycle, times, err, kind="minimum").to_dict()
    fig = drawn(oc_figure(cycle, oc, err, types, fit=dict(fit, reference={"epoch": t0_ref, "period": p_ref}),
                          reference=f"T0 = {t0_ref:.5f}, P = {p_ref:.7f} d (BJD_TDB)"))
    ax = fig.axes[0]
    series = series_by_label(ax)
    assert sorted(series) == ["primary (24)", "secondary (12)"]
    prim, sec = series["primary (24)"], series["secondary (12)"]
    for c, m in ((prim, slice(0, 24)), (sec, slice(24, None))):
        np.testing.assert_allclose(xy(c)[0], cycle[m])
        np.testing.assert_allclose(xy(c)[1], oc[m] * 1440.0)
        np.testing.assert_allclose(bars(c)[1], err[m] * 1440.0)
        assert to_hex(c.lines[0].get_color()) in OKABE_ITO
    assert ax.get_ylabel() == "O − C (min)"
    assert prim.lines[0].get_marker() != sec.lines[0].get_marker()
    assert to_hex(prim.lines[0].get_color()) != to_hex(sec.lines[0].get_color())
    assert to_hex(sec.lines[0].get_markerfacecolor()) == "#ffffff"  # secondaries hollow
    assert to_hex(prim.lines[0].get_markerfacecolor()) == to_hex(prim.lines[0].get_color())
    # the fitted linear ephemeris, relative to the reference, has the invented truth's offset and slope
    (lin,) = labelled_lines(ax, "linear ephemeris")
    lx, ly = np.asarray(lin.get_xdata(), float), np.asarray(lin.get_ydata(), float)
    slope = np.polyfit(lx, ly, 1)
    assert slope[0] == pytest.approx(5e-6 * 1440.0, abs=0.002)  # minutes per cycle
    assert slope[1] == pytest.approx(0.00045 * 1440.0, abs=0.3)  # minutes at E = 0
    assert lx.min() == cycle.min() and lx.max() == cycle.max()
    assert len(labelled_lines(ax, "quadratic ephemeris")) == 1
    assert sorted(legend_texts(ax.get_legend())) == ["linear ephemeris", "primary (24)", "quadratic ephemeris",
                                                     "secondary (12)"]
    assert_oc_view(ax, cycle, oc * 1440.0, err * 1440.0)


# --------------------------------------------------------------------------- pixels


def png_rgb(fig: Figure, path) -> np.ndarray:
    save(fig, path)
    return imread(path)[..., :3]


def chromatic(rgb: np.ndarray) -> np.ndarray:
    """Pixels with a colour of their own: axes, text, grid and the white ground are all grey (r = g = b)."""
    return (rgb.max(axis=-1) - rgb.min(axis=-1)) > 0.25


DEMO_FIGURES = {
    "lightcurve": (demo_lightcurve_figure, PALETTE[0]),  # the first night
    "colour": (demo_colour_figure, PALETTE[0]),
    "colour_magnitude": (demo_cmd_figure, PALETTE[0]),  # comparison stars
    "periodogram": (demo_periodogram_figure, PALETTE[0]),  # the power curve
    "phased": (demo_phased_figure, PALETTE[0]),  # the first band
    "oc": (demo_oc_figure, PALETTE[0]),  # times of maximum in B (the first band)
}


@pytest.mark.parametrize("name", sorted(DEMO_FIGURES) + ["coefficients"])
def test_saved_png_shows_the_drawn_data(demo, name, tmp_path):
    if name == "coefficients":
        fig, colour = coefficient_figure(demo.fit), PALETTE[0]
    else:
        make, colour = DEMO_FIGURES[name]
        fig = make(demo)
    rgb = png_rgb(fig, tmp_path / f"{name}.png")
    w, h = fig.get_size_inches()
    assert rgb.shape == (round(h * 120), round(w * 120), 3)
    assert rgb.std() > 0.05
    n_colour = int(chromatic(rgb).sum())
    assert n_colour > 300, n_colour
    # the data's own colour is on the image (the tolerance allows for markers drawn with alpha 0.8-0.9 on white)
    near = np.linalg.norm(rgb - np.asarray(to_rgb(colour)), axis=-1) < 0.2
    assert near.sum() > 50, near.sum()


def test_png_check_tells_an_empty_figure_from_a_drawn_one(tmp_path):
    empty = make_lc(n_nights=1).iloc[:0]
    rgb = png_rgb(lightcurve_figure(empty), tmp_path / "empty.png")
    assert rgb.std() > 0.01  # the frame, ticks and text are there...
    assert chromatic(rgb).sum() == 0  # ...but nothing coloured: no data
    blank = png_rgb(Figure(), tmp_path / "blank.png")
    assert blank.std() == 0
    drawn_rgb = png_rgb(lightcurve_figure(make_lc(n_nights=1)), tmp_path / "one-night.png")
    assert chromatic(drawn_rgb).sum() > 300
