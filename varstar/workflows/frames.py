"""FITS frames to a measurement table: the shell around :mod:`varstar.photometry`.

``varstar measure`` writes the table (:func:`measure`); ``varstar ingest`` takes
frames as it takes tables (:func:`measured_table`): the frames are measured, the
table they give is read back by the same reader as any measurement file, and
the night is reduced and stored from it, so the archive keeps the measurements
varstar made beside their reduction.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from ..target import Target

def is_frame_input(path: str | Path) -> bool:
    """Whether ``path`` names frames rather than a measurement table: a FITS file
    (:func:`varstar.photometry.files.is_frame_name`) or a folder."""
    from ..photometry.files import is_frame_name  # here: ingest of tables needs none of photometry

    p = Path(path)
    return p.is_dir() or is_frame_name(p)


def check_photometry(target: Target) -> None:
    """Refuse a ``[photometry]`` table that measuring frames would refuse (naming the key), before anything is stored."""
    if "photometry" in target.extra:
        from ..photometry import photometry_settings

        photometry_settings(target)


def measure(
    target: Target,
    paths: Sequence[str | Path],
    *,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> Any:
    """Measure every star of ``target`` on the frames in ``paths`` (files or folders).

    Returns the :class:`varstar.photometry.MeasureResult`: the table, and the
    frames refused with their reasons (a run measures every good frame).
    """
    from ..photometry import find_frames, measure_frames, photometry_settings

    settings = photometry_settings(target)
    frames = find_frames(paths)
    return measure_frames(target, frames, settings=settings, workers=workers, progress=progress)


def measured_table(
    target: Target,
    paths: Sequence[str | Path],
    *,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> tuple[str, pd.DataFrame, str, Any]:
    """The frames as a measurement file would be: ``(source name, tidy table, SHA-256, MeasureResult)``.

    The table is written as CSV text and read back by
    :func:`varstar.measurements.parse_measurements`, so a night from frames
    meets the same checks as a night from a table; its checksum is that of the
    text, so the same frames measured again are recognised as already ingested.
    """
    from ..measurements import parse_measurements
    from ..photometry import measurement_csv

    res = measure(target, paths, workers=workers, progress=progress)
    data = measurement_csv(res.table)
    frames = sorted(pd.unique(res.table["frame"]).tolist())
    name = f"measured-{Path(str(frames[0])).name.split('.')[0]}-{len(frames)}frames.csv"
    table = parse_measurements(data, name, target.star_ids)
    return name, table, hashlib.sha256(data).hexdigest(), res
