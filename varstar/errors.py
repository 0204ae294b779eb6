"""The one exception family of varstar.

Every expected mistake (bad input, a missing file, an archive conflict) raises a
:class:`VarstarError` whose message is written for a person: it names the file,
line or key and says what to do.  Only :mod:`varstar.cli` turns these into
``error: ...`` on stderr and a non-zero exit code; anything else is a bug and
keeps its traceback.
"""

from __future__ import annotations


class VarstarError(Exception):
    """Base class of every error varstar reports to a person."""

    exit_code = 2


class InputError(VarstarError):
    """A target description or measurement table is malformed or inconsistent."""


class ArchiveError(VarstarError):
    """An archive cannot be created, opened, read or changed as asked."""

    exit_code = 3


class ReductionError(VarstarError):
    """A night cannot be reduced (for example too few usable comparison stars)."""

    exit_code = 4


class OutputError(VarstarError):
    """A result file (CSV, plot, JSON) cannot be written where asked."""
