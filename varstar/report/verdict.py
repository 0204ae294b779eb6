"""The verdict on a night, in one sentence, from its stored reduction report (good, fair or poor; rules below)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any


#: A night is "good" when at least this fraction of its exposures was used (varstar's own choice: one
#: exposure in ten lost to clouds, wind or bad frames is an ordinary night).
GOOD_MIN_USED = 0.90


#: Below this fraction of exposures used the night is "poor" (varstar's own choice: under 70 % used,
#: the light curve has gaps wide enough to miss a feature).
POOR_MIN_USED = 0.70


#: A check star scattering more than this multiple of its predicted rms makes the night at best "fair": the
#: errors understate the scatter by half again (varstar's own choice; a ratio near 1 is common practice's
#: sign of an error model that holds).
GOOD_MAX_CHECK_RATIO = 1.5


#: ... and more than this multiple makes it "poor" (the errors are off by a factor of two).
POOR_MAX_CHECK_RATIO = 2.0


#: Fewer comparison stars kept than this in some band makes the night at best "fair" (with two, one bad star
#: cannot be told from the other; common practice prefers three or more).
GOOD_MIN_KEPT = 3


#: Fewer than this in some band makes it "poor" (an ensemble needs two stars).
POOR_MIN_KEPT = 2


@dataclass(frozen=True)
class NightVerdict:
    """A night's verdict from its stored report (see :func:`night_verdict`).

    Attributes
    ----------
    verdict
        ``"good"``, ``"fair"`` or ``"poor"``.
    n_exposures, n_used
        Exposures of the night (every band) and how many the light curve uses.
    check_ratio
        The worst (largest) ratio of a check star's measured rms to its predicted rms
        over check stars and bands; None without a check star.
    check_star, check_band
        Which check star and band gave that ratio ("" when none).
    min_kept
        Fewest comparison stars kept in any band.
    reasons
        Why the night is not good, in words (empty for a good night).
    sentence
        The verdict in one sentence.
    """

    verdict: str
    n_exposures: int
    n_used: int
    check_ratio: float | None
    check_star: str
    check_band: str
    min_kept: int
    reasons: tuple[str, ...] = field(default_factory=tuple)
    sentence: str = ""


def night_verdict(report: dict[str, Any]) -> NightVerdict:
    """Judge a night from the report stored at ingest (:meth:`varstar.Archive.night_report`).

    Rules (the thresholds are this module's constants):

    - **poor** when fewer than :data:`POOR_MIN_USED` (70 %) of the exposures are
      used, when a check star scatters more than :data:`POOR_MAX_CHECK_RATIO`
      (2×) its predicted rms, or when a band keeps fewer than
      :data:`POOR_MIN_KEPT` (2) comparison stars;
    - else **fair** when fewer than :data:`GOOD_MIN_USED` (90 %) are used, a check
      star scatters more than :data:`GOOD_MAX_CHECK_RATIO` (1.5×) its prediction,
      or a band keeps fewer than :data:`GOOD_MIN_KEPT` (3) comparison stars;
    - else **good**.

    The check-star ratio is the largest over check stars and bands (a star with
    fewer than two points or no prediction does not count); a night without a
    check star is judged on the other rules, and the sentence says so.

    Parameters
    ----------
    report
        The stored night report (``n_exposures``, ``bands`` with ``n_used``,
        ``comparisons_kept`` and ``check_stars``).

    Returns
    -------
    NightVerdict
    """
    bands = report.get("bands") or {}
    total = int(report.get("n_exposures") or 0)
    used = int(sum(int(b.get("n_used") or 0) for b in bands.values()))
    ratio, star, band_of = None, "", ""
    for band, b in sorted(bands.items()):
        for sid, c in sorted((b.get("check_stars") or {}).items()):
            rms, pred, n = c.get("rms"), c.get("predicted_rms"), c.get("n") or 0
            if rms is None or pred is None or n < 2 or not (pred > 0) or not math.isfinite(rms):
                continue
            r = float(rms) / float(pred)
            if ratio is None or r > ratio:
                ratio, star, band_of = r, str(sid), str(band)
    min_kept = min((len(b.get("comparisons_kept") or []) for b in bands.values()), default=0)
    frac = used / total if total else 0.0
    poor, fair = [], []
    if total == 0:
        poor.append("no exposures")
    elif frac < POOR_MIN_USED:
        poor.append(f"only {100 * frac:.0f} % of the exposures used")
    elif frac < GOOD_MIN_USED:
        fair.append(f"{100 * (1 - frac):.0f} % of the exposures flagged")
    if ratio is not None and ratio > POOR_MAX_CHECK_RATIO:
        poor.append(f"check star scatter over {POOR_MAX_CHECK_RATIO:g}× predicted")
    elif ratio is not None and ratio > GOOD_MAX_CHECK_RATIO:
        fair.append(f"check star scatter over {GOOD_MAX_CHECK_RATIO:g}× predicted")
    if bands and min_kept < POOR_MIN_KEPT:
        poor.append(f"fewer than {POOR_MIN_KEPT} comparison stars kept in a band")
    elif bands and min_kept < GOOD_MIN_KEPT:
        fair.append(f"only {min_kept} comparison stars kept in a band")
    verdict = "poor" if poor else "fair" if fair else "good"
    reasons = tuple(poor + fair)
    check = (f"check star {star} scatter {ratio:.2f}× predicted in {band_of}" if ratio is not None
             else "no check star to compare")
    sentence = f"{verdict} night: {used} of {total} exposures used; {check}"
    if reasons:
        sentence += f" ({'; '.join(reasons)})"
    return NightVerdict(verdict, total, used, ratio, star, band_of, int(min_kept), reasons, sentence + ".")
