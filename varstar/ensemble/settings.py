"""Settings of the ensemble solution (thresholds and iteration limits)."""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from varstar.errors import InputError
from varstar.results import Result

__all__ = ["EnsembleSettings"]


@dataclass(frozen=True)
class EnsembleSettings(Result):
    """Settings of the ensemble solution; the defaults are common practice.

    Attributes
    ----------
    clip_sigma : float
        Clip a single comparison measurement whose normalised residual (in units
        of its expected scatter, with the star's robust scatter as a floor)
        exceeds this.
    variable_p_value : float
        A comparison star is called variable if the chi-square test of its
        residuals, after dividing by the ensemble's common error-scale factor
        (median chi2/dof of the ensemble, at least one), gives a probability
        below this ...
    variable_min_excess : float
        ... and its excess scatter over the scaled errors exceeds this (mag), so
        that a millimagnitude error-model mismatch of a bright star on a long
        night does not reject the best comparison star.
    max_clipped_fraction : float
        A comparison star with at least five clipped measurements and more than
        this fraction of its measurements clipped is also called variable (an
        eclipse looks like a run of outliers).  Clips made only because the two
        comparison stars of an exposure disagree do not count.
    catalog_sigma : float
        A comparison star's catalogue offset ``M_i - C_i`` inconsistent with the
        others by more than this many robust sigma ...
    catalog_min_mag : float
        ... and by more than this (mag) is marked ``catalog_offset`` (untransformed
        colour terms alone give a few 0.01 mag).
    min_comparisons : int
        Exposures with fewer comparison measurements are flagged
        ``too_few_comparisons``.
    min_star_points : int
        A comparison star with fewer usable measurements is ``too_few_points``.
    zp_err_factor : float
        Exposures whose zero-point error exceeds this times the night's median
        are flagged ``zero_point_error``.
    zp_jump_sigma : float
        Exposures whose zero point is away from the night's smooth trend by more
        than this many robust sigma ...
    zp_jump_min_mag : float
        ... and by more than this (mag) are flagged ``zero_point_jump``.
    trend_clip_sigma : float
        Exposures further than this many robust sigma from the trend do not enter
        the trend fit.
    max_iter : int
        Maximum number of least-squares solutions of the outer iteration.
    """

    clip_sigma: float = 5.0
    variable_p_value: float = 1e-4
    variable_min_excess: float = 0.003
    max_clipped_fraction: float = 0.03
    catalog_sigma: float = 5.0
    catalog_min_mag: float = 0.15
    min_comparisons: int = 2
    min_star_points: int = 1
    zp_err_factor: float = 4.0
    zp_jump_sigma: float = 5.0
    zp_jump_min_mag: float = 0.1
    trend_clip_sigma: float = 3.0
    max_iter: int = 30

    def __post_init__(self) -> None:
        positive = ("clip_sigma", "catalog_sigma", "zp_err_factor", "zp_jump_sigma", "trend_clip_sigma")
        for name in positive:
            value = getattr(self, name)
            if not (isinstance(value, numbers.Real) and math.isfinite(value) and value > 0):
                raise InputError(f"ensemble setting {name} must be a positive number, got {value!r}")
        for name in ("variable_min_excess", "catalog_min_mag", "zp_jump_min_mag"):
            value = getattr(self, name)
            if not (isinstance(value, numbers.Real) and math.isfinite(value) and value >= 0):
                raise InputError(f"ensemble setting {name} must be a number >= 0 (mag), got {value!r}")
        for name in ("variable_p_value", "max_clipped_fraction"):
            value = getattr(self, name)
            if not (isinstance(value, numbers.Real) and 0 < value < 1):
                raise InputError(f"ensemble setting {name} must lie strictly between 0 and 1, got {value!r}")
        for name in ("min_comparisons", "min_star_points", "max_iter"):
            value = getattr(self, name)
            if not (isinstance(value, (int, np.integer)) and not isinstance(value, bool) and value >= 1):
                raise InputError(f"ensemble setting {name} must be an integer >= 1, got {value!r}")
