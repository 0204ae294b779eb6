"""NaN-safe numbers every result shares: JSON floats and errors from variances (no heavy imports)."""

from __future__ import annotations

import math
from typing import Any


def json_float(x: Any) -> float | None:
    """``x`` as a float for strict JSON: None when it is NaN or infinite."""
    x = float(x)
    return x if math.isfinite(x) else None


def sd(variance: Any) -> float:
    """Standard deviation from a variance: NaN, not an exception, when it is negative or NaN.

    A covariance matrix of an ill-conditioned fit (a one-night light curve, a
    frequency the data cannot pin down) can have a slightly negative diagonal;
    the error is then unknown, and the caller decides what to say about it.
    """
    v = float(variance)
    return math.sqrt(v) if v >= 0.0 else math.nan
