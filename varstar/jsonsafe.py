"""The one helper every result's ``to_dict()`` shares (no heavy imports)."""

from __future__ import annotations

import math
from typing import Any


def json_float(x: Any) -> float | None:
    """``x`` as a float for strict JSON: None when it is NaN or infinite."""
    x = float(x)
    return x if math.isfinite(x) else None
