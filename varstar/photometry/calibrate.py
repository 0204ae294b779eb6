"""Applying master bias, dark and flat to a raw frame (ccdproc), in memory.

The order is the usual one (ccdproc's ``ccd_process``): subtract the bias,
subtract the dark scaled by the ratio of exposure times, divide by the flat
normalised to its mean.  The result is a new array; the user's files are never
written.
"""

from __future__ import annotations

import contextlib

import numpy as np

from ..errors import InputError
from .files import Masters, open_image
from .header import FrameRefused
from .settings import PhotometrySettings


def calibrate_frame(raw: np.ndarray, exptime_s: float, masters: Masters, settings: PhotometrySettings,
                    frame: str) -> np.ndarray:
    """The calibrated image of one raw frame (float64).

    Parameters
    ----------
    raw
        The frame's pixels as read (ADU).
    exptime_s
        The frame's exposure time, to scale the dark.
    masters
        The checked master frames (:func:`~varstar.photometry.files.check_masters`).
    settings
        For messages naming ``[photometry]`` keys.
    frame
        The frame's path, for messages.

    Raises
    ------
    FrameRefused
        The frame's size differs from the masters' (naming both files).
    """
    import astropy.units as u
    import ccdproc
    from astropy.nddata import CCDData

    if raw.shape != masters.shape:
        key, path = masters.items()[0]
        raise FrameRefused(f"{frame}: the frame is {raw.shape[1]} x {raw.shape[0]} pixels but the master {key} {path} "
                           f"is {masters.shape[1]} x {masters.shape[0]}; use masters taken with the same binning and window")
    with contextlib.ExitStack() as stack:
        # bias and dark stay memory-mapped (their pages are shared by every worker, not copied into
        # each; subtracting them from the float64 frame is exact); the flat is read as float64 so
        # that its normalisation by its mean is not rounded to the file's float32
        loaded = {}
        for key, path in masters.items():
            try:
                data, _ = stack.enter_context(open_image(path))
            except FrameRefused as exc:
                raise InputError(f"{settings.where(key)}: {exc}") from None
            loaded[key] = CCDData(np.asarray(data, dtype=np.float64) if key == "flat" else data, unit="adu")
        ccd = CCDData(np.asarray(raw, dtype=np.float64), unit="adu")
        with np.errstate(divide="ignore", invalid="ignore"):
            out = ccdproc.ccd_process(
                ccd,
                master_bias=loaded.get("bias"),
                dark_frame=loaded.get("dark"),
                master_flat=loaded.get("flat"),
                dark_exposure=masters.dark_exptime_s * u.s if "dark" in loaded else None,
                data_exposure=exptime_s * u.s if "dark" in loaded else None,
                dark_scale="dark" in loaded,
            )
        return np.asarray(out.data, dtype=np.float64)
