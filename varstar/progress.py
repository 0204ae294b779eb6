"""Progress bars for long commands, on the terminal only.

A command that may take more than a couple of seconds (many frames, many nights,
a fleet) takes a ``progress`` callback ``(done, total)``; the command line makes
one with :func:`progress_bar`, which draws a bar on stderr with ``tqdm`` when
stderr is a terminal and the output is not ``--json``, and does nothing
otherwise (a script, a pipe, a log file never gets bar characters).
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Callable, Iterator

Progress = Callable[[int, int], None]


def wanted(as_json: bool = False) -> bool:
    """Whether a bar may be drawn: stderr is a terminal and the output is not JSON."""
    try:
        return not as_json and sys.stderr.isatty()
    except (AttributeError, ValueError):  # a replaced or closed stderr
        return False


@contextlib.contextmanager
def progress_bar(what: str, *, as_json: bool = False, unit: str = "item") -> Iterator[Progress | None]:
    """A ``(done, total)`` callback drawing a bar labelled ``what`` on stderr, or None when no bar is wanted.

    Used as ``with progress_bar("frames", as_json=args.json) as progress: work(..., progress=progress)``;
    the bar is closed when the block ends, also on an error.
    """
    if not wanted(as_json):
        yield None
        return
    from tqdm import tqdm  # here: only a terminal run draws bars

    bar = tqdm(total=0, desc=what, unit=unit, file=sys.stderr, leave=False, dynamic_ncols=True)

    def update(done: int, total: int) -> None:
        if bar.total != total:
            bar.total = total
        bar.n = done
        bar.refresh()

    try:
        yield update
    finally:
        bar.close()
