"""How the measurement reader words what it refuses: the place, a cell, a list of names.

Every message of :mod:`varstar.measurements` starts with the file (and the
line where there is one); cells and lists of names are shortened, since a
damaged file may hold a megabyte in one cell or a header of 100,000 names.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..errors import InputError

#: How many names a message lists at most (a header or a target may have thousands).
_LISTED = 12


def fail(source: str, line: int | None, msg: str) -> InputError:
    """The error for a fault in ``source`` at ``line`` (None: the file as a whole).

    Parameters
    ----------
    source
        The file's name as given (usually its path).
    line
        The 1-based line number, as an editor shows it, or None.
    msg
        What is wrong and what to do.

    Returns
    -------
    InputError
        To be raised by the caller; its message reads ``"<source>, line <n>: <msg>"``.
    """
    where = f"{source}, line {line}" if line is not None else source
    return InputError(f"{where}: {msg}")


def listing(names: Sequence[str]) -> str:
    """At most :data:`_LISTED` names, comma-separated, and how many more."""
    shown = ", ".join(str(n) for n in names[:_LISTED])
    return shown + (f" and {len(names) - _LISTED} more" if len(names) > _LISTED else "")


def shown_cell(text: str) -> str:
    """A cell for a message: its repr, shortened if long (a damaged file may hold a megabyte in one cell)."""
    r = repr(text)
    return r if len(r) <= 50 else r[:40] + f"...' ({len(text)} characters)"
