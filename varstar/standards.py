"""Transformation coefficients from a standard field: files -> ensembles -> fit.

The exposures of a standard field are reduced like a night of a target, with
every standard star in the ensemble of each band, to give each star's mean
calibrated instrumental magnitude; :func:`varstar.transform.fit_coefficients`
then fits the colour term and colour scale against the catalogue.

Second-order extinction: the colour scale refers to colours outside the
atmosphere, (b - v)_0 = (b - v) - k'_bv X - k''_bv X (b - v) (Henden &
Kaitchuck 1982); the first-order part drops into the zero point, the
second-order part does not, and a half-hour run of a standard field cannot
measure it (its airmass hardly changes).  So ``k2_bv`` is given by the observer
(typically about -0.03 in B - V, common practice) and removed from each B
measurement here; it travels with the coefficients, so the same value is
applied to the target when its own nights cannot measure it.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from .ensemble import EnsembleSettings, solve_ensemble
from .errors import InputError
from .measurements import read_measurements
from .target import StandardField, read_standards
from .transform import CoefficientFit, fit_coefficients

# Colour terms make catalogue offsets differ by several 0.01 mag from star to star
# in a standard field (that is what is being measured), so the ensemble must not
# reject stars for their catalogue offset here.
_SETTINGS = EnsembleSettings(catalog_min_mag=10.0)


def star_means(field: StandardField, table: pd.DataFrame, band: str, k2: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Each standard star's mean calibrated instrumental magnitude in ``band`` and its error.

    ``k2`` (mag per airmass per mag of B - V) is removed from every measurement
    first, with the star's catalogue colour.  NaN for a star without usable
    measurements or rejected as variable.
    """
    ids = list(field.star_ids)
    rows = table[table["band"] == band]
    if rows.empty:
        raise InputError(f"{field.source}: the standard-field tables have no {band} exposures (B and V are both needed)")
    frame_code, _ = pd.factorize(rows["frame"])
    jd = rows.groupby(frame_code, sort=True)["jd"].first().to_numpy()
    airmass = rows.groupby(frame_code, sort=True)["airmass"].first().to_numpy(dtype=float)
    star_idx = pd.Index(ids).get_indexer(rows["star"])
    cat = np.array([s.catalog[band] for s in field.stars])
    cat_err = np.array([s.catalog_err.get(band, 0.0) for s in field.stars])
    colour = np.array([s.catalog["B"] - s.catalog["V"] for s in field.stars])
    x = rows["airmass"].to_numpy(dtype=float)
    if k2 != 0.0 and not np.isfinite(x).all():
        raise InputError(f"{field.source}: k2_bv needs the airmass of every exposure: add an airmass column to the tables")
    mag = rows["mag"].to_numpy() - (k2 * x * colour[star_idx] if k2 != 0.0 else 0.0)
    good = (rows["flag"].to_numpy() == 0) & np.isfinite(mag)
    # No colour-extinction term in this ensemble: over half an hour it is not measurable
    # and a poorly fitted one would bias every star's mean by k'' X (B-V).
    sol = solve_ensemble(
        frame_code, star_idx, mag, rows["mag_err"].to_numpy(),
        n_exposures=int(frame_code.max()) + 1, is_comparison=np.ones(len(ids), dtype=bool),
        catalog_mag=cat, catalog_err=cat_err, time=jd, airmass=airmass, good=good,
        settings=_SETTINGS, star_names=ids,
    )
    used = sol.used
    mag_err = rows["mag_err"].to_numpy()
    w = 1.0 / (mag_err[used] ** 2 + np.nan_to_num(sol.star_excess)[star_idx[used]] ** 2)
    with np.errstate(divide="ignore"):
        err = 1.0 / np.sqrt(np.bincount(star_idx[used], w, minlength=len(ids)))
    mean = cat + sol.star_offset
    bad = np.array([st in ("variable", "too_few_points") for st in sol.star_status])
    return np.where(bad, np.nan, mean), np.where(bad | ~np.isfinite(err), np.nan, err)


def fit_standard_field(
    files: Sequence[str | Path],
    standards: str | Path,
    *,
    columns: Mapping[str, str] | None = None,
    min_colour_range: float = 1.0,
    k2_bv: float = 0.0,
) -> CoefficientFit:
    """Fit epsilon_v and mu_bv from measurement tables of a standard field.

    Parameters
    ----------
    files
        Measurement tables (the usual CSV forms) of the standard field, B and V.
    standards
        The field's TOML: ``[[stars]]`` with ``id``, ``B``, ``V`` and errors.
    k2_bv
        Second-order extinction of b - v to remove (see the module notes);
        0 fits the colour scale at the standards' own airmass.
    """
    field = read_standards(standards)
    table = read_measurements(files, field.star_ids, columns)
    v, v_err = star_means(field, table, "V")
    b, b_err = star_means(field, table, "B", k2_bv)
    cat = {band: np.array([s.catalog[band] for s in field.stars]) for band in ("B", "V")}
    err = {band: np.array([s.catalog_err.get(band, 0.0) for s in field.stars]) for band in ("B", "V")}
    return fit_coefficients(
        field.star_ids, cat["V"], err["V"], cat["B"], err["B"], v, v_err, b, b_err, min_colour_range=min_colour_range,
    )


#: The second-order extinction of b - v an observer takes without a measurement of their own
#: (mag per airmass per mag of colour; common practice); used only to show what assuming 0 costs.
K2_BV_TYPICAL = -0.03


def k2_assumption_notes(
    files: Sequence[str | Path],
    standards: str | Path,
    fit: CoefficientFit,
    *,
    columns: Mapping[str, str] | None = None,
) -> list[str]:
    """What assuming k2_bv = 0 does to a fit: the coefficients with :data:`K2_BV_TYPICAL` instead.

    Returns one note per coefficient that moves by more than its error (empty
    when neither does), so the observer knows whether k2_bv must be measured.
    """
    other = fit_standard_field(files, standards, columns=columns, k2_bv=K2_BV_TYPICAL)
    notes = []
    for name in ("epsilon_v", "mu_bv"):
        shift = getattr(other, name) - getattr(fit, name)
        err = getattr(fit, f"{name}_err")
        if err > 0 and abs(shift) > err:
            notes.append(
                f"k2_bv not given, 0 assumed: with the usual {K2_BV_TYPICAL:+.3f} instead, {name} would move by "
                f"{shift:+.4f} ({abs(shift) / err:.1f} times its error); measure k2_bv and give --k2-bv"
            )
    return notes
