"""Tests of varstar.plots: the light-curve figure and saving it.

Conventions checked (common practice in the trade): magnitude axes are
inverted (brighter up), every point has its error bar, axes name the band, the
unit and the time system.  Colours: the Okabe & Ito (2008) colour-blind-safe
palette (black #000000, orange #E69F00, sky blue #56B4E9, bluish green #009E73,
yellow #F0E442, blue #0072B2, vermillion #D55E00, reddish purple #CC79A7; from
memory), nights told apart by colour *and* marker.  File signatures: PNG
(ISO/IEC 15948: 89 50 4E 47 0D 0A 1A 0A), PDF ("%PDF-").
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex, to_rgb
from matplotlib.container import ErrorbarContainer

from varstar.errors import OutputError
from varstar.plots import lightcurve_figure, save

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
    fig.canvas.draw()  # limits and labels as they will be rendered
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
