"""Tests of what the figures draw for the questions a reader asks of them.

- A night's light curve: what UT hour a point was taken (a secondary axis on
  top, from the light curve's ``jd_utc``).
- The periodogram: which way the PDM statistic is better, and peak notes that
  do not print over each other.
- The O − C diagram: which band a timing is from, and whether its two
  estimates disagree.

Invented data only (fixed seeds).  Conventions checked are common practice in
the trade: a Julian day starts at noon UT, so 0 h UT is at JD n + 0.5 (from
memory); BJD_TDB − JD(UTC) is the TT − UTC offset (69.184 s since 2017, from
memory) plus the light time across the Earth's orbit (up to about ±500 s,
common practice), nearly constant over a night.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_hex
from matplotlib.container import ErrorbarContainer

from varstar.plots import PALETTE, TIMING_STYLE, lightcurve_figure, oc_figure, periodogram_figure, timings_figure

OKABE_ITO = {"#000000", "#e69f00", "#56b4e9", "#009e73", "#f0e442", "#0072b2", "#d55e00", "#cc79a7"}


def night_lc(jd_start: float = 2461295.40, n: int = 40, bands=("V", "B"), with_jd_utc: bool = True,
             nights: int = 1, seed: int = 3) -> pd.DataFrame:
    """Invented nights of a star: JD(UTC) from ``jd_start`` over 0.2 d, BJD_TDB = JD(UTC) + 69.184 s + light time."""
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(nights):
        for b in bands:
            jd = jd_start + 2 * k + np.sort(rng.uniform(0, 0.2, n))
            light_s = 310.0 + 2.0 * (jd - jd_start)  # seconds; drifts slowly over a night
            bjd = jd + (69.184 + light_s) / 86400.0
            mag = 13.0 + 0.3 * np.sin(2 * np.pi * bjd / 0.46173) + rng.normal(0, 0.005, n)
            for i in range(n):
                rows.append(dict(bjd_tdb=bjd[i], jd_utc=jd[i], band=b, star="V1", mag=mag[i], mag_err=0.005,
                                 night=f"2026-09-{11 + 2 * k:02d}", quality=0))
    lc = pd.DataFrame(rows).sort_values(["bjd_tdb", "band"]).reset_index(drop=True)
    return lc if with_jd_utc else lc.drop(columns="jd_utc")


def drawn(fig):
    fig.draw_without_rendering()
    return fig


# --------------------------------------------------------------------------- a night's UT hours


def test_one_night_has_a_ut_axis_on_top_that_reads_each_points_ut_hour():
    # the night runs over 0 h UT (JD 2461295.5): 21.6 h to 2.4 h
    lc = night_lc()
    fig = drawn(lightcurve_figure(lc, title="one night"))
    assert len(fig.axes) == 2  # one panel per band, as before
    top = fig.axes[0]
    (sec,) = top.child_axes
    assert sec.get_xlabel() == "UT (hours)"
    assert sec.xaxis.get_label_position() == "top"
    assert all(not ax.child_axes for ax in fig.axes[1:])  # one UT axis, on the top panel
    assert "BJD_TDB" in fig.axes[-1].get_xlabel()  # the main axis keeps the barycentric time
    t0 = float(fig.axes[-1].get_xlabel().split("−")[1].split("(")[0])
    # each point's UT hour, counted from the UT midnight before the first point, sits at the point's pixel
    midnight = np.floor(lc["jd_utc"].min() - 0.5) + 0.5
    for _, r in lc.iloc[[0, len(lc) // 2, -1]].iterrows():
        x_main = top.transData.transform((r["bjd_tdb"] - t0, 0.0))[0]
        x_ut = sec.transData.transform(((r["jd_utc"] - midnight) * 24.0, 0.0))[0]
        assert abs(x_main - x_ut) < 0.5, (r["jd_utc"], x_main, x_ut)  # pixels
    # tick labels are hours of the day: past midnight they restart at 0
    labels = [t.get_text() for t in sec.xaxis.get_ticklabels() if t.get_text()]
    hours = [float(t) for t in labels]
    assert hours and all(0 <= h < 24 for h in hours), labels
    assert any(h < 3 for h in hours) and any(h > 21 for h in hours), labels


def test_ut_axis_is_left_out_without_jd_utc_and_for_many_nights():
    alone = drawn(lightcurve_figure(night_lc(with_jd_utc=False)))
    assert all(not ax.child_axes for ax in alone.axes)
    gaps = night_lc()
    gaps["jd_utc"] = np.nan  # the column, but no values
    assert all(not ax.child_axes for ax in drawn(lightcurve_figure(gaps)).axes)
    many = drawn(lightcurve_figure(night_lc(nights=3)))
    assert all(not ax.child_axes for ax in many.axes)


# --------------------------------------------------------------------------- periodogram


def close_peaks_periodogram():
    """Three strong peaks 0.03 c/d apart (under 1 % of the 0.5-5 c/d axis) and one far off."""
    freq = np.linspace(0.5, 5.0, 4000)
    centres, heights = (2.17, 2.20, 2.23, 4.50), (0.90, 0.86, 0.88, 0.40)
    power = 0.02 + sum(h * np.exp(-0.5 * ((freq - c) / 0.004) ** 2) for c, h in zip(centres, heights))
    peaks = [{"frequency": 2.20, "power": 0.86, "relation": "best"},
             {"frequency": 2.17, "power": 0.90, "relation": "alias +1/30 d"},
             {"frequency": 2.23, "power": 0.88, "relation": "alias −1/30 d"},
             {"frequency": 4.50, "power": 0.40, "relation": "harmonic"}]
    theta = 1.0 - 0.8 * power
    return periodogram_figure(freq, power, best_frequency=2.20, peaks=peaks, theta=theta, title="close peaks")


def test_pdm_panel_says_lower_is_better():
    fig = drawn(close_peaks_periodogram())
    assert len(fig.axes) == 2
    ylabel = fig.axes[1].get_ylabel()
    assert "PDM" in ylabel and "lower is better" in ylabel


def test_peak_notes_do_not_print_over_each_other():
    fig = close_peaks_periodogram()
    FigureCanvasAgg(fig)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    ax = fig.axes[0]
    notes = list(ax.texts)
    assert len(notes) == 4
    boxes = [t.get_window_extent(renderer) for t in notes]
    for (i, a), (j, b) in itertools.combinations(enumerate(boxes), 2):
        assert not a.overlaps(b), (notes[i].get_text(), notes[j].get_text(), a, b)
    # the three close notes stand in three rows, all above their peaks; the far one just above its own peak
    bottoms = [b.y0 for b in boxes]
    assert len({round(y) for y in bottoms[:3]}) == 3
    for t, b in zip(notes, boxes):
        x_peak, y_peak = ax.transData.transform(t.xy)
        assert b.y0 > y_peak and 0 <= b.x0 - x_peak < 10, (t.get_text(), b, x_peak, y_peak)  # starts at its peak
    assert boxes[3].y0 - ax.transData.transform(notes[3].xy)[1] < 15  # pixels: not raised for nothing
    # each note is the note of its own peak
    assert [t.xy[0] for t in notes] == [2.20, 2.17, 2.23, 4.50]
    assert [t.get_text().split("\n")[0] for t in notes] == ["best", "alias +1/30 d", "alias −1/30 d", "harmonic"]


# --------------------------------------------------------------------------- O - C


def band_timings(seed: int = 17):
    """Invented times of maximum in B and V over 300 cycles (seed 17), three with disagreeing estimates."""
    rng = np.random.default_rng(seed)
    cycle = np.sort(rng.choice(np.arange(0, 300), 16, replace=False)).astype(float)
    bands = np.array(["V", "B"] * 8)
    err = np.full(cycle.size, 0.0008)
    oc = 0.002 + 1e-5 * cycle + rng.normal(0, 0.0008, cycle.size) + np.where(bands == "B", 0.001, 0.0)
    disagree = np.zeros(cycle.size, bool)
    disagree[[2, 7, 11]] = True
    return cycle, oc, err, ["maximum"] * cycle.size, bands, disagree


def errorbar_series(ax):
    return [c for c in ax.containers if isinstance(c, ErrorbarContainer)]


def test_oc_tells_bands_apart_and_marks_disagreeing_estimates():
    cycle, oc, err, types, bands, disagree = band_timings()
    fig = drawn(oc_figure(cycle, oc, err, types, bands=list(bands), disagree=list(disagree), title="bands"))
    ax = fig.axes[0]
    series = errorbar_series(ax)
    assert len(series) == 2  # one series per band (one type here)
    colours, markers = {}, set()
    for c in series:
        line = c.lines[0]
        x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
        (band,) = set(bands[np.isin(cycle, x)])
        m = bands == band
        np.testing.assert_allclose(x, cycle[m])
        np.testing.assert_allclose(y, oc[m] * 1440.0)  # minutes, as the axis says
        assert c.has_yerr
        colours[band] = to_hex(line.get_color())
        markers.add(line.get_marker())
    assert colours["B"] != colours["V"] and set(colours.values()) <= OKABE_ITO
    assert markers == {TIMING_STYLE["maximum"][0]}  # the marker still tells the type
    # the disagreeing timings ringed: a hollow marker of its own, at exactly those timings
    (ring,) = [ln for ln in ax.lines if ln.get_label() == "estimates disagree"]
    np.testing.assert_allclose(ring.get_xdata(), cycle[disagree])
    np.testing.assert_allclose(ring.get_ydata(), oc[disagree] * 1440.0)
    assert ring.get_markerfacecolor() == "none"
    assert ring.get_marker() not in {m for m, _ in TIMING_STYLE.values()} or ring.get_markersize() > 10
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert texts == ["maximum (16)", "B", "V", "estimates disagree"]
    # the legend's band entries carry the band's colour
    for handle, text in zip(ax.get_legend().legend_handles, texts):
        if text in ("B", "V"):
            assert to_hex(handle.get_facecolor()) == colours[text]
    assert ax.get_ylabel() == "O − C (minutes)"


def test_oc_without_bands_or_disagreement_draws_no_band_entries():
    cycle, oc, err, types, bands, _ = band_timings()
    fig = drawn(oc_figure(cycle, oc, err, types, disagree=[False] * cycle.size))
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["maximum (16)"]
    assert not [ln for ln in ax.lines if ln.get_label() == "estimates disagree"]
    (c,) = errorbar_series(ax)
    assert to_hex(c.lines[0].get_color()) == to_hex(TIMING_STYLE["maximum"][1])


def test_timings_figure_passes_band_and_disagreement():
    cycle, oc, err, types, bands, disagree = band_timings()
    p, t0 = 0.46173, 2461295.6
    rows = [dict(cycle=float(e), o_minus_c=float(d), err=float(s), type=t, band=str(b), disagree=bool(x),
                 bjd_tdb=t0 + p * e + d)
            for e, d, s, t, b, x in zip(cycle, oc, err, types, bands, disagree)]
    timed = {"timings": rows, "ephemeris": {"epoch": t0, "period": p, "kind": "maximum"}, "fit": None}
    fig = drawn(timings_figure(timed, "Invented star: O − C"))
    ax = fig.axes[0]
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "B" in texts and "V" in texts and "estimates disagree" in texts
    (ring,) = [ln for ln in ax.lines if ln.get_label() == "estimates disagree"]
    np.testing.assert_allclose(ring.get_xdata(), cycle[disagree])
    assert {to_hex(c.lines[0].get_color()) for c in errorbar_series(ax)} == {to_hex(PALETTE[0]), to_hex(PALETTE[1])}


@pytest.mark.parametrize("band", ["V", "$x^$"])
def test_oc_band_names_are_drawn_as_written(band):
    cycle, oc, err, types, _, _ = band_timings()
    fig = oc_figure(cycle, oc, err, types, bands=[band] * cycle.size)
    texts = fig.axes[0].get_legend().get_texts()
    assert band in [t.get_text() for t in texts]
    assert all(t.get_parse_math() is False for t in texts)
