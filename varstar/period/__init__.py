"""Period analysis: periodograms, phase dispersion, aliases, harmonic fits and prewhitening.

:func:`analyse` runs them all on one light curve and returns a :class:`PeriodResult`;
the modules hold one method each (see :mod:`varstar.period.analysis`).
"""

from varstar.period.analysis import PeriodResult, analyse

__all__ = ["PeriodResult", "analyse"]
