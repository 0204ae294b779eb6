"""Quality bits of light-curve points and the words that explain them.

A point's ``quality`` is 0 when it is good; otherwise the sum of the bits
below.  The reduction sets them (:func:`varstar.workflows.reduce.reduce_night`),
the archive stores them (``/points/quality``) and the light curve explains them
in its ``flags`` column with :func:`quality_words`.  Exposure flags (passing
clouds, too few comparison stars, ...) are words already, set by the ensemble
solution; a point of a flagged exposure carries :data:`EXPOSURE_FLAGGED` and
repeats its exposure's words.
"""

from __future__ import annotations

import numpy as np

#: The point's exposure was flagged by the ensemble solution (its words say why).
EXPOSURE_FLAGGED = 1
#: The measurement was marked bad upstream (``flag`` column non-zero).
UPSTREAM_FLAG = 2
#: The exposure has no zero point (no usable comparison star).
NO_ZERO_POINT = 4
#: Instrumental magnitude beyond a detector's range from the comparison stars.
IMPLAUSIBLE = 8

#: The word of each bit but :data:`EXPOSURE_FLAGGED` (whose words come from the exposure).
WORDS = {UPSTREAM_FLAG: "upstream_flag", NO_ZERO_POINT: "no_zero_point", IMPLAUSIBLE: "implausible_magnitude"}


def quality_text(quality: int, exposure_flags: str = "") -> str:
    """Why one point is flagged, in words separated by ``;`` ("" when good)."""
    parts = [exposure_flags] if quality & EXPOSURE_FLAGGED else []
    parts += [word for bit, word in WORDS.items() if quality & bit]
    return ";".join(p for p in parts if p)


def quality_words(quality: np.ndarray, exposure_flags: np.ndarray) -> np.ndarray:
    """Per point: why it is flagged, in words ("" when good); ``exposure_flags`` per point."""
    out = np.full(len(quality), "", dtype=object)
    for i in np.flatnonzero(quality):  # only the (few) flagged points
        out[i] = quality_text(int(quality[i]), str(exposure_flags[i]))
    return out
