"""``solve_ensemble``: the ensemble solution of one band of one night, step by step.

1. :func:`~varstar.ensemble.inputs.check_inputs`, ``usable_comparisons``,
   ``comparison_grid``, ``select_comparisons``: checked inputs, the dense
   exposure x comparison arrays and the stars that start in the fit;
2. :func:`~varstar.ensemble.linear.colour_regressor`: the colour-extinction term;
3. :func:`~varstar.ensemble.iteration.iterate_ensemble`: clips, excesses and
   rejections of variable stars;
4. :func:`~varstar.ensemble.iteration.final_fit`: the final solve;
5. :func:`~varstar.ensemble.tie.select_tie` and ``calibrate``: the tie to the catalogue;
6. :func:`calibrate_measurements`: every measurement on the calibrated scale;
7. :func:`star_diagnostics`: offset, excess and chi-square of every star;
8. :func:`~varstar.ensemble.vetting.vet_exposures`: exposure flags.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from varstar.ensemble.inputs import (
    as_float,
    check_inputs,
    comparison_grid,
    select_comparisons,
    usable_comparisons,
)
from varstar.ensemble.iteration import final_fit, iterate_ensemble
from varstar.ensemble.linear import colour_regressor
from varstar.ensemble.settings import EnsembleSettings
from varstar.ensemble.solution import EnsembleSolution
from varstar.ensemble.tie import calibrate, select_tie
from varstar.ensemble.vetting import StarTest, solve_excess_grouped, vet_exposures

__all__ = ["CalibratedMeasurements", "calibrate_measurements", "solve_ensemble", "star_diagnostics"]


@dataclass(frozen=True)
class CalibratedMeasurements:
    """Every input measurement on the calibrated scale (all ``(n_meas,)``)."""

    mag: np.ndarray  # instrumental - zero point of its exposure
    mag_err: np.ndarray  # sqrt(mag_err_in^2 + zero_point_err^2)
    used: np.ndarray  # entered the final fit
    clipped: np.ndarray  # comparison measurement clipped as an outlier


def calibrate_measurements(
    mag: np.ndarray,
    err: np.ndarray,
    exposure: np.ndarray,
    zero_point: np.ndarray,
    zero_point_err: np.ndarray,
    MI: np.ndarray,
    used: np.ndarray,
    clipped: np.ndarray,
) -> CalibratedMeasurements:
    """Step 6: calibrated magnitude and error of every measurement, and the fit's bookkeeping.

    Parameters
    ----------
    mag, err, exposure : numpy.ndarray
        ``(n_meas,)`` instrumental magnitudes, their 1-sigma and exposure index.
    zero_point, zero_point_err : numpy.ndarray
        ``(n_exp,)`` calibrated zero points and their errors.
    MI : numpy.ndarray
        ``(n_exp, k_all)`` measurement index of each comparison cell (-1 where absent).
    used, clipped : numpy.ndarray
        ``(n_exp, k_all)`` cells in the final fit and clipped cells (only
        available cells may be set).
    """
    cal = mag - zero_point[exposure]
    cal_err = np.sqrt(err**2 + zero_point_err[exposure] ** 2)
    used_meas = np.zeros(mag.size, dtype=bool)
    used_meas[MI[used]] = True
    clipped_meas = np.zeros(mag.size, dtype=bool)
    clipped_meas[MI[clipped]] = True
    return CalibratedMeasurements(mag=cal, mag_err=cal_err, used=used_meas, clipped=clipped_meas)


def star_diagnostics(
    star: np.ndarray,
    cal: np.ndarray,
    cal_err: np.ndarray,
    good: np.ndarray,
    cat: np.ndarray,
    fitted: np.ndarray,
    fitted_mag: np.ndarray,
    fitted_excess2: np.ndarray,
    star_test: StarTest,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Step 7: offset from the catalogue, excess scatter and reduced chi-square of every star.

    Stars in the fit take them from the fit (``star_test`` is each against the
    zero points of the others); every other star from its good calibrated
    magnitudes about their weighted mean, with the excess that makes that
    reduced chi-square one.

    Parameters
    ----------
    star, cal, cal_err, good : numpy.ndarray
        ``(n_meas,)`` star index, calibrated magnitude and error, upstream quality.
    cat : numpy.ndarray
        ``(n_star,)`` catalogue magnitudes (NaN: none).
    fitted : numpy.ndarray
        ``(k,)`` star index of each fitted column.
    fitted_mag, fitted_excess2 : numpy.ndarray
        ``(k,)`` their calibrated magnitudes and excess variances.
    star_test : StarTest
        The fitted stars against the others.

    Returns
    -------
    offset, excess, chi2_dof : numpy.ndarray
        ``(n_star,)`` each, NaN where there is nothing to compute.
    """
    n_star = cat.size
    star_offset = np.full(n_star, np.nan)
    star_excess = np.full(n_star, np.nan)
    star_chi2 = np.full(n_star, np.nan)
    st = star_test
    star_offset[fitted] = fitted_mag - cat[fitted]
    star_excess[fitted] = np.sqrt(fitted_excess2)
    star_chi2[fitted] = np.where(st.dof >= 1.0, st.chi2 / np.maximum(st.dof, 1.0), np.nan)
    other = np.ones(n_star, dtype=bool)
    other[fitted] = False
    valid = other[star] & good & np.isfinite(cal) & np.isfinite(cal_err) & (cal_err > 0)
    if np.any(valid):
        sv, cv, ev = star[valid], cal[valid], cal_err[valid]
        w = 1.0 / ev**2
        sw = np.bincount(sv, w, minlength=n_star)
        nv = np.bincount(sv, minlength=n_star)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.bincount(sv, w * cv, minlength=n_star) / sw
            r2 = (cv - mean[sv]) ** 2
            ch = np.bincount(sv, w * r2, minlength=n_star)
            red_o = ch / (nv - 1)
        has_pts = nv >= 1
        star_offset[other & has_pts] = (mean - cat)[other & has_pts]
        multi = other & (nv >= 2)
        star_chi2[multi] = red_o[multi]
        ex2 = solve_excess_grouped(r2, ev**2, sv, n_star, np.where(multi, nv - 1.0, 0.0))
        star_excess[multi] = np.sqrt(ex2[multi])
    return star_offset, star_excess, star_chi2


def _read_only(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    a.setflags(write=False)
    return a


def solve_ensemble(
    exposure: np.ndarray,
    star: np.ndarray,
    mag: np.ndarray,
    mag_err: np.ndarray,
    *,
    n_exposures: int,
    is_comparison: np.ndarray,
    catalog_mag: np.ndarray,
    catalog_err: np.ndarray,
    time: np.ndarray,
    airmass: np.ndarray,
    good: np.ndarray | None = None,
    settings: EnsembleSettings = EnsembleSettings(),
    star_names: Sequence[str] | None = None,
    colour: np.ndarray | None = None,
) -> EnsembleSolution:
    """Inhomogeneous ensemble solution of one band of one night (Honeycutt 1992).

    Parameters
    ----------
    exposure, star : numpy.ndarray
        ``(n_meas,)`` integer indices of each measurement's exposure
        (``0..n_exposures-1``) and star (``0..n_star-1``, ``n_star =
        len(is_comparison)``).  A star is measured at most once per exposure.
    mag, mag_err : numpy.ndarray
        ``(n_meas,)`` instrumental magnitudes and their 1-sigma errors.
        Comparison measurements with a non-finite magnitude or a non-positive
        error do not enter the fit.
    n_exposures : int
        Number of exposures of the night in this band.
    is_comparison : numpy.ndarray
        ``(n_star,)`` bool: the star may enter the ensemble.
    catalog_mag, catalog_err : numpy.ndarray
        ``(n_star,)`` catalogue magnitudes in this band (NaN: none; such a
        comparison star helps the zero points but not the tie) and their errors
        (NaN counts as zero; the fitted catalogue scatter still applies).
    time, airmass : numpy.ndarray
        ``(n_exposures,)`` time (days) and airmass of each exposure, for the
        zero-point trend.
    good : numpy.ndarray, optional
        ``(n_meas,)`` bool upstream quality; ``False`` never enters the fit but
        still gets a calibrated magnitude.
    settings : EnsembleSettings
        Thresholds and iteration limits.
    star_names : sequence of str, optional
        Names used in the human-readable reasons and warnings (default
        ``"star <index>"``).
    colour : numpy.ndarray, optional
        ``(n_star,)`` catalogue colour index (e.g. B - V) of each star, NaN if
        unknown.  When at least three comparison stars have colours spanning
        ``COLOUR_MIN_SPAN`` mag and the airmass changes by ``AIRMASS_MIN_SPAN``,
        the model gains one term, ``m_ij = M_i + z_j + k'' X_j (c_i - c_ref)``:
        second-order (colour) extinction, which otherwise makes a red
        comparison star drift against blue ones as the field sets and look
        variable (Henden & Kaitchuck 1982: the second-order term does not cancel
        in differential photometry).  Stars without a colour count as ``c_ref``.

    Returns
    -------
    EnsembleSolution

    Raises
    ------
    ReductionError
        Inconsistent input lengths or indices, no comparison star with a
        catalogue value, fewer than two comparison stars with usable data, or a
        star measured twice in one exposure.
    """
    # 1. inputs, the dense comparison arrays, the stars that start in the fit
    inp = check_inputs(
        exposure, star, mag, mag_err, n_exposures=n_exposures, is_comparison=is_comparison,
        catalog_mag=catalog_mag, catalog_err=catalog_err, time=time, airmass=airmass, good=good,
        star_names=star_names,
    )
    candidate, unusable = usable_comparisons(inp)
    warnings = [unusable] if unusable else []
    grid = comparison_grid(inp, candidate)
    comp, n_star = grid.comp_idx, inp.is_comp.size
    stars = select_comparisons(grid, inp.is_comp, inp.has_cat, settings.min_star_points)
    # 2. colour extinction
    colour_arr = None if colour is None else as_float(colour, "colour", n_star, "star (len(is_comparison))")
    term = colour_regressor(colour_arr, inp.airmass, comp)
    # 3. iterate: clips, excesses, variable stars
    it = iterate_ensemble(grid, term, stars.infit, inp.has_cat[comp], [inp.labels[g] for g in comp], settings)
    stars = stars.with_verdicts(comp, it.verdicts)
    warnings += it.warnings
    # 4. final solve with the excesses found
    final = final_fit(grid, term, it)
    fitted = comp[final.cols]
    # 5. tie to the catalogue
    tie = select_tie(
        final.fit.M - inp.cat[fitted], np.diag(final.fit.CM), inp.has_cat[fitted], inp.cat_err[fitted],
        [inp.labels[g] for g in fitted], settings,
    )
    stars = stars.with_verdicts(comp, [(int(final.cols[c]), s, r) for c, s, r in tie.verdicts], leave_fit=False)
    warnings += tie.warnings
    cal = calibrate(final.fit, tie, inp.cat[fitted], inp.cat_err[fitted])
    # 6. per measurement
    meas = calibrate_measurements(
        inp.mag, inp.mag_err, inp.exposure, cal.zero_point, cal.zero_point_err, grid.MI, final.used,
        final.clipped & grid.avail,
    )
    # 7. per star
    offset, excess, chi2_dof = star_diagnostics(
        inp.star, meas.mag, meas.mag_err, inp.good, inp.cat, fitted, cal.star_mag, it.excess2[final.cols],
        final.star_test,
    )
    # 8. exposure vetting
    n_comp, exposure_flags, note = vet_exposures(
        final.U, cal.zero_point, cal.zero_point_err, inp.time, inp.airmass, settings
    )
    if note:
        warnings.append(note)
    tie_weight = np.zeros(n_star)
    tie_weight[fitted] = cal.tie_weight
    return EnsembleSolution(
        zero_point=_read_only(cal.zero_point),
        zero_point_err=_read_only(cal.zero_point_err),
        calibration_err=cal.calibration_err,
        n_comparisons=_read_only(n_comp),
        exposure_flags=exposure_flags,
        star_status=stars.status,
        star_reason=stars.reason,
        star_offset=_read_only(offset),
        star_excess=_read_only(excess),
        star_chi2_dof=_read_only(chi2_dof),
        mag=_read_only(meas.mag),
        mag_err=_read_only(meas.mag_err),
        used=_read_only(meas.used),
        clipped=_read_only(meas.clipped),
        tie_weight=_read_only(tie_weight),
        catalog_scatter=math.sqrt(tie.excess_var),
        error_scale=it.error_scale,
        iterations=it.iterations + 1,
        converged=it.converged,
        warnings=tuple(warnings),
        settings=settings,
        colour_extinction=final.colour_extinction if term.fitted else float("nan"),
        colour_extinction_err=final.colour_extinction_err if term.fitted else float("nan"),
        colour_reference=term.reference,
    )
