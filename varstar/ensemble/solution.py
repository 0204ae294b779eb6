"""The result of the ensemble solution of one band of one night."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from varstar.ensemble.settings import EnsembleSettings
from varstar.results import Result, json_float, to_dict

__all__ = ["EXPOSURE_FLAGS", "STAR_STATUSES", "EnsembleSolution"]

STAR_STATUSES = ("kept", "variable", "catalog_offset", "too_few_points", "not_comparison")
EXPOSURE_FLAGS = ("too_few_comparisons", "zero_point_error", "zero_point_jump")

# Fields that to_dict() reshapes into per-star entries and exposure counts (or leaves out,
# for the per-measurement arrays) instead of listing them as they are.
_RESHAPED = (
    "zero_point",
    "zero_point_err",
    "n_comparisons",
    "exposure_flags",
    "star_status",
    "star_reason",
    "star_offset",
    "star_excess",
    "star_chi2_dof",
    "mag",
    "mag_err",
    "used",
    "clipped",
    "tie_weight",
)


@dataclass(frozen=True, eq=False)
class EnsembleSolution(Result):
    """The ensemble solution of one band of one night.

    Attributes
    ----------
    zero_point : numpy.ndarray
        ``(n_exp,)`` calibrated zero points: standard magnitude = instrumental -
        ``zero_point[exposure]``; NaN where no comparison star was measured.
    zero_point_err : numpy.ndarray
        ``(n_exp,)`` statistical 1-sigma of each zero point (photometric noise
        of the whole least-squares problem, including the star excesses).
    calibration_err : float
        1-sigma of the tie of the ensemble to the catalogue, common to every
        exposure of the night and band (catalogue errors and the fitted excess
        scatter of the catalogue offsets); add it in quadrature for absolute
        magnitudes.  When the catalogue scatter had to be estimated from the
        offsets themselves it is widened to the 68.27% quantile of Student's t
        with ``n_tie - 1`` degrees of freedom, so that it still covers the
        truth in 68% of nights with few catalogue stars.
    n_comparisons : numpy.ndarray
        ``(n_exp,)`` comparison measurements used in each exposure.
    exposure_flags : tuple of str
        ``(n_exp,)`` ``""`` if good, else ``;``-joined codes from
        ``too_few_comparisons``, ``zero_point_error``, ``zero_point_jump``.
    star_status : tuple of str
        ``(n_star,)`` ``kept``, ``variable``, ``catalog_offset`` (kept for the zero
        points but not for the tie), ``too_few_points`` or ``not_comparison``.
    star_reason : tuple of str
        ``(n_star,)`` human-readable reason of a rejection, ``""`` otherwise.
    star_offset : numpy.ndarray
        ``(n_star,)`` mean calibrated magnitude minus catalogue (NaN without a
        catalogue value); for the fitted stars this is the fitted ``M_i`` minus
        the catalogue, on the calibrated scale.
    star_excess : numpy.ndarray
        ``(n_star,)`` extra scatter (mag) added in quadrature to the reported
        errors; for stars outside the fit a diagnostic computed the same way
        from their calibrated magnitudes.
    star_chi2_dof : numpy.ndarray
        ``(n_star,)`` reduced chi-square with the reported errors: for stars in
        the fit, of their magnitudes against the zero points of all the other
        stars (whose errors are included), about their mean; otherwise of the
        calibrated magnitudes about their weighted mean.
    mag, mag_err : numpy.ndarray
        ``(n_meas,)`` calibrated magnitude of every input measurement and
        ``sqrt(mag_err_in^2 + zero_point_err^2)``.
    used : numpy.ndarray
        ``(n_meas,)`` the measurement entered the final fit.
    clipped : numpy.ndarray
        ``(n_meas,)`` comparison measurement clipped as an outlier.
    tie_weight : numpy.ndarray
        ``(n_star,)`` normalised weights of the catalogue tie (zero outside it).
    catalog_scatter : float
        Fitted excess scatter of the catalogue offsets (mag).
    error_scale : float
        Common error-scale factor used by the variability test: the median
        reduced chi-square of the comparison stars with the reported errors,
        never below one.
    iterations : int
        Least-squares solutions computed.
    converged : bool
        The iteration reached a stable set of stars, clips and excesses.
    warnings : tuple of str
        Things a person should know (ambiguities that could not be resolved).
    settings : EnsembleSettings
        The settings used.
    colour_extinction, colour_extinction_err : float
        Fitted second-order (colour) extinction ``k''`` of the comparison stars
        in this band, mag per airmass per mag of catalogue colour, and its
        1-sigma; NaN when it was not fitted (see ``colour`` in
        :func:`varstar.ensemble.solve_ensemble`).
    colour_reference : float
        The colour the zero points refer to: a star of this catalogue colour
        needs no colour-extinction correction (mean colour of the comparison
        stars with colours); NaN when not fitted.
    """

    _json_exclude = _RESHAPED

    zero_point: np.ndarray
    zero_point_err: np.ndarray
    calibration_err: float
    n_comparisons: np.ndarray
    exposure_flags: tuple[str, ...]
    star_status: tuple[str, ...]
    star_reason: tuple[str, ...]
    star_offset: np.ndarray
    star_excess: np.ndarray
    star_chi2_dof: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    used: np.ndarray
    clipped: np.ndarray
    tie_weight: np.ndarray = field(default_factory=lambda: np.zeros(0))
    catalog_scatter: float = 0.0
    error_scale: float = float("nan")
    iterations: int = 0
    converged: bool = True
    warnings: tuple[str, ...] = ()
    settings: EnsembleSettings = field(default_factory=EnsembleSettings)
    colour_extinction: float = float("nan")
    colour_extinction_err: float = float("nan")
    colour_reference: float = float("nan")

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe summary: per-star results, exposure flag counts, the tie.

        The scalar fields come from the generic :func:`varstar.results.to_dict`;
        the per-star and per-exposure arrays are reshaped into one entry per star
        and flag counts per exposure code (what a person reads in ``--json``),
        and the per-measurement arrays, as long as the night, are left out.
        The keys keep the order this summary has always had.

        Returns
        -------
        dict
            Plain Python types only (NaN becomes ``None``); per-measurement arrays
            are not included.
        """
        # Not the generic Result.to_dict alone: this summary (per-star entries, flag counts, no
        # per-measurement arrays, this key order) is what the night's reports have always
        # shown, so the generic dict of the scalar fields is reshaped into it.
        plain = to_dict(self)  # the fields not in _json_exclude
        stars = []
        for i, status in enumerate(self.star_status):
            stars.append(
                {
                    "index": i,
                    "status": status,
                    "reason": self.star_reason[i],
                    "offset": json_float(self.star_offset[i]),
                    "excess": json_float(self.star_excess[i]),
                    "chi2_dof": json_float(self.star_chi2_dof[i]),
                    "tie_weight": json_float(self.tie_weight[i]) if self.tie_weight.size else None,
                }
            )
        flags = [set(f.split(";")) if f else set() for f in self.exposure_flags]
        finite_err = self.zero_point_err[np.isfinite(self.zero_point_err)]
        exposures: dict[str, Any] = {
            "n_exposures": len(self.exposure_flags),
            "n_flagged": sum(1 for f in flags if f),
            "median_zero_point_err": json_float(np.median(finite_err)) if finite_err.size else None,
        }
        for code in EXPOSURE_FLAGS:
            idx = [j for j, f in enumerate(flags) if code in f]
            exposures[code] = {"count": len(idx), "exposures": idx}
        return {
            "method": "inhomogeneous ensemble, weighted least squares (Honeycutt 1992)",
            "calibration_err": plain["calibration_err"],
            "catalog_scatter": plain["catalog_scatter"],
            "colour_extinction": plain["colour_extinction"],
            "colour_extinction_err": plain["colour_extinction_err"],
            "colour_reference": plain["colour_reference"],
            "error_scale": plain["error_scale"],
            "iterations": plain["iterations"],
            "converged": plain["converged"],
            "n_measurements_used": int(np.count_nonzero(self.used)),
            "n_clipped": int(np.count_nonzero(self.clipped)),
            "status_counts": {s: self.star_status.count(s) for s in STAR_STATUSES},
            "stars": stars,
            "exposures": exposures,
            "warnings": plain["warnings"],
            "settings": plain["settings"],
        }
