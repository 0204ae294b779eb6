"""The ``[photometry]`` table of a target description -> :class:`PhotometrySettings`.

Every key is optional; the defaults are those of :class:`PhotometrySettings`.
A value is checked once, here, and a wrong one is refused with an
:class:`~varstar.errors.InputError` that names the file and the key
(``t.toml: [photometry].gain_e_per_adu must be positive, got 0``).

Keys of ``[photometry]``
------------------------
``aperture_fwhm`` (1.5) or ``aperture_px``
    Radius of the measuring aperture, as a multiple of the frame's FWHM or in
    pixels (give one of the two).
``annulus_fwhm`` ([3.0, 5.0]) or ``annulus_px``
    Inner and outer radius of the sky annulus, as FWHM multiples or in pixels.
``centroid_box_px`` (11)
    Side of the square box (odd, pixels) in which a star's centroid is sought
    around its WCS position.
``max_shift_px`` (3.0)
    Largest allowed distance between the centroid and the WCS position; a star
    that wanders further is flagged, never moved.
``gain_e_per_adu``, ``read_noise_e``
    Gain and read noise, used when a frame's header lacks them.
``dark_current_e_per_s`` (0.0)
    Dark current per pixel whose noise stays in calibrated frames (used when no
    master dark is given; with one, the master dark's level is used).
``saturation_adu``, ``nonlinear_adu``
    Saturation level (used when the header lacks it) and the level above which
    the detector is no longer linear (optional).  A star whose highest raw pixel
    reaches either is flagged.
``time_point`` ("start")
    Which moment of the exposure the header's time marks: ``start`` (the FITS
    standard's meaning of ``DATE-OBS``), ``mid`` or ``end``.
``bias``, ``dark``, ``flat``
    Paths of master calibration frames, applied before measuring (a relative
    path is relative to the current directory).  The master dark is scaled by
    exposure time, so it must be bias-subtracted when a bias is given.

``[photometry.keywords]``
    Header keywords when they differ from the usual ones: ``time`` (default:
    ``DATE-OBS``, then ``MJD-OBS``, then ``JD``), ``time_of_day`` (``TIME-OBS``,
    read when the date has no time), ``exptime`` (``EXPTIME``, then
    ``EXPOSURE``), ``filter`` (``FILTER``), ``airmass`` (``AIRMASS``), ``gain``
    (``GAIN``), ``read_noise`` (``RDNOISE``), ``saturation`` (``SATURATE``).
    An empty string for ``airmass``, ``gain``, ``read_noise`` or
    ``saturation`` means: do not read it from the header.

``[photometry.filters]``
    Filter names of the headers and the bands they stand for, e.g.
    ``"Johnson V" = "V"``.  Without a mapping, a filter name equal to a band of
    the comparison stars' catalogue magnitudes (ignoring case) is that band.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..inputs import finite_number, id_problem, shown

#: Keys of ``[photometry.keywords]`` and the settings fields they fill.
KEYWORD_KEYS = {
    "time": "time_keyword",
    "time_of_day": "time_of_day_keyword",
    "exptime": "exptime_keyword",
    "filter": "filter_keyword",
    "airmass": "airmass_keyword",
    "gain": "gain_keyword",
    "read_noise": "read_noise_keyword",
    "saturation": "saturation_keyword",
}
#: Keywords whose header value may be switched off with an empty string.
OPTIONAL_KEYWORDS = ("airmass", "gain", "read_noise", "saturation")
TIME_POINTS = ("start", "mid", "end")
_MASTERS = ("bias", "dark", "flat")


@dataclass(frozen=True)
class PhotometrySettings:
    """How frames are measured: the ``[photometry]`` table with its defaults.

    Attributes
    ----------
    aperture_fwhm, aperture_px
        Aperture radius as a multiple of the frame's FWHM, or in pixels; exactly
        one is set.  The default, 1.5 x FWHM, is the upper end of the range in
        which the signal-to-noise of a faint star is best (about 1-1.5 x FWHM,
        Howell 1989, PASP 101, 616): the upper end because the ensemble uses
        bright comparison stars too, and a larger aperture is less sensitive to
        centroid errors and to the PSF changing across the field.  The same
        radius is used for every star of a frame, so the fraction of light
        outside it cancels in differential magnitudes.
    annulus_fwhm, annulus_px
        (inner, outer) radii of the sky annulus, as FWHM multiples or pixels;
        exactly one is set.  Default (3, 5) x FWHM: far enough out that the
        star's light is negligible (under 1e-10 of a Gaussian star's beyond
        3 FWHM), with about seven times the aperture's area so the background's
        own error stays small (common practice).
    centroid_box_px
        Odd side (pixels) of the box in which the centroid is sought.
    max_shift_px
        Largest allowed centroid distance from the WCS position (pixels).
    gain_e_per_adu, read_noise_e, saturation_adu
        Used when the header lacks the keyword (None: not given).
    nonlinear_adu
        Start of the detector's non-linear range (None: not checked).
    dark_current_e_per_s
        Dark current (e-/pixel/s) left as noise in calibrated frames when no
        master dark is given.
    time_point
        ``start``, ``mid`` or ``end``: the moment the header's time marks.
    time_keyword, time_of_day_keyword, exptime_keyword, filter_keyword, airmass_keyword, gain_keyword, read_noise_keyword, saturation_keyword
        Header keywords (None: the usual ones; "" for the optional ones: never
        read from the header).
    filters
        ``(filter name, band)`` pairs of ``[photometry.filters]``.
    bias, dark, flat
        Absolute paths of the master frames, or None.
    source
        The target file, for messages.
    """

    aperture_fwhm: float | None = 1.5
    aperture_px: float | None = None
    annulus_fwhm: tuple[float, float] | None = (3.0, 5.0)
    annulus_px: tuple[float, float] | None = None
    centroid_box_px: int = 11
    max_shift_px: float = 3.0
    gain_e_per_adu: float | None = None
    read_noise_e: float | None = None
    dark_current_e_per_s: float = 0.0
    saturation_adu: float | None = None
    nonlinear_adu: float | None = None
    time_point: str = "start"
    time_keyword: str | None = None
    time_of_day_keyword: str = "TIME-OBS"
    exptime_keyword: str | None = None
    filter_keyword: str = "FILTER"
    airmass_keyword: str = "AIRMASS"
    gain_keyword: str = "GAIN"
    read_noise_keyword: str = "RDNOISE"
    saturation_keyword: str = "SATURATE"
    filters: tuple[tuple[str, str], ...] = field(default_factory=tuple)
    bias: Path | None = None
    dark: Path | None = None
    flat: Path | None = None
    source: str = "<string>"

    def __post_init__(self) -> None:
        if (self.aperture_fwhm is None) == (self.aperture_px is None):
            raise InputError(f"{self.source}: [photometry]: give one of aperture_fwhm and aperture_px")
        if (self.annulus_fwhm is None) == (self.annulus_px is None):
            raise InputError(f"{self.source}: [photometry]: give one of annulus_fwhm and annulus_px")

    @property
    def needs_fwhm(self) -> bool:
        """Whether the aperture or the annulus is given in FWHM multiples."""
        return self.aperture_fwhm is not None or self.annulus_fwhm is not None

    def radii(self, fwhm_px: float) -> tuple[float, float, float]:
        """(aperture, annulus inner, annulus outer) radii in pixels for a frame of FWHM ``fwhm_px``."""
        r = self.aperture_px if self.aperture_px is not None else self.aperture_fwhm * fwhm_px
        inner, outer = self.annulus_px if self.annulus_px is not None else (a * fwhm_px for a in self.annulus_fwhm)
        return float(r), float(inner), float(outer)

    def where(self, key: str) -> str:
        """How a message names a key of the table: ``t.toml: [photometry].gain_e_per_adu``."""
        return f"{self.source}: [photometry].{key}"


def _positive(value: Any, where: str, *, zero_ok: bool = False) -> float:
    x = finite_number(value, where)
    if x < 0 or (x == 0 and not zero_ok):
        raise InputError(f"{where} must be {'zero or ' if zero_ok else ''}positive, got {shown(value)}")
    return x


def _radius_pair(value: Any, where: str) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        raise InputError(f"{where} must be a list of two radii [inner, outer], got {shown(value)}")
    inner, outer = (_positive(v, where) for v in value)
    if not inner < outer:
        raise InputError(f"{where}: the inner radius {inner:g} must be smaller than the outer {outer:g}")
    return inner, outer


def _keyword(value: Any, where: str, *, empty_ok: bool) -> str:
    if not isinstance(value, str):
        raise InputError(f"{where} must be a header keyword in quotes, e.g. \"DATE-OBS\", got {shown(value)}")
    text = value.strip().upper()
    if not text and not empty_ok:
        raise InputError(f"{where} must name a header keyword (it cannot be empty)")
    if text and (id_problem(text) or len(text) > 68):
        raise InputError(f"{where}: {shown(value)} is not a header keyword")
    return text


def _filters(table: Any, where: str) -> tuple[tuple[str, str], ...]:
    if not isinstance(table, dict):
        raise InputError(f"{where} must be a table of filter names and bands, e.g. \"Johnson V\" = \"V\"")
    out = []
    for name, band in table.items():
        w = f"{where}.{shown(name)}"
        if id_problem(name):
            raise InputError(f"{w}: the filter name {id_problem(name)}")
        if not isinstance(band, str) or id_problem(band) or not band.strip()[:1].isalpha():
            raise InputError(f"{w} must be a band name such as \"V\", got {shown(band)}")
        out.append((name.strip(), band.strip()))
    return tuple(out)


def photometry_settings(target: Any) -> PhotometrySettings:
    """Parse and check the ``[photometry]`` table of a target description.

    Parameters
    ----------
    target
        A :class:`varstar.target.Target`; its ``extra["photometry"]`` is read
        (absent: every default).

    Returns
    -------
    PhotometrySettings

    Raises
    ------
    InputError
        Naming the file and the key (``[photometry].key``): an unknown key, a
        value that is not a number where one is needed, a gain of zero, an
        even centroid box, an annulus whose inner radius is not inside its
        outer one, both or neither of a pair of alternatives, ...
    """
    source = target.source
    table = target.extra.get("photometry", {})
    top = f"{source}: [photometry]"
    if not isinstance(table, dict):
        raise InputError(f"{top} must be a table")
    known = {"aperture_fwhm", "aperture_px", "annulus_fwhm", "annulus_px", "centroid_box_px", "max_shift_px",
             "gain_e_per_adu", "read_noise_e", "dark_current_e_per_s", "saturation_adu", "nonlinear_adu",
             "time_point", "keywords", "filters", *_MASTERS}
    for key in table:
        if key not in known:
            raise InputError(f"{top}.{key} is not a key of this table (known: {', '.join(sorted(known))})")
    w = lambda key: f"{top}.{key}"  # noqa: E731 - a short local spelling of the message prefix
    kw: dict[str, Any] = {"source": source}

    for what, parse in (("aperture", _positive), ("annulus", _radius_pair)):  # in FWHM or in pixels, not both
        fwhm, px = f"{what}_fwhm", f"{what}_px"
        if fwhm in table and px in table:
            raise InputError(f"{top}: give {fwhm} or {px}, not both")
        if px in table:
            kw[fwhm], kw[px] = None, parse(table[px], w(px))
        elif fwhm in table:
            kw[fwhm] = parse(table[fwhm], w(fwhm))
    ap_fwhm, ap_px = kw.get("aperture_fwhm", 1.5), kw.get("aperture_px")
    an_fwhm, an_px = kw.get("annulus_fwhm", (3.0, 5.0)), kw.get("annulus_px")
    if ap_px is not None and an_px is not None and an_px[0] < ap_px:
        raise InputError(f"{w('annulus_px')}: the inner radius {an_px[0]:g} lies inside the aperture (aperture_px = {ap_px:g})")
    if ap_fwhm is not None and an_fwhm is not None and an_fwhm[0] < ap_fwhm:
        raise InputError(f"{w('annulus_fwhm')}: the inner radius {an_fwhm[0]:g} lies inside the aperture (aperture_fwhm = {ap_fwhm:g})")

    if "centroid_box_px" in table:
        box = table["centroid_box_px"]
        if isinstance(box, bool) or not isinstance(box, int) or box < 3 or box % 2 == 0 or box > 201:
            raise InputError(f"{w('centroid_box_px')} must be an odd whole number of pixels from 3 to 201, got {shown(box)}")
        kw["centroid_box_px"] = box
    if "max_shift_px" in table:
        kw["max_shift_px"] = _positive(table["max_shift_px"], w("max_shift_px"))
    for key in ("gain_e_per_adu", "saturation_adu", "nonlinear_adu"):
        if key in table:
            kw[key] = _positive(table[key], w(key))
    for key in ("read_noise_e", "dark_current_e_per_s"):
        if key in table:
            kw[key] = _positive(table[key], w(key), zero_ok=True)
    if "nonlinear_adu" in kw and "saturation_adu" in kw and not kw["nonlinear_adu"] < kw["saturation_adu"]:
        raise InputError(f"{w('nonlinear_adu')} ({kw['nonlinear_adu']:g}) must be below saturation_adu ({kw['saturation_adu']:g})")
    if "time_point" in table:
        tp = table["time_point"]
        if not isinstance(tp, str) or tp.strip().lower() not in TIME_POINTS:
            raise InputError(f"{w('time_point')} must be one of {', '.join(TIME_POINTS)}, got {shown(tp)}")
        kw["time_point"] = tp.strip().lower()

    kws = table.get("keywords", {})
    if not isinstance(kws, dict):
        raise InputError(f"{w('keywords')} must be a table, e.g. [photometry.keywords] filter = \"FILT\"")
    for key, value in kws.items():
        if key not in KEYWORD_KEYS:
            raise InputError(f"{source}: [photometry.keywords].{key} is not a key of this table (known: {', '.join(KEYWORD_KEYS)})")
        kw[KEYWORD_KEYS[key]] = _keyword(value, f"{source}: [photometry.keywords].{key}", empty_ok=key in OPTIONAL_KEYWORDS)
    if "filters" in table:
        kw["filters"] = _filters(table["filters"], f"{source}: [photometry.filters]")
    for key in _MASTERS:
        if key in table:
            p = table[key]
            if not isinstance(p, str) or not p.strip() or id_problem(p):
                raise InputError(f"{w(key)} must be the path of a FITS file in quotes, got {shown(p)}")
            kw[key] = (Path.cwd() / Path(p).expanduser()).absolute()
    return PhotometrySettings(**kw)

