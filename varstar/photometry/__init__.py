"""FITS frames -> the measurement table: aperture photometry of a target's stars.

For each frame (calibrated, or raw with master bias, dark and flat):

* the header gives the mid-exposure time (JD, UTC), the band of its filter,
  the exposure, airmass, gain, read noise and saturation level
  (:mod:`.header`);
* the frame's celestial WCS gives each star's predicted pixel, refined by a
  centroid in a small box (:mod:`.positions`);
* each star's light in a circular aperture, minus a sigma-clipped annulus
  background, gives an instrumental magnitude -2.5 log10(counts / exposure)
  with its error from the CCD equation of Merline & Howell (1995)
  (:mod:`.measure`, :mod:`.noise`); the aperture is a multiple of the frame's
  FWHM, measured from the comparison stars;
* what is not to be used is flagged with its reason.

Frames are measured in parallel processes, one at a time per process
(:mod:`.run`).  The table has one row per star per measured frame
(:data:`MEASURE_COLUMNS`); :func:`measurement_csv` writes it in the long form
varstar's measurement reader takes.  The ``[photometry]`` table of the target
description sets the aperture, annulus, detector values, header keywords,
filter names and master frames (:mod:`.settings` documents every key).

Flag codes (column ``flag``; ``flag_reason`` gives the words, ";"-separated
when there are several; the code is the first's):

====  ================  =====================================================
code  word              meaning
====  ================  =====================================================
1     off_frame         the star or part of its aperture lies off the frame
2     no_centroid       nothing above the background in the centroid box
3     centroid_wander   centroid further than ``max_shift_px`` from the WCS position
4     bad_pixels        NaN or infinite pixels in the aperture
5     sky_unusable      too few usable pixels in the annulus
6     saturated         highest raw pixel at or above the saturation level
7     nonlinear         highest raw pixel at or above ``nonlinear_adu``
8     no_signal         net counts not positive, or signal-to-noise below 1
====  ================  =====================================================

Codes 1-5 leave the magnitude empty; 6-8 keep it (it is not to be used).
Heavy libraries (astropy, photutils, ccdproc, pandas) are imported inside the
functions that use them.
"""

from __future__ import annotations

from .files import find_frames
from .measure import FLAGS
from .run import MEASURE_COLUMNS, MeasureResult, measure_frames, measurement_csv
from .settings import PhotometrySettings, photometry_settings

__all__ = [
    "FLAGS",
    "MEASURE_COLUMNS",
    "MeasureResult",
    "PhotometrySettings",
    "find_frames",
    "measure_frames",
    "measurement_csv",
    "photometry_settings",
]
