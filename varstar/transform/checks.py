"""Input checks and small numeric constants shared by the transformation modules.

Every public function of :mod:`varstar.transform` checks its arguments with
these, so a bad input gives the same :class:`~varstar.errors.InputError`
wording whichever step it reaches first.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

from varstar.errors import InputError

__all__ = [
    "ONE_SIGMA_QUANTILE",
    "VAR_FLOOR",
    "as_1d",
    "check_positive",
    "finite_fields",
    "read_only",
]

#: Upper quantile of a normal distribution at +1 sigma, Phi(1).
ONE_SIGMA_QUANTILE = 0.8413447460685429
#: Smallest variance used as a weight denominator (1 micromag squared).
VAR_FLOOR = 1e-12


def read_only(a: Any, dtype: Any = float) -> np.ndarray:
    """A new array of ``a`` that cannot be written to (results are values)."""
    arr = np.array(a, dtype=dtype)
    arr.setflags(write=False)
    return arr


def as_1d(a: Any, name: str, n: int | None = None) -> np.ndarray:
    """``a`` as a one-dimensional float array (a scalar becomes one value).

    Parameters
    ----------
    a : array_like
        The values.
    name : str
        The argument's name, for the message.
    n : int, optional
        The number of values required (one per star or exposure).

    Raises
    ------
    InputError
        Not numbers, not one-dimensional, or not ``n`` values.
    """
    try:
        arr = np.asarray(a, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be an array of numbers ({exc})") from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise InputError(f"{name} must be a one-dimensional array, got shape {arr.shape}")
    if n is not None and arr.shape[0] != n:
        raise InputError(f"{name} has {arr.shape[0]} values but {n} were expected (one per star or exposure)")
    return arr


def check_positive(value: Any, name: str) -> float:
    """``value`` as a finite float > 0, or an :class:`InputError` naming ``name``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a positive number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise InputError(f"{name} must be a positive number, got {value!r}")
    return v


def finite_fields(obj: Any, names: Sequence[str], what: str, where: str = "") -> None:
    """Turn the named fields of a frozen dataclass into finite floats; ``*_err`` must be >= 0.

    Meant for ``__post_init__``: the fields are replaced in place by plain
    floats, so a result built from numpy scalars or integers prints the same.

    Raises
    ------
    InputError
        A field that is not a number, not finite, or a negative ``*_err``;
        the message starts with ``what`` and the field's name and ends with
        ``where``.
    """
    for name in names:
        value = getattr(obj, name)
        try:
            v = float(value)
        except (TypeError, ValueError, OverflowError):  # OverflowError: an integer too large for a float
            raise InputError(f"{what} {name} must be a number, got {value!r}{where}") from None
        if not math.isfinite(v):
            raise InputError(f"{what} {name} must be finite, got {value!r}{where}")
        if name.endswith("_err") and v < 0:
            raise InputError(f"{what} {name} must be >= 0, got {v!r}{where}")
        object.__setattr__(obj, name, v)
