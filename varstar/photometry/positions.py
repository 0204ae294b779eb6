"""Where the stars are on a frame: WCS prediction, then a centroid in a small box.

varstar does not plate-solve: a frame must carry a celestial WCS
(Greisen & Calabretta 2002; Calabretta & Greisen 2002), read by
:class:`astropy.wcs.WCS`.  Positions are 0-based pixel coordinates, the centre
of the first pixel being (0, 0) (astropy's and photutils' convention).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from typing import Any

import numpy as np

from .header import FrameRefused


def celestial_wcs(header: Mapping[str, Any], frame: str) -> Any:
    """The celestial part of the frame's WCS (an :class:`astropy.wcs.WCS`).

    Raises
    ------
    FrameRefused
        The header has no celestial WCS, or one astropy cannot read.
    """
    from astropy.wcs import WCS

    with warnings.catch_warnings():
        # astropy notes header cards it fixed (dates, units); they do not change the projection
        warnings.simplefilter("ignore")
        try:
            wcs = WCS(header)
        except Exception as exc:  # astropy raises several types for a broken WCS; each is the frame's fault
            raise FrameRefused(f"{frame}: its WCS cannot be read ({type(exc).__name__}: {exc}); "
                               "give the frame a valid celestial WCS (plate-solve it first)") from None
    if not wcs.has_celestial:
        raise FrameRefused(f"{frame}: the header has no celestial WCS (CTYPE1/CTYPE2 such as 'RA---TAN'/'DEC--TAN', "
                           "CRVAL, CRPIX, CD or CDELT); varstar does not plate-solve: solve the frame first")
    return wcs.celestial


def predict_pixels(wcs: Any, ra_deg: np.ndarray, dec_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """0-based pixel positions of ICRS coordinates on a frame with celestial WCS ``wcs``.

    The coordinates are transformed from ICRS to the WCS's own celestial frame
    (``RADESYS``: FK5, ICRS, ...) by astropy before the projection, distortion
    terms (SIP, ...) included.  A position the projection cannot give is NaN.
    """
    from astropy.coordinates import SkyCoord

    from ..timescale import offline_astropy

    with offline_astropy(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sky = SkyCoord(np.asarray(ra_deg, float), np.asarray(dec_deg, float), unit="deg", frame="icrs")
        x, y = wcs.world_to_pixel(sky)
    return np.atleast_1d(np.asarray(x, float)), np.atleast_1d(np.asarray(y, float))


def on_frame(x: np.ndarray, y: np.ndarray, shape: tuple[int, int], margin: float = 0.0) -> np.ndarray:
    """True where (x, y) lies within the pixel centres of a frame of ``shape`` (ny, nx), ``margin`` pixels inside."""
    ny, nx = shape
    with np.errstate(invalid="ignore"):
        return ((x >= margin) & (x <= nx - 1 - margin) & (y >= margin) & (y <= ny - 1 - margin)
                & np.isfinite(x) & np.isfinite(y))


def box_centroid(data: np.ndarray, mask: np.ndarray | None = None) -> tuple[float, float]:
    """Centroid of one box: the centre of mass of what lies above the box's background.

    The background is the median of the box's edge pixels (with a box a few
    FWHM wide they sample the sky, and the median ignores a neighbour's wing);
    pixels below it count as zero, so that noise under the sky level cannot pull
    the centroid away (common practice).  The centre of mass itself is
    :func:`photutils.centroids.centroid_com`.  Returns NaN, NaN where nothing
    lies above the background.

    Written here because photutils' centroid functions expect a
    background-subtracted image, and each star's box needs its own background.
    """
    from photutils.centroids import centroid_com

    d = np.array(data, dtype=float)
    good = np.isfinite(d)
    if mask is not None:
        good &= ~np.asarray(mask, bool)
    edge = np.ones(d.shape, bool)
    edge[1:-1, 1:-1] = False
    ring = d[edge & good]
    if ring.size < 3 or good.sum() < 3:
        return np.nan, np.nan
    w = np.where(good, np.clip(d - np.median(ring), 0.0, None), 0.0)
    if not w.sum() > 0:
        return np.nan, np.nan
    xc, yc = centroid_com(w)
    return float(xc), float(yc)


def centroids(data: np.ndarray, x0: np.ndarray, y0: np.ndarray, box_px: int, *,
              iterations: int = 2) -> tuple[np.ndarray, np.ndarray]:
    """Refine positions by the centroid in a box (photutils ``centroid_sources`` with :func:`box_centroid`).

    Each pass centres the box on the previous position, so that a star found
    near the edge of the first box is measured in a box around it on the next
    (the centre of mass of a cut-off star is pulled towards the box's centre).

    Parameters
    ----------
    data
        The image.
    x0, y0
        Starting positions (0-based pixels), all on the frame.
    box_px
        Odd side of the box (pixels).
    iterations
        Number of passes.

    Returns
    -------
    x, y
        Centroids; NaN where a pass found nothing above the background or left the frame.
    """
    from photutils.centroids import centroid_sources

    x = np.asarray(x0, float).copy()
    y = np.asarray(y0, float).copy()
    for _ in range(iterations):
        ok = on_frame(x, y, data.shape)
        if not ok.any():
            break
        xi, yi = centroid_sources(data, x[ok], y[ok], box_size=box_px, centroid_func=box_centroid)
        x[ok], y[ok] = xi, yi
        x[~ok], y[~ok] = np.nan, np.nan
    return x, y
