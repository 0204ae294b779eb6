"""varstar: calibrated variable-star light curves from instrumental magnitudes.

The public API is small; see the README for the command line::

    import varstar
    arch = varstar.open_archive("demo/target.h5")
    lc = arch.lightcurve(band="V")        # a pandas DataFrame
    found = arch.period()                 # period analysis, stored in the archive's history
    report = varstar.verify("demo/target.h5")

Names are imported lazily so that ``varstar --help`` starts quickly.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_API = {
    "Archive": "varstar.workflows.archive",
    "create_archive": "varstar.workflows.archive",
    "open_archive": "varstar.workflows.archive",
    "open_fleet": "varstar.fleet",
    "VarstarError": "varstar.errors",
    "InputError": "varstar.errors",
    "ArchiveError": "varstar.errors",
    "ReductionError": "varstar.errors",
    "read_measurements": "varstar.measurements",
    "ingest": "varstar.workflows.night",
    "reduce_night": "varstar.workflows.reduce",
    "remove_night": "varstar.workflows.night",
    "edit_target": "varstar.workflows.describe",
    "transform_archive": "varstar.workflows.standard",
    "verify": "varstar.archive.verify",
    "upgrade": "varstar.archive.verify",
    "analyse_period": "varstar.period",
    "Ephemeris": "varstar.timings",
    "Target": "varstar.target",
    "read_target": "varstar.target",
}

__all__ = sorted(_API) + ["__version__"]


_RENAMED = {"analyse_period": "analyse"}


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(importlib.import_module(_API[name]), _RENAMED.get(name, name))
    raise AttributeError(f"module 'varstar' has no attribute {name!r}")


def __dir__() -> list[str]:
    return __all__
