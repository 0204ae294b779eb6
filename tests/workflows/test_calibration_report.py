"""The night report's calibration figures say what they rest on.

A catalogue magnitude given without its error gets a stated assumed error (not a
silent zero that prints as "calibration ±0.000"), and the colour-extinction
term the ensemble fits is printed with its error when it is significant.
"""

from __future__ import annotations

import re

import varstar
from helpers import DEMO
from varstar.text import SIGNIFICANT_SIGMA, colour_extinction_line, format_night_report
from varstar.workflows.reduce import CATALOGUE_ERR_ASSUMED


def _without_catalogue_errors(tmp_path):
    text = (DEMO / "target.toml").read_text(encoding="utf-8")
    text = re.sub(r"(?m)^[BV]_err = .*\n", "", text)
    path = tmp_path / "target.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_missing_catalogue_errors_are_said_and_a_stated_error_assumed(tmp_path):
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, varstar.read_target(_without_catalogue_errors(tmp_path)))
    (rep,) = varstar.ingest(arch, [DEMO / "night-2026-09-11.csv"]).nights
    said = [w for w in rep["warnings"] if "no catalogue error" in w]
    assert len(said) == 2 and all(f"{CATALOGUE_ERR_ASSUMED:.3f} mag assumed" in w for w in said), rep["warnings"]
    for band in ("B", "V"):
        kept = rep["bands"][band]["comparisons_kept"]
        # the tie of k stars with equal assumed errors is at least CATALOGUE_ERR_ASSUMED / sqrt(k)
        # (weighted mean of independent errors: common practice)
        assert rep["bands"][band]["calibration_err"] >= 0.99 * CATALOGUE_ERR_ASSUMED / len(kept) ** 0.5
    assert "calibration ±0.000" not in format_night_report(rep)


def test_with_catalogue_errors_nothing_is_assumed(demo_data, tmp_path):
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, varstar.read_target(demo_data.folder / "target.toml"))
    (rep,) = varstar.ingest(arch, [demo_data.nights[0]]).nights
    assert not [w for w in rep["warnings"] if "no catalogue error" in w]


def test_the_colour_extinction_term_is_printed_only_when_significant():
    strong = {"colour_extinction": -0.0312, "colour_extinction_err": 0.0041}
    weak = {"colour_extinction": -0.0052, "colour_extinction_err": 0.0041}
    line = colour_extinction_line(strong)
    assert "-0.0312 ± 0.0041" in line and "7.6 standard errors" in line
    assert colour_extinction_line(weak) == ""
    assert colour_extinction_line({"colour_extinction": None, "colour_extinction_err": None}) == ""
    edge = {"colour_extinction": SIGNIFICANT_SIGMA * 0.01, "colour_extinction_err": 0.01}
    assert colour_extinction_line(edge) == ""  # at the limit: not shown


def test_the_night_report_text_carries_a_significant_colour_extinction(demo_archive_path):
    arch = varstar.open_archive(demo_archive_path)
    label = str(arch.nights()["night"].iloc[0])
    rep = arch.night_report(label)
    rep["bands"]["V"]["ensemble"].update(colour_extinction=-0.0312, colour_extinction_err=0.0041)
    rep["bands"]["B"]["ensemble"].update(colour_extinction=0.0001, colour_extinction_err=0.0041)
    text = format_night_report(rep)
    assert text.count("colour extinction") == 1 and "-0.0312 ± 0.0041" in text
