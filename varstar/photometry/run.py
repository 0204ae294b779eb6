"""Measuring many frames: one frame per task, in parallel processes, into one long table.

Each frame is opened, checked, calibrated and measured inside the task that
measures it (:func:`measure_file`), so a frame's pixels live in one worker
process for the time of its measurement and never all frames at once; a task
returns a few hundred numbers.  A frame that cannot be measured is listed with
its reason (:class:`~varstar.photometry.header.FrameRefused`) and the run goes
on; only when no frame at all can be measured is the run refused.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..inputs import id_problem, shown
from ..results import Result
from .files import Masters, check_masters, open_image
from .header import FrameRefused, read_frame_info
from .measure import Detector, measure_stars
from .positions import celestial_wcs, on_frame, predict_pixels
from .settings import PhotometrySettings, photometry_settings

#: Columns of the measurement table, in order: the long form the measurement reader takes, then diagnostics.
MEASURE_COLUMNS = ("frame", "jd", "band", "star", "mag", "mag_err", "exptime", "airmass", "flag", "flag_reason",
                   "fwhm_px", "sky", "peak", "x", "y")
#: How many refusal reasons the error of a run that measured nothing quotes.
_QUOTED_REASONS = 3


@dataclass(frozen=True)
class FieldStars:
    """The stars to measure, as plain tuples a worker process receives.

    Attributes
    ----------
    ids
        Star ids, in the target description's order.
    ra_deg, dec_deg
        ICRS positions (degrees).
    comparison
        True for comparison stars (the FWHM is measured from them).
    bands
        Bands of the comparison stars' catalogue magnitudes (the filter names a frame may carry unmapped).
    source
        The target description, for messages.
    """

    ids: tuple[str, ...]
    ra_deg: tuple[float, ...]
    dec_deg: tuple[float, ...]
    comparison: tuple[bool, ...]
    bands: tuple[str, ...]
    source: str = "<string>"


def field_stars(target: Any) -> FieldStars:
    """The target's stars with their positions.

    Raises
    ------
    InputError
        A star without a position, naming it and saying to add ``ra``/``dec``.
    """
    for s in target.stars:
        if s.ra_deg is None or s.dec_deg is None:
            raise InputError(f"{target.source}: star '{s.id}' has no position, so it cannot be measured on FITS frames; "
                             "add ra and dec to its [[stars]] table")
    return FieldStars(
        ids=tuple(s.id for s in target.stars),
        ra_deg=tuple(float(s.ra_deg) for s in target.stars),
        dec_deg=tuple(float(s.dec_deg) for s in target.stars),
        comparison=tuple(s.role == "comparison" for s in target.stars),
        bands=tuple(sorted(target.catalog_bands())),
        source=target.source,
    )


def measure_file(path: str | Path, stars: FieldStars, settings: PhotometrySettings,
                 masters: Masters | None = None) -> dict[str, np.ndarray]:
    """Measure every star on one FITS frame.

    Parameters
    ----------
    path
        The frame.
    stars
        The stars and the catalogue bands (:func:`field_stars`).
    settings
        The ``[photometry]`` settings.
    masters
        Checked master frames to apply first, or None.

    Returns
    -------
    dict
        The frame's rows of the measurement table, column name -> array (:data:`MEASURE_COLUMNS`).

    Raises
    ------
    FrameRefused
        Naming the frame and why: unreadable, no WCS, no usable time, an
        unknown filter, no gain, no star on the frame, a master of another size, ...
    """
    from ..timescale import offline_astropy

    frame = str(path)
    name = Path(path).name
    why = id_problem(name)
    if why:
        raise FrameRefused(f"{frame}: the file name {why}; frames are named in the table by their file names")
    n = len(stars.ids)
    with open_image(path) as (raw, headers):
        info = read_frame_info(headers, settings, stars.bands, frame)
        wcs = celestial_wcs(headers[0], frame)
        x0, y0 = predict_pixels(wcs, np.asarray(stars.ra_deg), np.asarray(stars.dec_deg))
        if not on_frame(x0, y0, raw.shape).any():
            raise FrameRefused(f"{frame}: none of the stars of {stars.source} falls on this frame "
                               "(a frame of another field, or a wrong WCS?)")
        if masters is not None:
            from .calibrate import calibrate_frame

            data = calibrate_frame(raw, info.exptime_s, masters, settings, frame)
        else:
            data = raw
        if masters is not None and masters.dark is not None:
            dark_e = masters.dark_adu_per_s * info.exptime_s * info.gain_e_per_adu
        else:
            dark_e = settings.dark_current_e_per_s * info.exptime_s
        detector = Detector(info.gain_e_per_adu, info.read_noise_e, dark_e, info.saturation_adu, settings.nonlinear_adu)
        with offline_astropy():  # astropy.stats and photutils: no download, warnings muted
            m = measure_stars(data, x0, y0, np.asarray(stars.comparison), settings, detector, info.exptime_s,
                              raw=raw, frame=frame)
    return {
        "frame": np.full(n, name, dtype=object),
        "jd": np.full(n, info.jd_utc),
        "band": np.full(n, info.band, dtype=object),
        "star": np.asarray(stars.ids, dtype=object),
        "mag": m.mag,
        "mag_err": m.mag_err,
        "exptime": np.full(n, info.exptime_s),
        "airmass": np.full(n, info.airmass),
        "flag": m.flag,
        "flag_reason": m.flag_reason,
        "fwhm_px": np.full(n, m.fwhm_px),
        "sky": m.sky,
        "peak": m.peak,
        "x": m.x,
        "y": m.y,
    }


def _task(index: int, path: str, stars: FieldStars, settings: PhotometrySettings,
          masters: Masters | None) -> tuple[int, dict[str, np.ndarray] | None, str | None]:
    """One frame in a worker: (index, columns, None) or (index, None, the reason it was refused)."""
    try:
        return index, measure_file(path, stars, settings, masters), None
    except InputError as exc:  # FrameRefused, or a master that vanished during the run
        return index, None, str(exc)


@dataclass(frozen=True)
class MeasureResult(Result):
    """The measurement table of a set of frames, and the frames refused.

    Attributes
    ----------
    table
        One row per star per measured frame, columns :data:`MEASURE_COLUMNS`,
        frames in the order given, stars in the target description's order.
    refused
        ``{"frame": file name, "reason": message}`` for each frame not measured, in the order given.
    n_frames
        Frames examined (measured + refused).
    """

    # The table is written as CSV (measurement_csv), not as JSON: to_dict() leaves it out and gives its size.
    _json_exclude = ("table",)

    table: Any
    refused: tuple[dict[str, str], ...]
    n_frames: int

    @property
    def n_measured(self) -> int:
        """Frames measured."""
        return self.n_frames - len(self.refused)

    def to_dict(self) -> dict[str, Any]:
        out = super().to_dict()
        out["n_measured"] = self.n_measured
        out["n_rows"] = int(len(self.table))
        return out


def _workers(workers: int | None, n_frames: int) -> int:
    if workers is None:
        # the cores this process may run on (a container or CPU affinity may allow fewer than the machine has)
        workers = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise InputError(f"workers must be a whole number of processes, 1 or more; got {shown(workers)}")
    return max(1, min(workers, n_frames))


def measure_frames(target: Any, frames: Sequence[Path], *, settings: PhotometrySettings | None = None,
                   workers: int | None = None, progress: Callable[[int, int], None] | None = None) -> MeasureResult:
    """Measure every star of ``target`` on each frame.

    Parameters
    ----------
    target
        A :class:`varstar.target.Target` whose stars all have ``ra``/``dec``.
    frames
        FITS files (see :func:`~varstar.photometry.files.find_frames`).
    settings
        The ``[photometry]`` settings; read from ``target`` when None.
    workers
        Processes measuring frames at once (default: the number of cores); 1
        measures in this process.
    progress
        Called as ``progress(done, total)`` after each frame, measured or refused.

    Returns
    -------
    MeasureResult

    Raises
    ------
    InputError
        A star without a position, bad ``[photometry]`` settings or master
        frames, two frames with the same file name, no frames, or no frame
        that could be measured (the first reasons quoted).
    """
    import pandas as pd

    settings = photometry_settings(target) if settings is None else settings
    stars = field_stars(target)
    paths = [Path(f) for f in frames]
    if not paths:
        raise InputError("no frames to measure: name FITS files or folders that hold them")
    seen: dict[str, Path] = {}
    for p in paths:
        if p.name in seen:
            raise InputError(f"two frames are named {shown(p.name)} ({seen[p.name]} and {p}); the table names frames "
                             "by file name, so measure them in separate runs or rename one")
        seen[p.name] = p
    masters = check_masters(settings)
    n = len(paths)
    n_workers = _workers(workers, n)
    outcome: list[tuple[dict[str, np.ndarray] | None, str | None]] = [(None, None)] * n
    if n_workers == 1:
        for k, p in enumerate(paths):
            _, cols, why = _task(k, str(p), stars, settings, masters)
            outcome[k] = (cols, why)
            if progress is not None:
                progress(k + 1, n)
    else:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor, as_completed

        # "spawn": a fresh interpreter per worker, the same on every platform, and no copy of the
        # parent's threads or open files (forking a process with threads can deadlock).
        with ProcessPoolExecutor(max_workers=n_workers, mp_context=multiprocessing.get_context("spawn")) as pool:
            futures = [pool.submit(_task, k, str(p), stars, settings, masters) for k, p in enumerate(paths)]
            try:
                for done, fut in enumerate(as_completed(futures), start=1):
                    k, cols, why = fut.result()
                    outcome[k] = (cols, why)
                    if progress is not None:
                        progress(done, n)
            except BaseException:
                pool.shutdown(wait=True, cancel_futures=True)
                raise
    refused = tuple({"frame": paths[k].name, "reason": why} for k, (cols, why) in enumerate(outcome) if cols is None)
    measured = [cols for cols, _ in outcome if cols is not None]
    if not measured:
        reasons = "; ".join(r["reason"] for r in refused[:_QUOTED_REASONS])
        more = f" (and {len(refused) - _QUOTED_REASONS} more)" if len(refused) > _QUOTED_REASONS else ""
        raise InputError(f"no frame could be measured ({n} given): {reasons}{more}")
    table = pd.DataFrame({c: np.concatenate([cols[c] for cols in measured]) for c in MEASURE_COLUMNS})
    table["flag"] = table["flag"].astype(np.int64)
    return MeasureResult(table=table, refused=refused, n_frames=n)


def measurement_csv(table: Any) -> bytes:
    """The measurement table as UTF-8 CSV: a header line, then one line per row, ``\\n`` line ends.

    Times are written with 8 decimals (under a millisecond); other numbers in
    full (the shortest text that reads back as the same float); NaN as an empty
    cell.  Exactly what varstar's measurement reader takes.
    """
    out = table.loc[:, list(MEASURE_COLUMNS)].copy()
    jd = out["jd"].to_numpy(dtype=float)
    out["jd"] = np.where(np.isfinite(jd), np.char.mod("%.8f", jd), "")
    return out.to_csv(index=False, lineterminator="\n", na_rep="").encode("utf-8")
