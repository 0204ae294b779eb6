"""Aperture photometry of a frame's stars: the computational core (arrays in, arrays out).

For one image and the predicted pixel positions of its stars,
:func:`measure_stars`

1. refines each position by a centroid in a small box
   (:func:`~varstar.photometry.positions.centroids`); a star whose centroid
   wanders more than ``max_shift_px`` from the prediction is flagged, never
   moved to whatever it found;
2. measures the frame's FWHM from the comparison stars (:func:`frame_fwhm`:
   the FWHM of the Gaussian with the same second moments, photutils
   ``ApertureStats.fwhm``, median over the stars);
3. sums each star's light in a circular aperture (photutils, exact pixel
   overlap) minus the background per pixel times the aperture's area; the
   background is the sigma-clipped mean of an annulus (:func:`sky_levels`);
4. turns the net counts into an instrumental magnitude, -2.5 log10(counts /
   exposure), with its error from the CCD equation
   (:mod:`~varstar.photometry.noise`);
5. flags what is not to be used (:data:`FLAGS`).

All stars of a frame are measured together: photutils takes arrays of
positions.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..results import Result
from .header import FrameRefused
from .noise import ccd_variance_e, instrumental_magnitude, magnitude_error
from .positions import centroids, on_frame
from .settings import PhotometrySettings

#: Flag codes (0 = good) and their words, in order of precedence: a row flagged for several
#: reasons carries the code of the first and the words of all, separated by ";".
FLAGS = {
    "off_frame": 1,        # the star, or part of its aperture, lies off the frame
    "no_centroid": 2,      # nothing above the background in the centroid box
    "centroid_wander": 3,  # the centroid lies more than max_shift_px from the WCS position
    "bad_pixels": 4,       # NaN or infinite pixels in the aperture
    "sky_unusable": 5,     # too few background pixels in the annulus
    "saturated": 6,        # highest raw pixel in the aperture at or above the saturation level
    "nonlinear": 7,        # highest raw pixel in the detector's non-linear range
    "no_signal": 8,        # net counts not positive, or signal-to-noise below 1
}
#: Reasons for which no magnitude is given (NaN): the aperture did not measure the star's light alone.
UNMEASURED = ("off_frame", "no_centroid", "centroid_wander", "bad_pixels", "sky_unusable")
#: Fewest background pixels for a usable sky level (our choice; fewer, and a star or bad column
#: in the annulus can no longer be clipped reliably).
MIN_SKY_PIXELS = 20
#: Sigma clipping of the annulus (3 sigma, iterated; common practice).
SKY_CLIP_SIGMA = 3.0
SKY_CLIP_ITERS = 10
#: A star used for the FWHM must peak this many background sigmas above the background (common
#: practice: second moments of fainter stars are dominated by noise).
FWHM_DETECTION_SIGMA = 5.0
#: The FWHM's second pass uses at most this many stars, the brightest (the median of ten is already
#: steady, and the moments cost most of a frame's time).
FWHM_STARS = 10


@dataclass(frozen=True)
class Detector:
    """The detector's numbers for one frame.

    Attributes
    ----------
    gain_e_per_adu, read_noise_e
        Gain and read noise.
    dark_e
        Dark electrons per pixel accumulated during this exposure (their
        noise stays after a dark is subtracted).
    saturation_adu, nonlinear_adu
        Raw levels at which a star is flagged (None: not checked).
    """

    gain_e_per_adu: float
    read_noise_e: float
    dark_e: float = 0.0
    saturation_adu: float | None = None
    nonlinear_adu: float | None = None


@dataclass(frozen=True)
class StarMeasures(Result):
    """The measurement of every star of one frame (arrays in the order of the input positions).

    Attributes
    ----------
    x, y
        0-based pixel position measured at: the centroid, or the WCS
        prediction where there is none.
    fwhm_px
        The frame's FWHM (NaN where it could not be measured).
    aperture_px, annulus_px
        Radii used (pixels).
    sky, sky_std, n_sky
        Background per pixel (ADU; sigma-clipped mean of the annulus), its
        scatter per pixel and the number of pixels it comes from.
    counts, n_pix
        Net counts in the aperture (ADU) and the aperture's area (pixels).
    peak
        Highest raw pixel in the aperture (ADU, background included).
    mag, mag_err
        Instrumental magnitude and its 1-sigma error (NaN where not measured).
    snr
        Signal-to-noise ratio of the counts.
    flag, flag_reason
        0 and "" for a good measurement, else :data:`FLAGS` code and words.
    """

    x: np.ndarray
    y: np.ndarray
    fwhm_px: float
    aperture_px: float
    annulus_px: tuple[float, float]
    sky: np.ndarray
    sky_std: np.ndarray
    n_sky: np.ndarray
    counts: np.ndarray
    n_pix: np.ndarray
    peak: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    snr: np.ndarray
    flag: np.ndarray
    flag_reason: np.ndarray


def sky_levels(data: np.ndarray, positions: np.ndarray, r_in: float, r_out: float
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Background per pixel around each position: sigma-clipped mean, scatter and pixel count of an annulus.

    The mean, not the median: the CCD equation's background term
    (n_pix^2 sigma^2 / n_B, Merline & Howell 1995) is the variance of a mean of
    n_B pixels; a median's is pi/2 times larger for Gaussian noise (from
    memory).  Clipping at 3 sigma removes stars in the annulus and costs a
    Gaussian background a fraction of a percent of its pixels.

    Returns
    -------
    sky, std, n
        Per position (ADU, ADU, pixels used); NaN and 0 where the annulus has no usable pixel.
    """
    from astropy.stats import sigma_clip
    from photutils.aperture import CircularAnnulus

    # The annulus pixels (photutils masks, "center" method) of all stars as the rows of one
    # NaN-padded array, clipped by astropy's sigma_clip along the rows in one call.  This is what
    # photutils' ApertureStats(sigma_clip=SigmaClip(...)).mean computes (the tests compare them),
    # but ApertureStats clips star by star on masked arrays, about ten times slower, and the
    # background is most of a frame's measuring time.
    masks = CircularAnnulus(positions, r_in, r_out).to_mask(method="center")
    values = [m.get_values(data) for m in (masks if isinstance(masks, list) else [masks])]
    width = max((v.size for v in values), default=0)
    n_stars = len(values)
    if width == 0:
        return np.full(n_stars, np.nan), np.full(n_stars, np.nan), np.zeros(n_stars)
    table = np.full((n_stars, width), np.nan)
    for k, v in enumerate(values):
        table[k, : v.size] = v
    table[~np.isfinite(table)] = np.nan
    with warnings.catch_warnings():
        # the NaN padding is meant (astropy says it clipped it), and a row may be all NaN (an annulus off the frame)
        warnings.simplefilter("ignore")
        kept = sigma_clip(table, sigma=SKY_CLIP_SIGMA, maxiters=SKY_CLIP_ITERS, axis=1, masked=False,
                          cenfunc="median", stdfunc="std")
        n = np.isfinite(kept).sum(axis=1).astype(float)
        return np.nanmean(kept, axis=1), np.nanstd(kept, axis=1), n


def moment_fwhm(data: np.ndarray, raw: np.ndarray, positions: np.ndarray, sky: np.ndarray, sky_std: np.ndarray,
                r_window: float, limit_adu: float | None) -> tuple[np.ndarray, np.ndarray]:
    """FWHM (pixels) of each star from its second moments within ``r_window``; NaN for stars not to be used.

    photutils ``ApertureStats.fwhm``: the circular FWHM of the Gaussian with
    the same second central moments as the background-subtracted light.  A star
    is not used when it does not peak :data:`FWHM_DETECTION_SIGMA` sigmas above
    its background, or when its highest raw pixel reaches ``limit_adu`` (a
    saturated core widens the profile).

    Returns
    -------
    fwhm, height
        Per star: the FWHM (NaN where not to be used) and its peak above the background (ADU).
    """
    from photutils.aperture import ApertureStats, CircularAperture

    ok_sky = np.isfinite(sky)
    aperture = CircularAperture(positions, r_window)
    st = ApertureStats(data, aperture, local_bkg=np.where(ok_sky, sky, 0.0))
    fwhm = np.atleast_1d(np.asarray(st.fwhm.value, float))
    height = np.atleast_1d(np.asarray(st.max, float))
    with np.errstate(invalid="ignore"):
        good = ok_sky & (height > FWHM_DETECTION_SIGMA * sky_std) & np.isfinite(fwhm) & (fwhm > 0)
        if limit_adu is not None:
            good &= np.atleast_1d(np.asarray(ApertureStats(raw, aperture).max, float)) < limit_adu
    return np.where(good, fwhm, np.nan), height


def frame_fwhm(data: np.ndarray, raw: np.ndarray, x: np.ndarray, y: np.ndarray, box_px: int,
               limit_adu: float | None) -> float:
    """The frame's FWHM (pixels): the median of the stars' second-moment FWHMs, in two passes.

    First within a window of half the centroid box, with the background of an
    annulus from one to one and a half box sizes; then, for the
    :data:`FWHM_STARS` brightest stars the first pass could use, within twice
    that first FWHM, with the background of an annulus 3 to 5 FWHM out (a
    window of 2 FWHM holds all but 2e-5 of a Gaussian star's light, so the
    moments are not cut short).  NaN where no star can be used.

    Parameters
    ----------
    data, raw
        The image measured and its raw pixels (for the saturation check).
    x, y
        Positions of the stars to use.
    box_px
        The centroid box.
    limit_adu
        Raw level from which a star is not used (saturation or non-linearity), or None.
    """
    if x.size == 0:
        return float("nan")
    pos = np.column_stack([x, y])
    sky, std, _ = sky_levels(data, pos, float(box_px), 1.5 * box_px)
    first, height = moment_fwhm(data, raw, pos, sky, std, box_px / 2.0, limit_adu)
    usable = np.flatnonzero(np.isfinite(first))
    if usable.size == 0:
        return float("nan")
    best = usable[np.argsort(-height[usable], kind="stable")[:FWHM_STARS]]
    f1 = float(np.median(first[best]))
    window = max(2.0 * f1, 2.0)
    sky, std, _ = sky_levels(data, pos[best], max(3.0 * f1, window + 1.0), max(5.0 * f1, window + 6.0))
    second, _ = moment_fwhm(data, raw, pos[best], sky, std, window, limit_adu)
    return float(np.nanmedian(second)) if np.isfinite(second).any() else float("nan")


def _reasons(conditions: dict[str, np.ndarray], n: int) -> tuple[np.ndarray, np.ndarray]:
    """Flag codes (the first reason's) and words (all reasons, ';'-separated) from boolean arrays by reason."""
    flag = np.zeros(n, dtype=np.int64)
    words = [[] for _ in range(n)]
    for reason in FLAGS:  # in order of precedence
        hit = conditions.get(reason)
        if hit is None:
            continue
        for i in np.flatnonzero(hit):
            if not words[i]:
                flag[i] = FLAGS[reason]
            words[i].append(reason)
    return flag, np.asarray([";".join(w) for w in words], dtype=object)


def measure_stars(data: np.ndarray, x0: np.ndarray, y0: np.ndarray, for_fwhm: np.ndarray,
                  settings: PhotometrySettings, detector: Detector, exptime_s: float, *,
                  raw: np.ndarray | None = None, frame: str = "<image>") -> StarMeasures:
    """Measure every star of one image.

    Parameters
    ----------
    data
        The (calibrated) image, 2-D; NaN marks bad pixels.
    x0, y0
        Predicted 0-based pixel positions (from the WCS); NaN where unknown.
    for_fwhm
        True for the stars the FWHM is measured from (the comparison stars);
        where none of them can be used, every star found is tried.
    settings
        Aperture, annulus, centroid box and largest shift.
    detector
        Gain, read noise, dark, saturation and non-linearity levels.
    exptime_s
        Exposure time (s), for the magnitudes.
    raw
        The raw pixels (ADU as read, before calibration) for the peak and the
        saturation check; ``data`` when not given.
    frame
        The frame's name, for messages.

    Returns
    -------
    StarMeasures

    Raises
    ------
    FrameRefused
        The apertures are given in FWHM multiples and no star is bright and
        clean enough to measure the FWHM.
    """
    from photutils.aperture import ApertureStats, CircularAperture

    raw = data if raw is None else raw
    x0 = np.asarray(x0, float)
    y0 = np.asarray(y0, float)
    n = x0.size
    ny, nx = data.shape
    on = on_frame(x0, y0, data.shape)
    xc = np.full(n, np.nan)
    yc = np.full(n, np.nan)
    if on.any():
        xc[on], yc[on] = centroids(data, x0[on], y0[on], settings.centroid_box_px)
    found = on & np.isfinite(xc) & np.isfinite(yc)
    with np.errstate(invalid="ignore"):
        wander = found & (np.hypot(xc - x0, yc - y0) > settings.max_shift_px)
    x = np.where(found, xc, x0)
    y = np.where(found, yc, y0)

    limits = [v for v in (detector.saturation_adu, detector.nonlinear_adu) if v is not None]
    limit = min(limits) if limits else None
    usable = found & ~wander
    fwhm = float("nan")
    for chosen in (usable & np.asarray(for_fwhm, bool), usable):
        if chosen.any():
            fwhm = frame_fwhm(data, raw, x[chosen], y[chosen], settings.centroid_box_px, limit)
        if np.isfinite(fwhm):
            break
    if settings.needs_fwhm and not np.isfinite(fwhm):
        raise FrameRefused(f"{frame}: no star is bright and clean enough to measure the FWHM (clouds, a wrong WCS, "
                           "or every star saturated?); or give aperture_px and annulus_px in [photometry]")
    r, r_in, r_out = settings.radii(fwhm)
    if r_in < r:  # only possible when one radius is in pixels and the other in FWHM multiples
        raise FrameRefused(f"{frame}: with this frame's FWHM of {fwhm:.2f} px the annulus starts at {r_in:.1f} px, inside "
                           f"the {r:.1f}-px aperture; set [photometry] aperture and annulus in the same units")

    sky = np.full(n, np.nan)
    sky_std = np.full(n, np.nan)
    n_sky = np.zeros(n)
    counts = np.full(n, np.nan)
    area = np.full(n, np.nan)
    peak = np.full(n, np.nan)
    idx = np.flatnonzero(on)
    if idx.size:
        pos = np.column_stack([x[idx], y[idx]])
        sky[idx], sky_std[idx], n_sky[idx] = sky_levels(data, pos, r_in, r_out)
        aperture = CircularAperture(pos, r)
        st = ApertureStats(data, aperture, local_bkg=np.nan_to_num(sky[idx], nan=0.0))
        counts[idx] = np.atleast_1d(np.asarray(st.sum, float))
        area[idx] = np.atleast_1d(np.asarray(st.sum_aper_area.value, float))
        peak[idx] = np.atleast_1d(np.asarray(ApertureStats(raw, aperture).max, float))

    with np.errstate(invalid="ignore"):
        whole = on & (x - r >= -0.5) & (x + r <= nx - 0.5) & (y - r >= -0.5) & (y + r <= ny - 0.5)
        full_area = np.pi * r * r
        bad_pixels = whole & ~(area >= full_area * (1.0 - 1e-9))
        sky_bad = on & ~((n_sky >= MIN_SKY_PIXELS) & np.isfinite(sky))
        source_e = counts * detector.gain_e_per_adu
        variance = ccd_variance_e(source_e, full_area, np.where(n_sky > 0, n_sky, np.nan),
                                  sky * detector.gain_e_per_adu, detector.dark_e, detector.read_noise_e)
        snr = source_e / np.sqrt(variance)
        mag = instrumental_magnitude(counts, exptime_s)
        mag_err = magnitude_error(source_e, variance)
        conditions = {
            "off_frame": ~whole,
            "no_centroid": on & ~found,
            "centroid_wander": wander,
            "bad_pixels": bad_pixels,
            "sky_unusable": sky_bad,
            "saturated": (peak >= detector.saturation_adu) if detector.saturation_adu is not None else None,
            "nonlinear": (peak >= detector.nonlinear_adu) if detector.nonlinear_adu is not None else None,
        }
        unmeasured = np.zeros(n, bool)
        for word in UNMEASURED:
            unmeasured |= conditions[word]
        conditions["no_signal"] = ~unmeasured & ~(snr >= 1.0)
    flag, reason = _reasons(conditions, n)
    mag = np.where(unmeasured, np.nan, mag)
    mag_err = np.where(unmeasured | ~np.isfinite(mag), np.nan, mag_err)
    return StarMeasures(x=x, y=y, fwhm_px=fwhm, aperture_px=r, annulus_px=(r_in, r_out), sky=sky, sky_std=sky_std,
                        n_sky=n_sky, counts=counts, n_pix=np.where(on, full_area, np.nan), peak=peak, mag=mag,
                        mag_err=mag_err, snr=snr, flag=flag, flag_reason=reason)
