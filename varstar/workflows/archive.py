"""The public archive object: the stored data (:class:`varstar.archive.ArchiveStore`) plus the analyses.

``varstar.open_archive(path)`` returns an :class:`Archive`: everything the store
reads (light curve, nights, comparison stars, histories), and the analyses that
record their results in it (:meth:`Archive.period`, :meth:`Archive.time_extrema`)
or read the ephemeris in force (:meth:`Archive.predict`).  The analyses live in
this package so that the archive package never imports upward.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..archive import store
from . import extrema

if TYPE_CHECKING:  # pragma: no cover
    from ..target import Target
    from .periods import StoredPeriod


class Archive(store.ArchiveStore):
    """A per-target archive on disk, with its analyses (see the module docstring)."""

    def period(self, band: str = "all", star: str | None = None, *, store: bool = True, **options: Any) -> StoredPeriod:
        """Period analysis of the light curve, recorded in the archive's period history.

        ``band`` is a band name or ``"all"`` (multi-band); ``options`` go to
        :func:`varstar.workflows.periods.period_of_archive` and :func:`varstar.period.analyse`
        (``min_period``, ``max_period``, ``oversampling``, ``nterms``, ``harmonics``,
        ``bootstrap``, ``seed``, ``prewhitening``, ...).  Returns a
        :class:`varstar.workflows.periods.StoredPeriod` whose ``result`` is the
        :class:`varstar.period.PeriodResult`.
        """
        from .periods import period_of_archive

        return period_of_archive(self, band=band, star=star, store=store, **options)

    #: Time the extrema the nights cover, store the new timings, fit the ephemeris:
    #: :func:`varstar.workflows.extrema.timings_of_archive` as a method (its options are its signature's).
    time_extrema = extrema.timings_of_archive
    #: Coming extrema between two UTC dates: :func:`varstar.workflows.extrema.predict_of_archive` as a method.
    predict = extrema.predict_of_archive


def open_archive(path: str | Path) -> Archive:
    """Open an existing archive.  Reading never changes it; :meth:`Archive.period` and
    :meth:`Archive.time_extrema` record their results in it unless given ``store=False``
    (each change is atomic, under the archive's writer lock)."""
    arch = Archive(path)
    arch.check_format()
    return arch


def create_archive(path: str | Path, target: Target) -> Archive:
    """Create a new, empty archive for ``target`` at ``path`` (never overwrites).

    A ``[transformation]`` table in the target description (values, or a
    reference to a setups file relative to the target file) becomes the
    archive's first coefficient set.
    """
    from ..setups import resolve_transformation
    from .frames import check_photometry

    check_photometry(target)
    coeffs = None
    if "transformation" in target.extra:
        coeffs = resolve_transformation(target.extra["transformation"], Path(target.source))
    store.create_archive(path, target, coeffs)
    return Archive(path)
