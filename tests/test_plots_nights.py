"""Tests of :func:`varstar.plots.nights_figure`: the light curve night by night.

What is checked is what a reader takes from the figure: one column per night
(the latest ones, and how many were left out), one row per band with one
inverted magnitude axis shared along the row, each panel's x axis in UT hours
of its night read from the points' ``jd_utc``, the same number of hours in
every panel, error bars, flagged points apart, colours from the Okabe & Ito
(2008) palette, and no legend (rows are labelled by band).

Invented nights only (fixed seeds).  Conventions checked are common practice in
the trade: a Julian day starts at noon UT, so 0 h UT is at JD n + 0.5 (from
memory); BJD_TDB − JD(UTC) is TT − UTC (69.184 s since 2017, from memory) plus
the light time across the Earth's orbit (a few hundred seconds), nearly
constant over a night.
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_hex, to_rgb
from matplotlib.container import ErrorbarContainer

from varstar.errors import InputError
from varstar.plots import PALETTE, nights_figure, save

OKABE_ITO = {"#000000", "#e69f00", "#56b4e9", "#009e73", "#f0e442", "#0072b2", "#d55e00", "#cc79a7"}
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def invented_nights(n_nights: int = 4, bands=("V", "B"), per_night: int = 25, seed: int = 21,
                    first_jd: float = 2461295.40, flagged_night: int | None = 1, with_jd_utc: bool = True,
                    skip=()) -> pd.DataFrame:
    """Nights two days apart, each from JD(UTC) ``first_jd`` + 2k over 0.15-0.25 d (so across 0 h UT at JD n + 0.5).

    Night ``flagged_night`` has its first three points in each band flagged; ``skip`` holds (night index, band)
    pairs left unobserved.
    """
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(n_nights):
        label = f"2026-09-{11 + 2 * k:02d}" if k < 10 else f"2026-10-{k - 9:02d}"
        length = rng.uniform(0.15, 0.25)
        for b in bands:
            if (k, b) in skip:
                continue
            jd = first_jd + 2 * k + np.sort(rng.uniform(0, length, per_night))
            bjd = jd + (69.184 + 310.0 + 2.0 * (jd - first_jd)) / 86400.0
            mag = (13.05 if b == "V" else 13.43) + 0.3 * np.sin(2 * np.pi * bjd / 0.46173)
            err = rng.uniform(0.004, 0.009, per_night)
            q = np.zeros(per_night, dtype=np.uint8)
            if k == flagged_night:
                q[:3] = 1
            for i in range(per_night):
                rows.append(dict(bjd_tdb=bjd[i], jd_utc=jd[i], band=b, star="V1", mag=mag[i] + rng.normal(0, err[i]),
                                 mag_err=err[i], night=label, quality=q[i]))
    lc = pd.DataFrame(rows).sort_values(["bjd_tdb", "band"]).reset_index(drop=True)
    return lc if with_jd_utc else lc.drop(columns="jd_utc")


def drawn(fig):
    fig.draw_without_rendering()
    return fig


def grid(fig, n_rows: int, n_cols: int) -> np.ndarray:
    """The figure's panels as rows (bands) by columns (nights)."""
    assert len(fig.axes) == n_rows * n_cols
    return np.asarray(fig.axes, dtype=object).reshape(n_rows, n_cols)


def series(ax) -> dict[str, ErrorbarContainer]:
    return {c.get_label(): c for c in ax.containers if isinstance(c, ErrorbarContainer)}


def xy(c) -> tuple[np.ndarray, np.ndarray]:
    line = c.lines[0]
    return np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)


def bar_half_lengths(c) -> np.ndarray:
    segs = np.asarray(c.lines[2][-1].get_segments(), float)
    return np.abs(segs[:, 1, 1] - segs[:, 0, 1]) / 2


def ut_hours(jd: np.ndarray) -> np.ndarray:
    """Hours since the UT midnight before the first point (0 h UT at JD n + 0.5)."""
    midnight = np.floor(jd.min() - 0.5) + 0.5
    return (jd - midnight) * 24.0


def test_one_column_per_night_one_row_per_band_with_shared_inverted_magnitudes():
    lc = invented_nights(n_nights=4)
    fig = drawn(nights_figure(lc, title="Invented star, night by night"))
    axes = grid(fig, 2, 4)
    nights = sorted(lc["night"].unique())
    assert [ax.get_title() for ax in axes[0]] == nights  # each night heads its column, in time order
    assert all(ax.get_title() == "" for ax in axes[1])
    for i, band in enumerate(["B", "V"]):
        row = axes[i]
        assert row[0].get_ylabel() == f"{band} (mag)"
        limits = {ax.get_ylim() for ax in row}
        assert len(limits) == 1  # one magnitude scale along the row
        lo, hi = limits.pop()
        assert lo > hi, "magnitude axis must be inverted (bright up)"
        sub = lc[(lc["band"] == band) & (lc["quality"] == 0)]
        # every good point of the band is drawn once, in its night's panel, inside the visible range
        assert hi <= sub["mag"].min() and sub["mag"].max() <= lo
        for ax, night in zip(row, nights):
            (c,) = series(ax).values()
            want = sub[sub["night"] == night]
            np.testing.assert_allclose(xy(c)[1], want["mag"])
            np.testing.assert_allclose(bar_half_lengths(c), want["mag_err"])
    assert fig.get_suptitle() == "Invented star, night by night"
    assert fig.legends == [] and all(ax.get_legend() is None for ax in fig.axes)


def test_x_is_each_nights_ut_hours_and_every_panel_spans_the_same_hours():
    lc = invented_nights(n_nights=3)
    fig = drawn(nights_figure(lc))
    axes = grid(fig, 2, 3)
    assert fig.get_supxlabel() == "UT (hours)"
    widths = set()
    for j, night in enumerate(sorted(lc["night"].unique())):
        whole = lc[lc["night"] == night]
        for i, band in enumerate(["B", "V"]):
            want = whole[(whole["band"] == band) & (whole["quality"] == 0)]
            (c,) = series(axes[i, j]).values()
            # hours counted from the UT midnight before the night's first point, whichever band took it
            np.testing.assert_allclose(xy(c)[0], ut_hours(whole["jd_utc"].to_numpy())[whole.index.get_indexer(want.index)],
                                       atol=1e-9)
            lo, hi = axes[i, j].get_xlim()
            assert lo <= xy(c)[0].min() and xy(c)[0].max() <= hi
        lo, hi = axes[0, j].get_xlim()
        widths.add(round(hi - lo, 9))
    assert len(widths) == 1  # the same hours in every panel: a slope reads the same everywhere
    longest = max(np.ptp(ut_hours(g["jd_utc"].to_numpy())) for _, g in lc.groupby("night"))
    assert longest < widths.pop() < 1.2 * longest


def test_a_night_across_midnight_reads_in_hours_of_the_day():
    lc = invented_nights(n_nights=1, flagged_night=None)  # JD 2461295.40 onwards: 21.6 h UT, over 0 h
    fig = nights_figure(lc)
    FigureCanvasAgg(fig).draw()  # tick labels are made while drawing
    ax = fig.axes[-1]  # the bottom row carries the column's tick labels
    x = xy(next(iter(series(ax).values())))[0]
    assert x.min() < 24 < x.max()  # one continuous axis over midnight...
    labels = [t.get_text() for t in ax.xaxis.get_ticklabels() if t.get_text()]
    hours = [float(t) for t in labels]
    assert hours and all(0 <= h < 24 for h in hours), labels  # ...labelled as hours of the day
    assert any(h < 3 for h in hours) and any(h > 21 for h in hours), labels


def test_only_the_latest_nights_are_drawn_and_the_title_says_how_many_were_left_out():
    lc = invented_nights(n_nights=15, bands=("V",), per_night=6, flagged_night=None)
    nights = sorted(lc["night"].unique(), key=lambda n: lc.loc[lc["night"] == n, "bjd_tdb"].min())
    fig = drawn(nights_figure(lc, title="Invented star", max_nights=12))
    axes = grid(fig, 1, 12)
    assert [ax.get_title() for ax in axes[0]] == nights[-12:]
    assert fig.get_suptitle() == "Invented star\nlatest 12 of 15 nights; 3 earlier nights left out"
    one = drawn(nights_figure(lc, max_nights=14))
    assert one.get_suptitle() == "latest 14 of 15 nights; 1 earlier night left out"
    everything = drawn(nights_figure(lc, max_nights=15))
    assert len(everything.axes) == 15 and everything.get_suptitle() == ""


def test_flagged_points_are_drawn_apart_only_when_asked():
    lc = invented_nights(n_nights=3)
    flagged = lc[lc["quality"] != 0]
    assert len(flagged) == 6 and flagged["night"].nunique() == 1
    night = flagged["night"].iloc[0]
    hidden = drawn(nights_figure(lc))
    assert all("flagged" not in series(ax) for ax in hidden.axes)
    assert "flagged" not in hidden.get_suptitle()
    shown = drawn(nights_figure(lc, show_flagged=True))
    axes = grid(shown, 2, 3)
    col = sorted(lc["night"].unique()).index(night)
    for i, band in enumerate(["B", "V"]):
        bad = series(axes[i, col])["flagged"]
        line = bad.lines[0]
        np.testing.assert_allclose(np.sort(xy(bad)[1]), np.sort(flagged[flagged["band"] == band]["mag"]))
        assert line.get_markerfacecolor() == "none"
        r, g, b = to_rgb(line.get_color())
        assert r == g == b and 0.3 < r < 0.8  # grey
        good = series(axes[i, col])[band]
        assert xy(good)[0].size == 25 - 3
    assert shown.get_suptitle() == "hollow grey: flagged points"


def test_bands_keep_one_okabe_ito_colour_and_marker_across_nights():
    fig = drawn(nights_figure(invented_nights(n_nights=3)))
    axes = grid(fig, 2, 3)
    styles = []
    for i in range(2):
        row = {(to_hex(c.lines[0].get_color()), c.lines[0].get_marker()) for ax in axes[i] for c in series(ax).values()}
        assert len(row) == 1
        styles.append(row.pop())
    assert styles[0] != styles[1] and styles[0][1] != styles[1][1]
    assert {s[0] for s in styles} <= OKABE_ITO
    assert styles[0][0] == to_hex(PALETTE[0])  # B, the first band, as in the phased figure


def test_without_jd_utc_hours_run_from_each_nights_first_point_in_bjd_tdb():
    lc = invented_nights(n_nights=2, with_jd_utc=False, flagged_night=None)
    fig = drawn(nights_figure(lc))
    assert fig.get_supxlabel() == "hours since the night's first point (BJD_TDB)"
    axes = grid(fig, 2, 2)
    for j, night in enumerate(sorted(lc["night"].unique())):
        whole = lc[lc["night"] == night]
        t_first = whole["bjd_tdb"].min()
        for i, band in enumerate(["B", "V"]):
            want = whole[whole["band"] == band]
            (c,) = series(axes[i, j]).values()
            np.testing.assert_allclose(xy(c)[0], (want["bjd_tdb"] - t_first) * 24.0, atol=1e-9)
        assert min(xy(c)[0].min() for ax in axes[:, j] for c in series(ax).values()) == pytest.approx(0.0, abs=1e-9)


def test_a_night_seen_in_one_band_keeps_its_empty_panel_and_says_so():
    lc = invented_nights(n_nights=3, skip={(2, "B")}, flagged_night=None)
    fig = drawn(nights_figure(lc))
    axes = grid(fig, 2, 3)
    assert not series(axes[0, 2]) and [t.get_text() for t in axes[0, 2].texts] == ["no B points"]
    assert series(axes[1, 2])  # V was observed


def test_empty_light_curve_and_a_bad_max_nights(tmp_path):
    empty = invented_nights(n_nights=1).iloc[:0]
    fig = nights_figure(empty, title="nothing yet")
    assert len(fig.axes) == 1 and [t.get_text() for t in fig.axes[0].texts] == ["no observations"]
    save(fig, tmp_path / "empty.png")
    assert (tmp_path / "empty.png").read_bytes()[:8] == PNG_MAGIC
    with pytest.raises(InputError, match="max_nights"):
        nights_figure(invented_nights(n_nights=1), max_nights=0)


def test_nights_of_the_demo_archive(demo_archive_path, tmp_path):
    from varstar.workflows.archive import open_archive

    path = tmp_path / "demo.h5"
    shutil.copyfile(demo_archive_path, path)
    lc = open_archive(path).lightcurve(include_flagged=True)
    nights = sorted(lc["night"].unique())
    assert len(nights) == 6 and lc["quality"].ne(0).any()
    fig = drawn(nights_figure(lc, title="demo", show_flagged=True))
    axes = grid(fig, 2, 6)
    assert [ax.get_title() for ax in axes[0]] == nights
    for i, band in enumerate(["B", "V"]):
        sub = lc[lc["band"] == band]
        drawn_n = sum(xy(c)[0].size for ax in axes[i] for c in series(ax).values())
        assert drawn_n == len(sub)  # every point, good or flagged, once
        lo, hi = axes[i, 0].get_ylim()
        assert lo > hi and hi <= sub["mag"].min() and sub["mag"].max() <= lo
    save(fig, tmp_path / "nights.png")
    data = (tmp_path / "nights.png").read_bytes()
    w, h = fig.get_size_inches()
    assert data[:8] == PNG_MAGIC
    assert (int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")) == (round(w * 120), round(h * 120))


@pytest.mark.filterwarnings("ignore:Glyph .* missing from:UserWarning")
def test_night_labels_and_title_are_drawn_as_written(tmp_path):
    lc = invented_nights(n_nights=2, flagged_night=None)
    lc["night"] = lc["night"].map({"2026-09-11": "$x^$ night", "2026-09-13": "50% \\$"})
    fig = nights_figure(lc, title="Star $x^$ in Cyg")
    titles = [ax.get_title() for ax in fig.axes[:2]]
    assert titles == ["$x^$ night", "50% \\$"]
    assert all(not ax.title.get_parse_math() for ax in fig.axes)
    save(fig, tmp_path / "n.png")  # mathtext would fail on "$x^$"
    assert (tmp_path / "n.png").read_bytes()[:8] == PNG_MAGIC
