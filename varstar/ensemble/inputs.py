"""Input checks of the ensemble solution and the dense exposure x comparison-star arrays.

Step 1 of :func:`varstar.ensemble.solve_ensemble`: every array is checked
(lengths, indices, types) with a message that says what to give instead; the
comparison measurements are laid out as dense ``(n_exp, k)`` arrays; stars with
too few usable points, or never measured together with the main ensemble, are
set aside before the first fit.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from varstar.ensemble.vetting import components
from varstar.errors import ReductionError

__all__ = [
    "CheckedInput",
    "ComparisonGrid",
    "StarVerdicts",
    "as_float",
    "as_index",
    "check_inputs",
    "comparison_grid",
    "largest_linked_group",
    "select_comparisons",
    "usable_comparisons",
]

NOT_LINKED = "never measured in the same exposure as the main ensemble"


def as_index(a: Any, name: str, n_max: int, n_meas: int | None) -> np.ndarray:
    """``a`` as a one-dimensional integer index array with values in ``0..n_max-1``.

    Raises
    ------
    ReductionError
        Not one-dimensional, not ``n_meas`` long (when given), not integral, or
        out of range.
    """
    arr = np.asarray(a)
    if arr.ndim != 1:
        raise ReductionError(f"{name} must be a one-dimensional array of indices, got shape {arr.shape}")
    if n_meas is not None and arr.shape[0] != n_meas:
        raise ReductionError(
            f"{name} has {arr.shape[0]} entries but mag has {n_meas}: every measurement needs one "
            f"exposure index, star index, mag and mag_err"
        )
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        if not np.issubdtype(arr.dtype, np.floating) or not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise ReductionError(f"{name} must hold integer indices, got dtype {arr.dtype}")
    arr = arr.astype(np.intp)
    if arr.size and (arr.min() < 0 or arr.max() >= n_max):
        bad = arr[(arr < 0) | (arr >= n_max)][0]
        raise ReductionError(f"{name} index {bad} is out of range 0..{n_max - 1}")
    return arr


def as_float(a: Any, name: str, n: int, what: str) -> np.ndarray:
    """``a`` as a one-dimensional float array of length ``n`` (one value per ``what``)."""
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise ReductionError(f"{name} must have one value per {what} ({n}), got shape {arr.shape}")
    return arr


@dataclass(frozen=True)
class CheckedInput:
    """The checked inputs of one ensemble solution."""

    exposure: np.ndarray  # (n_meas,) exposure index
    star: np.ndarray  # (n_meas,) star index
    mag: np.ndarray  # (n_meas,) instrumental magnitude
    mag_err: np.ndarray  # (n_meas,) its 1-sigma
    good: np.ndarray  # (n_meas,) upstream quality
    n_exp: int
    is_comp: np.ndarray  # (n_star,) may enter the ensemble
    cat: np.ndarray  # (n_star,) catalogue magnitude, NaN if none
    cat_err: np.ndarray  # (n_star,) its 1-sigma (>= 0; NaN given counts as 0)
    has_cat: np.ndarray  # (n_star,) finite catalogue magnitude
    time: np.ndarray  # (n_exp,) days
    airmass: np.ndarray  # (n_exp,)
    labels: tuple[str, ...]  # (n_star,) names used in reasons and warnings


def check_inputs(
    exposure: Any,
    star: Any,
    mag: Any,
    mag_err: Any,
    *,
    n_exposures: Any,
    is_comparison: Any,
    catalog_mag: Any,
    catalog_err: Any,
    time: Any,
    airmass: Any,
    good: Any = None,
    star_names: Sequence[str] | None = None,
) -> CheckedInput:
    """Check the arguments of :func:`varstar.ensemble.solve_ensemble` (same names and meaning).

    Raises
    ------
    ReductionError
        Inconsistent lengths or indices, or no comparison star with a catalogue
        magnitude.
    """
    mag = np.asarray(mag, dtype=float)
    if mag.ndim != 1:
        raise ReductionError(f"mag must be a one-dimensional array, got shape {mag.shape}")
    n_meas = mag.shape[0]
    if isinstance(n_exposures, bool) or not isinstance(n_exposures, (int, np.integer)) or n_exposures < 1:
        raise ReductionError(f"n_exposures must be a positive integer, got {n_exposures!r}")
    n_exp = int(n_exposures)
    is_comp = np.asarray(is_comparison)
    if is_comp.ndim != 1 or is_comp.size == 0:
        raise ReductionError("is_comparison must be a non-empty one-dimensional array with one entry per star")
    is_comp = is_comp.astype(bool)
    n_star = is_comp.size
    if star_names is not None and len(star_names) != n_star:
        raise ReductionError(f"star_names has {len(star_names)} names but is_comparison has {n_star} stars")
    exposure = as_index(exposure, "exposure", n_exp, n_meas)
    star = as_index(star, "star", n_star, n_meas)
    err = as_float(mag_err, "mag_err", n_meas, "measurement")
    cat = as_float(catalog_mag, "catalog_mag", n_star, "star (len(is_comparison))")
    cat_err = as_float(catalog_err, "catalog_err", n_star, "star (len(is_comparison))")
    time = as_float(time, "time", n_exp, "exposure (n_exposures)")
    airmass = as_float(airmass, "airmass", n_exp, "exposure (n_exposures)")
    if good is None:
        good_arr = np.ones(n_meas, dtype=bool)
    else:
        good_arr = np.asarray(good)
        if good_arr.ndim != 1 or good_arr.shape[0] != n_meas:
            raise ReductionError(f"good must have one flag per measurement ({n_meas}), got shape {good_arr.shape}")
        good_arr = good_arr.astype(bool)
    cat_err = np.where(np.isfinite(cat_err), np.abs(cat_err), 0.0)
    has_cat = np.isfinite(cat)
    if not np.any(is_comp & has_cat):
        raise ReductionError(
            "no comparison star has a catalogue magnitude in this band: give catalogue magnitudes for "
            "at least one (better three or more) comparison stars so the night can be calibrated"
        )
    if star_names is None:
        labels = tuple(f"star {i}" for i in range(n_star))
    else:
        labels = tuple(f"{name!s}" for name in star_names)
    return CheckedInput(
        exposure=exposure,
        star=star,
        mag=mag,
        mag_err=err,
        good=good_arr,
        n_exp=n_exp,
        is_comp=is_comp,
        cat=cat,
        cat_err=cat_err,
        has_cat=has_cat,
        time=time,
        airmass=airmass,
        labels=labels,
    )


def usable_comparisons(inp: CheckedInput) -> tuple[np.ndarray, str]:
    """Comparison measurements that may enter the fit, and a warning about the others.

    Returns
    -------
    candidate : numpy.ndarray
        ``(n_meas,)`` bool: a comparison star, marked good, with a finite
        magnitude and a positive finite error.
    warning : str
        Empty, or how many good comparison measurements had to be left out.
    """
    base = inp.is_comp[inp.star] & inp.good
    candidate = base & np.isfinite(inp.mag) & np.isfinite(inp.mag_err) & (inp.mag_err > 0)
    n_unusable = int(np.count_nonzero(base & ~candidate))
    if not n_unusable:
        return candidate, ""
    return candidate, (
        f"{n_unusable} comparison measurement(s) marked good have a non-finite magnitude or a "
        f"non-positive error and were left out of the fit"
    )


@dataclass(frozen=True)
class ComparisonGrid:
    """Comparison measurements as dense ``(n_exp, k)`` arrays, one column per comparison star."""

    comp_idx: np.ndarray  # (k,) star index of each column
    Y: np.ndarray  # (n_exp, k) instrumental magnitudes (0 where absent)
    S2: np.ndarray  # (n_exp, k) error variances (1 where absent)
    MI: np.ndarray  # (n_exp, k) measurement index (-1 where absent)
    avail: np.ndarray  # (n_exp, k) a usable measurement exists


def comparison_grid(inp: CheckedInput, candidate: np.ndarray) -> ComparisonGrid:
    """Lay out the ``candidate`` measurements as dense exposure x comparison-star arrays.

    Raises
    ------
    ReductionError
        A comparison star is measured more than once in one exposure.
    """
    n_exp, n_star = inp.n_exp, inp.is_comp.size
    comp_idx = np.flatnonzero(inp.is_comp)
    col_of = np.full(n_star, -1, dtype=np.intp)
    col_of[comp_idx] = np.arange(comp_idx.size)
    k_all = comp_idx.size
    cm = np.flatnonzero(candidate)
    key = inp.exposure[cm] * k_all + col_of[inp.star[cm]]
    counts = np.bincount(key, minlength=n_exp * k_all)
    if np.any(counts > 1):
        dup = np.flatnonzero(counts > 1)[0]
        j, c = divmod(int(dup), k_all)
        raise ReductionError(
            f"{inp.labels[int(comp_idx[c])]} is measured more than once in exposure {j}: "
            f"keep one measurement per star and exposure (or mark the others good=False)"
        )
    Y = np.zeros((n_exp, k_all))
    S2 = np.ones((n_exp, k_all))
    MI = np.full((n_exp, k_all), -1, dtype=np.intp)
    avail = np.zeros((n_exp, k_all), dtype=bool)
    rows, cols = inp.exposure[cm], col_of[inp.star[cm]]
    Y[rows, cols] = inp.mag[cm]
    S2[rows, cols] = inp.mag_err[cm] ** 2
    MI[rows, cols] = cm
    avail[rows, cols] = True
    return ComparisonGrid(comp_idx=comp_idx, Y=Y, S2=S2, MI=MI, avail=avail)


def largest_linked_group(present: np.ndarray, infit: np.ndarray, has_cat: np.ndarray) -> np.ndarray:
    """Columns of ``infit`` outside the largest group of stars linked by shared exposures.

    Parameters
    ----------
    present : numpy.ndarray
        ``(n_exp, k)`` bool: star measured (and usable) in the exposure.
    infit : numpy.ndarray
        ``(k,)`` bool: columns taking part.
    has_cat : numpy.ndarray
        ``(k,)`` bool: the star has a catalogue magnitude.

    Returns
    -------
    numpy.ndarray
        Column indices to leave out, in increasing order (empty when all the
        ``infit`` columns are linked).  A group holding a catalogue star wins,
        then the group with more measurements.
    """
    cols_in = np.flatnonzero(infit)
    if cols_in.size < 2:
        return cols_in[:0]
    labels = components(present[:, cols_in])
    if labels.max() == 0:
        return cols_in[:0]
    best, best_key = -1, (-1, -1)
    for lab in np.unique(labels):
        members = cols_in[labels == lab]
        key = (int(np.any(has_cat[members])), int(present[:, members].sum()))
        if key > best_key:
            best, best_key = lab, key
    return cols_in[labels != best]


@dataclass(frozen=True)
class StarVerdicts:
    """Status and reason of every star, and which comparison columns are in the fit."""

    status: tuple[str, ...]  # (n_star,)
    reason: tuple[str, ...]  # (n_star,)
    infit: np.ndarray  # (k,) bool

    def with_verdicts(
        self, comp_idx: np.ndarray, verdicts: Sequence[tuple[int, str, str]], leave_fit: bool = True
    ) -> StarVerdicts:
        """A copy with each ``(column, status, reason)`` applied; the columns leave the fit if ``leave_fit``."""
        status, reason, infit = list(self.status), list(self.reason), self.infit.copy()
        for c, code, text in verdicts:
            if leave_fit:
                infit[c] = False
            status[int(comp_idx[c])] = code
            reason[int(comp_idx[c])] = text
        return StarVerdicts(status=tuple(status), reason=tuple(reason), infit=infit)


def select_comparisons(
    grid: ComparisonGrid, is_comp: np.ndarray, has_cat: np.ndarray, min_star_points: int
) -> StarVerdicts:
    """Comparison stars that start in the fit: enough usable points and linked to the main ensemble.

    Raises
    ------
    ReductionError
        Fewer than two comparison stars are left, or none of them has a
        catalogue magnitude.
    """
    n_star = is_comp.size
    k_all = grid.comp_idx.size
    status = ["not_comparison"] * n_star
    reason = [""] * n_star
    for gi in grid.comp_idx:
        status[int(gi)] = "kept"
    n_avail = grid.avail.sum(axis=0)
    few = n_avail < min_star_points
    verdicts = [
        (int(c), "too_few_points", f"only {int(n_avail[c])} usable measurement(s); at least {min_star_points} needed")
        for c in np.flatnonzero(few)
    ]
    start = StarVerdicts(status=tuple(status), reason=tuple(reason), infit=np.ones(k_all, dtype=bool))
    start = start.with_verdicts(grid.comp_idx, verdicts)
    has_cat_col = has_cat[grid.comp_idx]
    drop = largest_linked_group(grid.avail, start.infit, has_cat_col)
    start = start.with_verdicts(grid.comp_idx, [(int(c), "too_few_points", NOT_LINKED) for c in drop])
    n_in = int(np.count_nonzero(start.infit))
    if n_in < 2:
        raise ReductionError(
            f"fewer than 2 comparison stars have usable data in this band ({n_in} "
            f"of {k_all}): an ensemble needs at least two comparison stars measured in common exposures"
        )
    if not np.any(has_cat_col[start.infit]):
        raise ReductionError(
            "none of the comparison stars with a catalogue magnitude has usable measurements in this band: "
            "the night cannot be tied to the catalogue"
        )
    return start
