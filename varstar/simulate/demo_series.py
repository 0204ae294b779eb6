"""The files of the shipped demo series (``demo_series/``): the demo field's nights
and truth, and the standard field's star list and half-hour run.

Pure: returns file name -> text; ``demo_series/make_demo.py`` and ``varstar demo``
write them.
"""

from __future__ import annotations

from .catalogues import standards_toml
from .fields import demo_scenario, standard_field_scenario
from .files import measurements_csv, series_files
from .scenario import Scenario
from .series import simulate

__all__ = ["demo_files", "standard_field_files"]


def standard_field_files(scenario: Scenario | None = None) -> dict[str, str]:
    """``standards.toml`` and ``standards.csv`` (one half-hour run) of the invented standard field."""
    scenario = scenario or standard_field_scenario()
    series = simulate(scenario)
    return {"standards.toml": standards_toml(scenario), "standards.csv": measurements_csv(series.nights[0])}


def demo_files() -> dict[str, str]:
    """Every file of the shipped demo series: the demo field's nights and truth, and the standard field."""
    scenario = demo_scenario()
    files = series_files(simulate(scenario), scenario)
    files.update(standard_field_files())
    return files
