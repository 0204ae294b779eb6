"""The result convention every stage shares.

A result is a frozen dataclass of numbers, their errors and what produced them.
Its JSON form comes from one place: :func:`to_dict` walks the dataclass fields
(nested results, tuples, mappings and numpy arrays included) and writes
non-finite floats as ``None``, so ``--json`` prints exactly what the object
holds.  A result class inherits :class:`Result` to get the method (and
``result["field"]`` reads, as for the dicts results once were); a field that
must not appear in JSON (a large array kept for plotting, say) is named in the
class attribute ``_json_exclude``.

Also here: the two NaN-safe number helpers every core uses (:func:`json_float`,
:func:`sd`).  This module imports nothing heavier than numpy.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import math
from collections.abc import Mapping
from typing import Any, ClassVar

import numpy as np

__all__ = ["Result", "json_float", "plain", "sd", "to_dict", "utc_now"]


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


def utc_now() -> str:
    """The current UTC time as results and the archive record it (ISO 8601, seconds, ``Z``)."""
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def plain(obj: Any) -> Any:
    """Recursively turn results, numpy scalars/arrays and non-finite floats into JSON-safe values."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        own = getattr(obj, "to_dict", None)
        return plain(own()) if callable(own) else to_dict(obj)
    if isinstance(obj, Mapping):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return plain(obj.tolist())
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return json_float(obj)
    return obj


def to_dict(obj: Any) -> dict[str, Any]:
    """JSON-safe dict of a dataclass's fields, in declaration order.

    Fields named in the class attribute ``_json_exclude`` are left out; every
    value goes through :func:`plain` (NaN and infinities become ``None``).
    """
    exclude = getattr(type(obj), "_json_exclude", ())
    return {
        f.name: plain(getattr(obj, f.name))
        for f in dataclasses.fields(obj)
        if f.name not in exclude
    }


class Result:
    """Mixin for result dataclasses: ``to_dict()`` from the fields (see :func:`to_dict`)."""

    _json_exclude: ClassVar[tuple[str, ...]] = ()

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict of the fields (NaN becomes None)."""
        return to_dict(self)

    def __getitem__(self, key: str) -> Any:
        """``result["name"]`` reads a field, as scripts read the dicts these results replaced."""
        if key not in {f.name for f in dataclasses.fields(self)}:  # type: ignore[arg-type]
            raise KeyError(key)
        return getattr(self, key)
