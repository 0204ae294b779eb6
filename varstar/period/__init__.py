"""Period analysis: periodograms, phase dispersion, aliases, harmonic fits and prewhitening.

:func:`analyse` runs them all on one light curve and returns a :class:`PeriodResult`;
the modules hold one method each (see :mod:`varstar.period.analysis`).
:func:`phased_model` and :func:`phased_data` put the result's model and the light
curve on the phase of the adopted period.
"""

from varstar.period.analysis import PeriodResult, analyse
from varstar.period.phased import fold_phase, phased_data, phased_model

__all__ = ["PeriodResult", "analyse", "fold_phase", "phased_data", "phased_model"]
