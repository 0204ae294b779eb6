"""Catalogue magnitudes of a simulated field and the TOML star lists built from them.

:func:`catalogue` draws the catalogue errors from the scenario's own seed, so
the target file (:func:`target_toml`) and the standard-star list
(:func:`standards_toml`) are functions of the scenario alone.
:func:`toml_text` writes a target description in varstar's TOML format; the
synthetic generator uses it too.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from .scenario import Scenario

__all__ = ["catalogue", "standards_toml", "target_toml", "toml_text"]

#: Second word of the catalogue's seed, ``[scenario.seed, 1]`` (the simulation's streams
#: come from ``[seed, 2]``, the synthetic field from ``[field_seed, 3]``).
_STREAM_CATALOGUE = 1


def catalogue(scenario: Scenario) -> pd.DataFrame:
    """Catalogue magnitudes: truth (mean standard magnitude) plus a Gaussian catalogue error.

    Drawn from the scenario's own seed (not the simulation's), so the target file
    is a function of the scenario alone.  Rounded to 0.001 mag as catalogues are.
    Columns ``star, role, band, mag_true_mean, catalog, catalog_err``.
    """
    rng = np.random.default_rng(np.random.SeedSequence([int(scenario.seed), _STREAM_CATALOGUE]))
    bands = [b.name for b in scenario.bands]
    rows = []
    draws = rng.standard_normal((len(scenario.stars), len(bands)))
    for i, s in enumerate(scenario.stars):
        for j, b in enumerate(bands):
            err = float(s.catalog_err.get(b, 0.0))
            true = s.mean_mag(b)
            rows.append((s.id, s.role, b, true, round(true + err * draws[i, j], 3), err))
    return pd.DataFrame(rows, columns=["star", "role", "band", "mag_true_mean", "catalog", "catalog_err"])


def _fmt(x: float, nd: int) -> str:
    """``x`` with ``nd`` decimals, never a negative zero."""
    s = f"{x:.{nd}f}"
    return "0." + "0" * nd if s == "-0." + "0" * nd else s


def toml_text(
    name: str, ra_deg: float, dec_deg: float, lat: float, lon: float, elev: float,
    stars: Sequence[tuple[str, str, Mapping[str, float], Mapping[str, float]]], header: str,
) -> str:
    """A target description in varstar's TOML format.

    Parameters
    ----------
    name, ra_deg, dec_deg
        The ``[target]`` table (J2000 degrees).
    lat, lon, elev
        The ``[site]`` table (degrees, metres).
    stars
        ``(id, role, catalogue magnitudes by band, their errors by band)`` per star;
        bands are written in the order V, B, R, I.
    header
        Comment lines at the top of the file.
    """
    lines = [f"# {ln}" if ln else "#" for ln in header.splitlines()]
    lines += [
        "",
        "[target]",
        f"name = {json.dumps(name)}",
        f"ra = {_fmt(ra_deg, 5)}",
        f"dec = {_fmt(dec_deg, 5)}",
        "",
        "[site]",
        f"latitude = {_fmt(lat, 4)}",
        f"longitude = {_fmt(lon, 4)}",
        f"elevation = {_fmt(elev, 1)}",
    ]
    for sid, role, cat, err in stars:
        lines += ["", "[[stars]]", f"id = {json.dumps(sid)}", f"role = {json.dumps(role)}"]
        for b in ("V", "B", "R", "I"):
            if b in cat:
                lines.append(f"{b} = {_fmt(cat[b], 3)}")
        for b in ("V", "B", "R", "I"):
            if b in cat and b in err:
                lines.append(f"{b}_err = {_fmt(err[b], 3)}")
    return "\n".join(lines) + "\n"


def target_toml(scenario: Scenario) -> str:
    """The scenario's target description in varstar's TOML format.

    Comparison and check stars carry catalogue magnitudes (truth plus catalogue
    error, see :func:`catalogue`); the target, and any star with
    ``in_catalogue=False``, carries none.  Nothing reveals which comparison
    star varies.
    """
    cat = catalogue(scenario)
    entries = []
    for s in scenario.stars:
        sub = cat[cat["star"] == s.id]
        mags = dict(zip(sub["band"], sub["catalog"])) if s.in_catalogue else {}
        errs = dict(zip(sub["band"], sub["catalog_err"])) if s.in_catalogue else {}
        entries.append((s.id, s.role, mags, errs))
    header = (
        f"{scenario.field_name}: simulated data from varstar.simulate (seed {scenario.seed}).\n"
        "The field and its stars are invented; catalogue values = truth + simulated catalogue error."
    )
    text = toml_text(scenario.field_name, scenario.ra_deg, scenario.dec_deg, scenario.latitude_deg,
                      scenario.longitude_deg, scenario.elevation_m, entries, header)
    if scenario.published_ephemeris is not None:
        epoch, period, kind = scenario.published_ephemeris
        text += (
            "\n# An older ephemeris of the target (invented, like the field; not exactly the truth)\n"
            f"[ephemeris]\nepoch = {epoch:.5f}\nperiod = {period:.7f}\nkind = {json.dumps(kind)}\n"
        )
    return text


def standards_toml(scenario: Scenario) -> str:
    """The standard field's star list (``[field]`` and ``[[stars]]`` with B and V) as TOML."""
    cat = catalogue(scenario)
    lines = [
        f"# {scenario.field_name}: invented standard stars for varstar's demo (seed {scenario.seed}).",
        "# Catalogue values = truth + simulated catalogue error.",
        "",
        "[field]",
        f"name = {json.dumps(scenario.field_name)}",
    ]
    for s in scenario.stars:
        sub = cat[cat["star"] == s.id].set_index("band")
        lines += ["", "[[stars]]", f"id = {json.dumps(s.id)}"]
        lines += [f"{b} = {_fmt(sub.loc[b, 'catalog'], 3)}" for b in ("V", "B")]
        lines += [f"{b}_err = {_fmt(sub.loc[b, 'catalog_err'], 3)}" for b in ("V", "B")]
    return "\n".join(lines) + "\n"
