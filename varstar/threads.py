"""Fewer threads for the linear-algebra library where the problems are small.

numpy and scipy hand matrix products and factorisations to a BLAS library
(OpenBLAS in the PyPI wheels) that starts one thread per core.  For the many
small problems of this package (a night's ensemble, a harmonic fit of a few
dozen columns, the 2x2 to 20x20 systems of a periodogram) the threads cost more
to wake and synchronise than they save, and on a busy machine they fight the
other processes for the cores: ``benchmarks/bench_ingest.py --threads`` and
``benchmarks/bench_period.py --threads`` measure it.  The non-uniform FFTs of
the periodogram use their own threads (finufft, OpenMP), which this does not
touch.

:func:`limit_blas_threads` is a context manager (and :func:`blas_threads` a
decorator) built on threadpoolctl (https://github.com/joblib/threadpoolctl),
which changes the thread count of the BLAS libraries loaded in the process, for
the duration of the block only.

A library loaded only after the block has begun (scipy brings its own OpenBLAS,
loaded with ``scipy.linalg``) is not limited by it; :func:`limit_blas_threads`
therefore loads numpy's first, and ``preload=("scipy.linalg",)`` loads scipy's too
when the block will use it.
"""

from __future__ import annotations

import contextlib
import functools
import importlib
from collections.abc import Callable, Iterator, Sequence
from typing import Any, TypeVar

__all__ = ["SMALL_PROBLEM_THREADS", "limit_blas_threads", "blas_threads", "blas_thread_counts"]

F = TypeVar("F", bound=Callable[..., Any])

#: BLAS threads for code that solves many small problems.
SMALL_PROBLEM_THREADS = 1


@contextlib.contextmanager
def limit_blas_threads(max_threads: int = SMALL_PROBLEM_THREADS, *, preload: Sequence[str] = ()) -> Iterator[None]:
    """Within the block, the BLAS libraries use at most ``max_threads`` threads.

    Parameters
    ----------
    max_threads : int
        Threads per BLAS library (at least 1).
    preload : sequence of str
        Modules to import before the limit is set, so that the BLAS libraries they
        bring are limited too (e.g. ``"scipy.linalg"``).  numpy is always loaded.

    Notes
    -----
    Nested blocks restore the outer limit on exit.  Setting the limit costs well
    under a millisecond once threadpoolctl has been imported (a few milliseconds).
    """
    n = int(max_threads)
    if n < 1:
        raise ValueError(f"max_threads must be at least 1 (got {max_threads!r})")
    importlib.import_module("numpy")
    for name in preload:
        importlib.import_module(name)
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=n, user_api="blas"):
        yield


def blas_threads(max_threads: int = SMALL_PROBLEM_THREADS, *, preload: Sequence[str] = ()) -> Callable[[F], F]:
    """Decorator: run the function inside :func:`limit_blas_threads`."""

    def wrap(func: F) -> F:
        @functools.wraps(func)
        def inner(*args: Any, **kwargs: Any) -> Any:
            with limit_blas_threads(max_threads, preload=preload):
                return func(*args, **kwargs)

        return inner  # type: ignore[return-value]

    return wrap


def blas_thread_counts() -> dict[str, int]:
    """Threads of each loaded BLAS library, by file name (for reports and benchmarks)."""
    from threadpoolctl import threadpool_info

    return {info["filepath"].rsplit("/", 1)[-1]: int(info["num_threads"])
            for info in threadpool_info() if info.get("user_api") == "blas"}
