"""Tests of what the figures draw for the questions a reader asks of them.

- A night's light curve: what UT hour a point was taken (a secondary axis on
  top, from the light curve's ``jd_utc``).
- The periodogram: which way the PDM statistic is better, peak notes that
  do not print over each other, which period was adopted (the refined one, or
  twice the peak's), false-alarm levels whose names can be read, and a
  frequency axis that is the searched range.
- The O − C diagram: which band a timing is from, whether its two estimates
  disagree, and whether the ephemeris fit used it.
- Every figure: no legend of a single entry (its words go to a title or
  an axis label).

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

from varstar.plots import (
    PALETTE,
    TIMING_STYLE,
    colour_figure,
    colour_magnitude_figure,
    lightcurve_figure,
    nights_figure,
    oc_figure,
    periodogram_figure,
    phased_figure,
    timings_figure,
)

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
    for t, b in zip(notes[:3], boxes[:3]):
        x_peak, y_peak = ax.transData.transform(t.xy)
        assert b.y0 > y_peak and 0 <= b.x0 - x_peak < 10, (t.get_text(), b, x_peak, y_peak)  # starts at its peak
    # the note of the peak near the right edge runs leftwards and ends at its peak, inside the panel
    x_peak, y_peak = ax.transData.transform(notes[3].xy)
    assert boxes[3].y0 > y_peak and 0 <= x_peak - boxes[3].x1 < 10, (boxes[3], x_peak)
    assert boxes[3].x1 <= ax.get_window_extent(renderer).x1
    assert boxes[3].y0 - y_peak < 15  # pixels: not raised for nothing
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
    assert ax.get_ylabel() == "O − C (min)"


def test_oc_without_bands_or_disagreement_draws_no_band_entries():
    cycle, oc, err, types, bands, _ = band_timings()
    fig = drawn(oc_figure(cycle, oc, err, types, disagree=[False] * cycle.size))
    ax = fig.axes[0]
    assert ax.get_legend() is None  # one entry: it is the panel's title instead
    assert ax.get_title(loc="right") == "maximum (16)"
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


# --------------------------------------------------------------------------- the adopted period, and legible levels


def text_box(text, renderer):
    """The extent of a text's own characters (an annotation's leader line left out)."""
    from matplotlib.text import Text

    return Text.get_window_extent(text, renderer)


def rendered(fig):
    FigureCanvasAgg(fig)
    fig.canvas.draw()
    return fig.canvas.get_renderer()


def peak_notes(ax):
    return [t for t in ax.texts if not t.get_text().startswith("FAP ")]


def one_peak(centre: float = 2.0, extra=()):
    """An invented periodogram on 0.5-5 c/d: one strong peak at ``centre`` and any ``extra`` (frequency, height)."""
    freq = np.linspace(0.5, 5.0, 4501)  # step 0.001 c/d
    power = 0.02 + 0.9 * np.exp(-0.5 * ((freq - centre) / 0.004) ** 2)
    for c, h in extra:
        power = power + h * np.exp(-0.5 * ((freq - c) / 0.004) ** 2)
    return freq, power


def test_the_adopted_period_is_what_the_marked_peak_prints():
    freq, power = one_peak(2.2)
    grid_f, refined_f = 2.2, 2.20034  # the grid's best and the refined frequency the result reports
    peaks = [{"frequency": refined_f, "power": 0.92, "relation": "best"}]
    fig = periodogram_figure(freq, power, best_frequency=grid_f, peaks=peaks, theta=1 - power,
                             adopted_period=1 / refined_f)
    ax, axt = fig.axes
    (note,) = peak_notes(ax)
    assert note.get_text() == f"adopted\nP = {1 / refined_f:.7f} d"
    assert f"{1 / grid_f:.7f}" not in note.get_text() and f"{1 / grid_f:.5f}" not in note.get_text()
    (marker,) = [ln for ln in ax.lines if ln.get_label() == "adopted period"]
    assert marker.get_xdata()[0] == refined_f
    assert [ln.get_xdata()[0] for ln in axt.lines[1:]] == [pytest.approx(refined_f)]  # PDM panel: the same frequency


def test_a_period_twice_the_peaks_is_marked_at_its_peak_and_said_to_be_twice():
    # an eclipsing binary with equal minima: the periodogram peaks at 2/P, the analysis adopted P = 2/f
    freq, power = one_peak(2.0, extra=[(3.0, 0.4)])
    peaks = [{"frequency": 2.0, "power": 0.92, "relation": "best"},
             {"frequency": 3.0, "power": 0.42, "relation": "+1 c/d alias"}]
    fig = periodogram_figure(freq, power, best_frequency=2.0, peaks=peaks, theta=1 - power, adopted_period=1.0)
    ax, axt = fig.axes
    notes = peak_notes(ax)
    assert [t.get_text() for t in notes] == ["adopted, P = 2/f\nP = 1.0000000 d", "+1 c/d alias\nP = 0.33333 d"]
    (marker,) = [ln for ln in ax.lines if ln.get_label() == "adopted period"]
    assert marker.get_xdata()[0] == 2.0 and marker.get_marker() == "v"
    assert [ln.get_xdata()[0] for ln in axt.lines[1:]] == [1.0]  # PDM's minimum is at the true period


def test_an_adopted_period_off_the_listed_peaks_is_marked_on_the_curve():
    # the periodogram's highest peak lost to a rival the fit preferred (3.3 c/d), not among the listed peaks
    freq, power = one_peak(2.0, extra=[(3.3, 0.85)])
    peaks = [{"frequency": 2.0, "power": 0.92, "relation": "best"}]
    fig = periodogram_figure(freq, power, best_frequency=2.0, peaks=peaks, adopted_period=1 / 3.3)
    ax = fig.axes[0]
    texts = sorted(t.get_text() for t in peak_notes(ax))
    assert texts == [f"adopted\nP = {1 / 3.3:.7f} d", "highest peak\nP = 0.50000 d"]
    (marker,) = [ln for ln in ax.lines if ln.get_label() == "adopted period"]
    assert marker.get_xdata()[0] == pytest.approx(3.3)
    assert marker.get_ydata()[0] == pytest.approx(np.interp(3.3, freq, power))  # on the curve


def test_false_alarm_labels_stand_apart_beside_the_panel():
    """Three levels 0.01 apart in power (a few pixels), and a peak note near the right edge at the same height."""
    freq, power = one_peak(2.0, extra=[(4.9, 0.40)])
    levels = {0.1: 0.40, 0.01: 0.41, 0.001: 0.42}
    peaks = [{"frequency": 2.0, "power": 0.92, "relation": "best"},
             {"frequency": 4.9, "power": 0.42, "relation": "harmonic"}]
    for theta in (None, 1 - power):  # one panel and two
        fig = periodogram_figure(freq, power, best_frequency=2.0, fap_levels=levels, peaks=peaks, theta=theta,
                                 adopted_period=0.5)
        renderer = rendered(fig)
        ax = fig.axes[0]
        panel = ax.get_window_extent(renderer)
        labels = {t.get_text(): t for t in ax.texts if t.get_text().startswith("FAP ")}
        assert sorted(labels) == ["FAP 0.001", "FAP 0.01", "FAP 0.1"]
        boxes = [(t.get_text(), text_box(t, renderer)) for t in ax.texts]
        for i, (ta, a) in enumerate(boxes):
            for tb, b in boxes[i + 1:]:
                assert not a.overlaps(b), (ta, tb, a, b)
        for fap, level in levels.items():
            t = labels[f"FAP {fap:g}"]
            box = text_box(t, renderer)
            assert box.x0 > panel.x1 and box.x1 <= fig.bbox.x1  # in the right margin, inside the figure
            assert t.xy == (1.0, level)  # its leader starts at its own line's end
            assert abs((box.y0 + box.y1) / 2 - ax.transData.transform((0, level))[1]) < 40  # pixels: near its line
        # the order of the labels is the order of the lines
        ys = [text_box(labels[k], renderer).y0 for k in ("FAP 0.1", "FAP 0.01", "FAP 0.001")]
        assert ys == sorted(ys)
        # the peak note near the right edge stays inside the panel, clear of the margin's labels
        (edge,) = [t for t in peak_notes(ax) if t.get_text().startswith("harmonic")]
        assert text_box(edge, renderer).x1 <= panel.x1


def test_frequency_axis_spans_the_searched_range_exactly():
    freq, power = one_peak(2.0)
    fig = drawn(periodogram_figure(freq, power, best_frequency=2.0, theta=1 - power))
    assert fig.axes[0].get_xlim() == (0.5, 5.0) and fig.axes[1].get_xlim() == (0.5, 5.0)


# --------------------------------------------------------------------------- O - C: what the fit used


def test_timings_left_out_of_the_fit_are_ringed_and_named():
    cycle, oc, err, types, bands, disagree = band_timings()
    in_fit = ~disagree  # the fit left out the disagreeing timings, and one more
    in_fit[5] = False
    fig = drawn(oc_figure(cycle, oc, err, types, bands=list(bands), disagree=list(disagree), in_fit=list(in_fit)))
    ax = fig.axes[0]
    (ring,) = [ln for ln in ax.lines if ln.get_label() == "left out of the fit"]
    np.testing.assert_allclose(ring.get_xdata(), cycle[~in_fit])
    np.testing.assert_allclose(ring.get_ydata(), oc[~in_fit] * 1440.0)
    assert ring.get_markerfacecolor() == "none" and ring.get_linestyle() == "None"
    (disagreeing,) = [ln for ln in ax.lines if ln.get_label() == "estimates disagree"]
    assert ring.get_marker() != disagreeing.get_marker()  # the two rings differ in shape
    assert ring.get_markersize() > 10 and to_hex(ring.get_markeredgecolor()) in OKABE_ITO
    # the timings themselves are still drawn, in their band's series
    assert sum(np.asarray(c.lines[0].get_xdata()).size for c in errorbar_series(ax)) == cycle.size
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert texts == ["maximum (16)", "B", "V", "estimates disagree", "left out of the fit"]
    # all used: no ring, no entry
    fig2 = drawn(oc_figure(cycle, oc, err, types, bands=list(bands), in_fit=[True] * cycle.size))
    assert "left out of the fit" not in [t.get_text() for t in fig2.axes[0].get_legend().get_texts()]


def test_timings_figure_passes_in_fit_and_reads_missing_as_used():
    cycle, oc, err, types, bands, disagree = band_timings()
    p, t0 = 0.46173, 2461295.6
    rows = [dict(cycle=float(e), o_minus_c=float(d), err=float(s), type=t, band=str(b), disagree=bool(x),
                 in_fit=not bool(x), bjd_tdb=t0 + p * e + d)
            for e, d, s, t, b, x in zip(cycle, oc, err, types, bands, disagree)]
    timed = {"timings": rows, "ephemeris": {"epoch": t0, "period": p, "kind": "maximum"}, "fit": None}
    ax = drawn(timings_figure(timed, "Invented star: O − C")).axes[0]
    (ring,) = [ln for ln in ax.lines if ln.get_label() == "left out of the fit"]
    np.testing.assert_allclose(ring.get_xdata(), cycle[disagree])
    assert ax.get_ylabel() == "O − C (min)"
    for r in rows:
        del r["in_fit"]  # a result from before the key existed
    ax = drawn(timings_figure(timed, "Invented star: O − C")).axes[0]
    assert not [ln for ln in ax.lines if ln.get_label() == "left out of the fit"]


# --------------------------------------------------------------------------- no legend of one entry


def one_entry_figures():
    """Each figure in a case where its legend would have held a single entry."""
    lc = night_lc(bands=("V",), n=20)
    lc["quality"] = 0
    one_band = lc.assign(bv=0.4, bv_err=0.01)
    cycle, oc, err, types, _, _ = band_timings()
    field = pd.DataFrame({"star": ["C1", "C2"], "role": ["comparison", "comparison"], "status": ["kept", "kept"],
                          "V": [12.0, 12.5], "V_err": [0.01, 0.01], "bv": [0.5, 0.7], "bv_err": [0.01, 0.01]})
    return {
        "night": (lightcurve_figure(lc), "2026-09-11"),
        "colour": (colour_figure(one_band), "2026-09-11"),
        "phased": (phased_figure(lc, period=0.46173, epoch=2461295.6, model={}, residuals=np.zeros(len(lc))), None),
        "oc": (oc_figure(cycle, oc, err, types), "maximum (16)"),
        "colour_magnitude": (colour_magnitude_figure(field, lc.iloc[:0]), "comparison stars"),
        "nights": (nights_figure(lc), None),
    }


@pytest.mark.parametrize("name", ["night", "colour", "phased", "oc", "colour_magnitude", "nights"])
def test_no_figure_draws_a_legend_of_one_entry(name):
    fig, title = one_entry_figures()[name]
    drawn(fig)
    legends = list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend() is not None]
    assert legends == [], [[t.get_text() for t in lg.get_texts()] for lg in legends]
    if title is not None:  # the entry's words moved to the panel's title
        assert title in [ax.get_title(loc="right") for ax in fig.axes]
    if name == "phased":
        assert fig.axes[0].get_ylabel() == "V (mag)"  # the band's name is in the axis label
