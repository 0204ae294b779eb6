"""The outer iteration of the ensemble: clip outliers, fit excesses, reject variable stars.

Step 3 of :func:`varstar.ensemble.solve_ensemble`, and step 4, the final solve
with the excesses found.  Each pass of :func:`iterate_ensemble` solves the
weighted least-squares problem, takes one colour-extinction step, and then

* :func:`find_outliers`: clips at most one measurement per exposure (judged
  against the reported errors and each star's robust scatter, never against the
  fitted excess, which outliers inflate) and restores earlier clips that agree
  with the solution again;
* :func:`update_excess`: refits each star's excess scatter so that its reduced
  chi-square is one;
* once clips, excesses and the colour term are stable,
  :func:`variability_test` tests each star against the zero points of all the
  others and the worst offender leaves the fit (:func:`rejection_reason`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from varstar.ensemble.inputs import NOT_LINKED, ComparisonGrid, largest_linked_group
from varstar.ensemble.linear import ColourTerm, LinearFit, colour_step, solve_weighted
from varstar.ensemble.settings import EnsembleSettings
from varstar.ensemble.vetting import (
    MAD_TO_SIGMA,
    StarTest,
    chi2_logsf,
    column_median,
    solve_excess,
    star_vs_others,
)
from varstar.errors import ReductionError

__all__ = [
    "ClipStep",
    "FinalFit",
    "IterationResult",
    "VariabilityTest",
    "apply_clips",
    "choose_rejection",
    "excess_change",
    "final_fit",
    "find_outliers",
    "iterate_ensemble",
    "rejection_reason",
    "update_excess",
    "variability_test",
]

# A diagonal hat value this close to one means the residual is fixed at zero
# (for example the only comparison star of an exposure): it carries no information.
_HAT_ONE = 1e-9
# The excess scatter has converged when no star's effective error sqrt(mag_err^2 + excess^2)
# changes by more than this fraction (weights by less than 2%; the weight model itself is
# uncertain by ~sqrt(2/dof), ten per cent for 200 points).
_EXCESS_RTOL = 1e-2
# A clipped measurement returns when it is within this fraction of clip_sigma of the current
# solution (hysteresis: a point near the threshold must not flip at every iteration).
_RESTORE_FRACTION = 0.8
# A star is called variable for its clipped points only if at least this many were clipped.
_MIN_CLIPS_VARIABLE = 5
# Evidence score of one clipped point when ranking stars: roughly -ln p of a 5-sigma
# Gaussian tail event.
_CLIP_SCORE = 14.0


@dataclass(frozen=True)
class ClipStep:
    """Outcome of one outlier pass over a fit (all ``(n_exp, k)`` over the fitted columns)."""

    new_clip: np.ndarray  # newly clipped measurements
    restore: np.ndarray  # earlier clips that agree with the solution again
    pair_rows: np.ndarray  # (n_exp,) exposures whose only two comparisons disagree (both clipped)
    one_minus_h: np.ndarray  # 1 - diagonal hat value (0 where unused)
    informative: np.ndarray  # the residual carries information (1 - h above _HAT_ONE)

    @property
    def n_changes(self) -> int:
        """Measurements clipped or restored by this pass."""
        return int(np.count_nonzero(self.new_clip)) + int(np.count_nonzero(self.restore))


def find_outliers(
    fit: LinearFit,
    W: np.ndarray,
    U: np.ndarray,
    Yc: np.ndarray,
    R: np.ndarray,
    S2c: np.ndarray,
    old_clip: np.ndarray,
    excess2: np.ndarray,
    clip_sigma: float,
) -> ClipStep:
    """Clip at most one measurement per exposure, and restore earlier clips that agree again.

    Residuals are taken in units of the reported error (times ``sqrt(1 - h)``),
    about each star's median residual (on a short night one wild point pulls the
    star's fitted mean and with it all its other residuals), and divided by each
    star's robust scatter (never below one).  The fitted excess is left out on
    purpose: a few wild points or an eclipse inflate it, and clipping must not
    depend on it.  When an exposure has only two comparisons that disagree, both
    are clipped (no way to tell which is wrong).

    An earlier clip is judged by the statistic it would have inside the fit: with
    prediction variance ``v`` and weight ``w`` the in-fit residual is
    ``r / (1 + w v)`` and ``1 - h = 1 / (1 + w v)``.

    Parameters
    ----------
    fit : LinearFit
        The current fit.
    W, U : numpy.ndarray
        ``(n_exp, k)`` its weights and the measurements in it.
    Yc, R : numpy.ndarray
        ``(n_exp, k)`` the magnitudes fitted and the residuals (0 where unused).
    S2c : numpy.ndarray
        ``(n_exp, k)`` reported error variances.
    old_clip : numpy.ndarray
        ``(n_exp, k)`` available measurements clipped earlier.
    excess2 : numpy.ndarray
        ``(k,)`` the current excess variances (only for the restoration test).
    clip_sigma : float
        Clipping threshold in normalised units.
    """
    n_exp = U.shape[0]
    one_minus_h = np.where(U, np.clip(1.0 - W * np.nan_to_num(fit.var_pred), 0.0, 1.0), 0.0)
    informative = one_minus_h > _HAT_ONE
    center = np.nan_to_num(column_median(R, informative))
    with np.errstate(divide="ignore", invalid="ignore"):
        t_abs = np.where(informative, np.abs(R - center) / np.sqrt(S2c * one_minus_h), 0.0)
    rob = MAD_TO_SIGMA * column_median(t_abs, informative)
    rob = np.where(np.isfinite(rob), np.maximum(rob, 1.0), 1.0)
    tn = np.where(informative, t_abs / rob, -np.inf)
    worst = np.argmax(tn, axis=1)
    tmax = tn[np.arange(n_exp), worst]
    exceed = tmax > clip_sigma
    n_row = U.sum(axis=1)
    new_clip = np.zeros_like(U)
    r_many = np.flatnonzero(exceed & (n_row >= 3))
    new_clip[r_many, worst[r_many]] = True
    r_two = exceed & (n_row == 2)  # two comparisons disagree: no way to tell which is wrong
    new_clip[r_two] = U[r_two]
    restore = np.zeros_like(U)
    if old_clip.any():
        with np.errstate(invalid="ignore"):
            wv = fit.var_pred / (S2c + excess2)
            t_old = np.abs(Yc - fit.M - fit.z[:, None] - center) / np.sqrt(S2c * (1.0 + wv)) / rob
        restore = old_clip & np.isfinite(t_old) & (t_old < _RESTORE_FRACTION * clip_sigma)
    return ClipStep(
        new_clip=new_clip, restore=restore, pair_rows=r_two, one_minus_h=one_minus_h, informative=informative
    )


def update_excess(R: np.ndarray, U: np.ndarray, S2c: np.ndarray, step: ClipStep, excess2: np.ndarray) -> np.ndarray:
    """Excess variance of each star so that its reduced chi-square (hat-matrix dof) is one.

    Only exposures without a newly found outlier count (its pull on the zero
    point would inflate the excess of every star measured there); a star with
    less than one degree of freedom left keeps its previous ``excess2``, which
    also warm-starts the solution.
    """
    R2 = np.where(step.informative, R * R, 0.0)
    s2_c = np.where(U, S2c, 1.0)
    clean_rows = ~step.new_clip.any(axis=1)[:, None]
    dof_clean = np.where(clean_rows, step.one_minus_h, 0.0).sum(axis=0)
    new_excess2 = solve_excess(np.where(clean_rows, R2, 0.0), s2_c, dof_clean, excess2)
    return np.where(dof_clean >= 1.0, new_excess2, excess2)


def excess_change(U: np.ndarray, S2c: np.ndarray, old: np.ndarray, new: np.ndarray) -> float:
    """Largest relative change of a star's typical effective error ``sqrt(mag_err^2 + excess^2)``."""
    n_used_c = np.maximum(U.sum(axis=0), 1)
    typical_s2 = np.where(U, S2c, 0.0).sum(axis=0) / n_used_c
    eff_old = np.sqrt(typical_s2 + old)
    return float(np.max(np.abs(np.sqrt(typical_s2 + new) - eff_old) / eff_old))


def apply_clips(
    clipped: np.ndarray, pair_clipped: np.ndarray, cols: np.ndarray, step: ClipStep, U: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """New ``(clipped, pair_clipped)`` (``(n_exp, k_all)``) after the clips and restorations of ``step``.

    ``pair_clipped`` marks clips made only because the two comparisons of an
    exposure disagreed; they do not count against either star.
    """
    clipped, pair_clipped = clipped.copy(), pair_clipped.copy()
    clipped[:, cols] = (clipped[:, cols] | step.new_clip) & ~step.restore
    pair = pair_clipped[:, cols]
    pair[step.pair_rows] |= U[step.pair_rows]
    pair_clipped[:, cols] = pair & clipped[:, cols]
    return clipped, pair_clipped


@dataclass(frozen=True)
class VariabilityTest:
    """Each fitted star tested for variability (all ``(k,)`` over the fitted columns)."""

    star_test: StarTest
    testable: np.ndarray  # at least one degree of freedom
    red: np.ndarray  # chi2/dof with the reported errors, NaN where not testable
    error_scale: float  # the ensemble's common error-scale factor (>= 1)
    logp: np.ndarray  # ln p of the chi-square test after dividing by error_scale
    excess_scaled: np.ndarray  # excess scatter over the scaled errors (mag)
    n_clips: np.ndarray  # clipped measurements counting against the star
    n_points: np.ndarray  # available measurements
    chi_bad: np.ndarray  # fails the chi-square test
    clip_bad: np.ndarray  # too many clipped measurements
    score: np.ndarray  # evidence (-ln p) used to pick the worst star

    @property
    def any_variable(self) -> bool:
        """At least one star fails a test."""
        return bool(np.any(self.chi_bad | self.clip_bad))


def variability_test(
    W: np.ndarray,
    U: np.ndarray,
    Yc: np.ndarray,
    S2c: np.ndarray,
    fit: LinearFit,
    own_clips: np.ndarray,
    Ac: np.ndarray,
    settings: EnsembleSettings,
) -> VariabilityTest:
    """Chi-square and clip-count tests of each star against the zero points of the others.

    The common error scale is the ensemble median of chi2/dof, never below one,
    so that globally underestimated errors do not reject everybody while a
    chance low median (few stars, short night) cannot make the test stricter
    than the reported errors; with fewer than three stars it is one.  Stars are
    ranked by evidence: ``-ln p`` of the chi-square test, and for a run of
    clipped points roughly ``-ln p`` of that many 5-sigma tail events.

    Parameters
    ----------
    W, U, Yc, S2c : numpy.ndarray
        ``(n_exp, k)`` weights, measurements in the fit, magnitudes and reported
        error variances.
    fit : LinearFit
        The fit made with ``W``.
    own_clips : numpy.ndarray
        ``(n_exp, k)`` clips that count against the star (not pair clips).
    Ac : numpy.ndarray
        ``(n_exp, k)`` available measurements.
    settings : EnsembleSettings
        ``variable_p_value``, ``variable_min_excess``, ``max_clipped_fraction``.
    """
    st = star_vs_others(W, U, Yc, S2c, fit)
    testable = st.dof >= 1.0
    red = st.chi2 / np.where(testable, st.dof, np.nan)
    n_in = U.shape[1]
    red_ok = red[testable]
    error_scale = float(np.median(red_ok)) if n_in >= 3 and red_ok.size else 1.0
    error_scale = max(error_scale, 1.0)
    excess_scaled = np.sqrt(solve_excess(st.r2, error_scale * st.V, np.where(testable, st.dof, 0.0)))
    stat = st.chi2 / error_scale
    with np.errstate(all="ignore"):
        logp = np.where(testable, chi2_logsf(stat, np.maximum(st.dof, 1.0)), 0.0)
    n_clip_star = own_clips.sum(axis=0)
    n_star_pts = Ac.sum(axis=0)
    clip_bad = (n_clip_star >= _MIN_CLIPS_VARIABLE) & (n_clip_star > settings.max_clipped_fraction * n_star_pts)
    chi_bad = (logp < math.log(settings.variable_p_value)) & (excess_scaled > settings.variable_min_excess)
    score = np.where(chi_bad, -logp, -np.inf)
    score = np.where(clip_bad, np.maximum(score, _CLIP_SCORE * n_clip_star), score)
    return VariabilityTest(
        star_test=st,
        testable=testable,
        red=red,
        error_scale=error_scale,
        logp=logp,
        excess_scaled=excess_scaled,
        n_clips=n_clip_star,
        n_points=n_star_pts,
        chi_bad=chi_bad,
        clip_bad=clip_bad,
        score=score,
    )


def rejection_reason(vt: VariabilityTest, o: int, clip_sigma: float) -> str:
    """Why fitted column ``o`` is called variable, for a person."""
    st = vt.star_test
    scale_txt = f", ensemble error scale {vt.error_scale:.2f}" if st.r2.shape[1] >= 3 else ""
    if vt.chi_bad[o]:
        n_o = max(int(st.mask[:, o].sum()), 1)
        rms = math.sqrt(float(st.r2[:, o].sum()) / n_o)
        expected = math.sqrt(float(np.where(st.mask[:, o], st.V[:, o], 0.0).sum()) / n_o * vt.error_scale)
        lp10 = float(vt.logp[o]) / math.log(10.0)
        p_txt = "p<1e-30" if lp10 < -30 else f"p={10.0**lp10:.1e}"
        # The test weighs each residual by its own error (chi2), so a star can fail it with an rms below the
        # mean error (large residuals where the errors are small); say the test, not only the two rms.
        chance = "below 1 in 10^30" if lp10 < -30 else f"{10.0**lp10:.1e}"
        return (
            f"scatter about the ensemble {vt.red[o] / vt.error_scale:.1f} times what its errors allow (chi2/dof, "
            f"each point weighed by its own error{scale_txt}); the chance of that for a constant star is {chance} "
            f"({p_txt}); rms {rms:.3f} mag against {expected:.3f} from its errors"
        )
    return (
        f"{int(vt.n_clips[o])} of {int(vt.n_points[o])} measurements are outliers beyond "
        f"{clip_sigma:g} sigma (an eclipse or flare looks like this)"
    )


def choose_rejection(
    vt: VariabilityTest, cols: np.ndarray, has_cat: np.ndarray, labels: Sequence[str], clip_sigma: float
) -> tuple[tuple[int, str, str] | None, str]:
    """The star to reject after a failed :func:`variability_test`, or why none can go.

    The worst star (highest ``vt.score``) is rejected, unless only two stars are
    left (they cannot tell which of them varies) or it is the last star with a
    catalogue magnitude (rejecting others it pollutes would be wrong).

    Parameters
    ----------
    vt : VariabilityTest
        A test in which at least one star failed.
    cols : numpy.ndarray
        ``(k,)`` comparison columns of the fitted stars.
    has_cat, labels
        ``(k_all,)`` catalogue magnitude known, and names, of every comparison column.
    clip_sigma : float
        For the reason text.

    Returns
    -------
    verdict : tuple or None
        ``(column, "variable", reason)``, or None when no star can go.
    why_not : str
        Empty, or the warning that says why no star was rejected.
    """
    if cols.size <= 2:
        red_ok = vt.red[vt.testable]
        return None, (
            f"only two comparison stars ({' and '.join(labels[c] for c in cols)}) are in the ensemble and they "
            f"disagree beyond their errors (chi2/dof {float(np.max(red_ok)) if red_ok.size else float('nan'):.1f}); "
            f"one of them may be variable but two stars cannot tell which: add comparison stars"
        )
    o = int(np.argmax(vt.score))
    remaining_cat = has_cat[cols].copy()
    remaining_cat[o] = False
    if not np.any(remaining_cat):
        return None, (
            f"{labels[cols[o]]} looks variable but is the last comparison star with a catalogue "
            f"magnitude; it was kept for the tie to the catalogue: add comparison stars with "
            f"catalogue magnitudes"
        )
    return (int(cols[o]), "variable", rejection_reason(vt, o, clip_sigma)), ""


@dataclass(frozen=True)
class IterationResult:
    """Where the outer iteration stopped (comparison columns ``k_all``)."""

    infit: np.ndarray  # (k_all,) columns still in the fit
    clipped: np.ndarray  # (n_exp, k_all) clipped measurements
    excess2: np.ndarray  # (k_all,) excess variances (0 outside the fit)
    colour_extinction: float  # k'' (0 when not fitted)
    colour_extinction_err: float
    error_scale: float  # of the last variability test (NaN if none was made)
    iterations: int  # least-squares solutions computed
    converged: bool
    verdicts: tuple[tuple[int, str, str], ...]  # (column, status, reason) of stars that left the fit
    warnings: tuple[str, ...]


def iterate_ensemble(
    grid: ComparisonGrid,
    colour: ColourTerm,
    infit: np.ndarray,
    has_cat: np.ndarray,
    labels: Sequence[str],
    settings: EnsembleSettings,
) -> IterationResult:
    """Iterate fits, clips, excesses and rejections until the set of stars is stable.

    Parameters
    ----------
    grid : ComparisonGrid
        The comparison measurements.
    colour : ColourTerm
        The colour-extinction regressor (fitted when ``colour.fitted``).
    infit : numpy.ndarray
        ``(k_all,)`` columns that start in the fit.
    has_cat : numpy.ndarray
        ``(k_all,)`` the column's star has a catalogue magnitude (the last such
        star is never rejected).
    labels : sequence of str
        ``(k_all,)`` names of the columns' stars, for reasons and warnings.
    settings : EnsembleSettings
        Thresholds and ``max_iter``.

    Raises
    ------
    ReductionError
        Clipping leaves fewer than two linked comparison stars.
    """
    Y, S2, avail, D = grid.Y, grid.S2, grid.avail, colour.D
    n_exp, k_all = avail.shape
    infit = infit.copy()
    clipped = np.zeros((n_exp, k_all), dtype=bool)
    pair_clipped = np.zeros((n_exp, k_all), dtype=bool)  # clipped only because two disagreed
    excess2 = np.zeros(k_all)
    kappa, kappa_err = 0.0, float("nan")
    iterations, converged, error_scale = 0, False, float("nan")
    verdicts: list[tuple[int, str, str]] = []
    warnings: list[str] = []
    relink = True
    while iterations < settings.max_iter:
        iterations += 1
        if relink:
            for c in largest_linked_group(avail & infit[None, :] & ~clipped, infit, has_cat):
                infit[c] = False
                verdicts.append((int(c), "too_few_points", NOT_LINKED))
            if np.count_nonzero(infit) < 2:
                raise ReductionError(
                    "after clipping outliers fewer than 2 comparison stars remain linked by common "
                    "exposures: the night cannot be reduced with this ensemble; add comparison stars"
                )
        cols = np.flatnonzero(infit)
        S2c, Ac, Dc = S2[:, cols], avail[:, cols], D[:, cols]
        Yc = Y[:, cols] - kappa * Dc
        U = Ac & ~clipped[:, cols]
        W = np.where(U, 1.0 / (S2c + excess2[cols]), 0.0)
        fit = solve_weighted(W, np.where(U, Yc, 0.0))
        R = np.where(U, Yc - fit.M - np.nan_to_num(fit.z)[:, None], 0.0)
        kappa_moved = False
        if colour.fitted:
            dk, kappa_err = colour_step(W, U, Dc, R)
            kappa += dk
            kappa_moved = abs(dk) > 0.05 * kappa_err  # refit with it before judging the stars
        step = find_outliers(fit, W, U, Yc, R, S2c, clipped[:, cols] & Ac, excess2[cols], settings.clip_sigma)
        new_excess2 = update_excess(R, U, S2c, step, excess2[cols])
        if step.n_changes:
            clipped, pair_clipped = apply_clips(clipped, pair_clipped, cols, step, U)
        relink = step.n_changes > 0
        delta = excess_change(U, S2c, excess2[cols], new_excess2)
        excess2[cols] = new_excess2
        excess2[~infit] = 0.0
        if step.n_changes or delta > _EXCESS_RTOL or kappa_moved:
            continue  # not yet stable: refit before judging the stars
        vt = variability_test(W, U, Yc, S2c, fit, clipped[:, cols] & ~pair_clipped[:, cols] & Ac, Ac, settings)
        error_scale = vt.error_scale
        if not vt.any_variable:
            converged = True
            break
        verdict, why_not = choose_rejection(vt, cols, has_cat, labels, settings.clip_sigma)
        if verdict is None:
            warnings.append(why_not)
            converged = True
            break
        infit[verdict[0]] = False
        verdicts.append(verdict)
        # The rejected star's clips no longer matter; clips of the others that it caused are
        # undone by the restoration test in the next iterations, except pair clips (where
        # the two comparisons of an exposure disagreed), which are judged afresh.
        clipped[:, ~infit] = False
        clipped &= ~pair_clipped
        pair_clipped[:] = False
        relink = True
    if not converged:
        warnings.append(
            f"the ensemble iteration did not settle within max_iter={settings.max_iter} solutions; "
            f"results are from the last one"
        )
    return IterationResult(
        infit=infit,
        clipped=clipped,
        excess2=excess2,
        colour_extinction=kappa,
        colour_extinction_err=kappa_err,
        error_scale=error_scale,
        iterations=iterations,
        converged=converged,
        verdicts=tuple(verdicts),
        warnings=tuple(warnings),
    )


@dataclass(frozen=True)
class FinalFit:
    """The final least-squares solution with the excesses the iteration found."""

    cols: np.ndarray  # (k,) comparison columns in the fit
    used: np.ndarray  # (n_exp, k_all) measurements in the fit
    clipped: np.ndarray  # (n_exp, k_all) clipped measurements of stars in the fit
    U: np.ndarray  # (n_exp, k) used[:, cols]
    fit: LinearFit
    star_test: StarTest  # each star against the zero points of the others
    colour_extinction: float  # k'' (0 when not fitted)
    colour_extinction_err: float


def final_fit(grid: ComparisonGrid, colour: ColourTerm, it: IterationResult) -> FinalFit:
    """Solve once more with the stars, clips and excesses where the iteration stopped.

    The colour-extinction coefficient is solved afresh with these weights (one
    exact Frisch-Waugh-Lovell step from zero), so it matches the final fit.
    """
    cols = np.flatnonzero(it.infit)
    used = grid.avail & it.infit[None, :] & ~it.clipped
    clipped = it.clipped & it.infit[None, :]
    U = used[:, cols]
    W = np.where(U, 1.0 / (grid.S2[:, cols] + it.excess2[cols][None, :]), 0.0)
    kappa, kappa_err = it.colour_extinction, it.colour_extinction_err
    if colour.fitted:
        fit0 = solve_weighted(W, np.where(U, grid.Y[:, cols], 0.0))
        R0 = np.where(U, grid.Y[:, cols] - fit0.M - np.nan_to_num(fit0.z)[:, None], 0.0)
        kappa, kappa_err = colour_step(W, U, colour.D[:, cols], R0)
    Yk = grid.Y[:, cols] - kappa * colour.D[:, cols]
    fit = solve_weighted(W, np.where(U, Yk, 0.0))
    st = star_vs_others(W, U, Yk, grid.S2[:, cols], fit)
    return FinalFit(
        cols=cols, used=used, clipped=clipped, U=U, fit=fit, star_test=st,
        colour_extinction=kappa, colour_extinction_err=kappa_err,
    )
