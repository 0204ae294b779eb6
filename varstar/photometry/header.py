"""What a frame's FITS header says: mid-exposure time, band, exposure, airmass, gain, read noise, saturation.

Pure functions of the header cards (a sequence of headers searched in order:
the image's own header, then the primary header, as the FITS ``INHERIT``
convention has extensions take keywords from the primary one) and the
:class:`~varstar.photometry.settings.PhotometrySettings`.  A frame whose header
cannot be read as needed raises :class:`FrameRefused`, an
:class:`~varstar.errors.InputError` whose message names the frame and the
keyword; :func:`~varstar.photometry.measure_frames` lists it and goes on.

Time: ``DATE-OBS`` is the start of the exposure (FITS standard 4.0, Pence et al.
2010), and ``MJD-OBS`` its MJD; the mid-exposure time is start + exposure / 2,
as a JD in UTC.  ``TIMESYS`` absent means UTC (the FITS standard's default);
any other time system is refused.  Where the header also gives the mean time of
the exposure (``DATE-AVG`` or ``MJD-AVG``, FITS standard 4.0), the two must
agree: a header whose ``DATE-OBS`` is really the middle of the exposure is
caught there (common practice: check ``DATE-OBS`` against ``EXPTIME`` and a
mid-time keyword where one exists).
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from ..errors import InputError
from ..inputs import shown
from .settings import PhotometrySettings

#: Plausible exposure times (s), as the measurement reader accepts them.
EXPTIME_MAX_S = 36_000.0
#: Julian Dates the measurement reader accepts (1858 .. 2132).
JD_MIN, JD_MAX = 2_400_000.5, 2_500_000.5
#: Airmass values kept from a header; anything else becomes NaN (the reader's range).
AIRMASS_MIN, AIRMASS_MAX = 0.99, 40.0
#: Time keywords tried, in order, when ``[photometry.keywords].time`` is not given.
TIME_KEYWORDS = ("DATE-OBS", "MJD-OBS", "JD")
#: Exposure keywords tried, in order, when ``[photometry.keywords].exptime`` is not given.
EXPTIME_KEYWORDS = ("EXPTIME", "EXPOSURE")
#: Keywords of the exposure's mean time (FITS standard 4.0), checked against the computed mid-exposure.
MEAN_TIME_KEYWORDS = ("DATE-AVG", "MJD-AVG")

_DATE = re.compile(r"^(\d{4})-(\d{2})-(\d{2})(?:[T ](\d{2}):(\d{2}):(\d{2}(?:\.\d*)?))?Z?$")
_TIME = re.compile(r"^(\d{2}):(\d{2}):(\d{2}(?:\.\d*)?)$")
_OFFSET_D = {"start": 0.5, "mid": 0.0, "end": -0.5}


class FrameRefused(InputError):
    """A frame that cannot be measured (its message names the frame and why); the others still are."""


@dataclass(frozen=True)
class FrameInfo:
    """What one frame's header gives.

    Attributes
    ----------
    jd_utc
        Mid-exposure, Julian Date (UTC).
    band
        The band of the frame's filter.
    exptime_s
        Exposure time (s).
    airmass
        From the header (NaN where it has none or an implausible one).
    gain_e_per_adu, read_noise_e
        Detector gain and read noise.
    saturation_adu
        Saturation level of the raw pixels (None: unknown, not checked).
    """

    jd_utc: float
    band: str
    exptime_s: float
    airmass: float
    gain_e_per_adu: float
    read_noise_e: float
    saturation_adu: float | None


def header_value(headers: Sequence[Mapping[str, Any]], key: str) -> Any:
    """The value of ``key`` in the first header that has it (None where none has, or it is blank)."""
    for h in headers:
        if key in h:
            value = h[key]
            from astropy.io.fits.card import Undefined

            # a card without a value reads as an Undefined object, not None
            if value is None or isinstance(value, Undefined) or (isinstance(value, str) and not value.strip()):
                return None
            return value
    return None


def _number(value: Any) -> float | None:
    """A header value as a float: numbers, and text that reads as one; None otherwise."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return float(value)
    if isinstance(value, str):
        try:
            return float(value.strip())
        except ValueError:
            return None
    try:  # numpy scalars
        return float(value)
    except (TypeError, ValueError):
        return None


def _first(headers: Sequence[Mapping[str, Any]], keys: Iterable[str]) -> tuple[str | None, Any]:
    for key in keys:
        value = header_value(headers, key)
        if value is not None:
            return key, value
    return None, None


def exposure_time(headers: Sequence[Mapping[str, Any]], settings: PhotometrySettings, frame: str) -> float:
    """Exposure time (s) from ``EXPTIME`` or ``EXPOSURE`` (or the configured keyword).

    Raises
    ------
    FrameRefused
        No such keyword, not a number, or outside (0, 36000] s.
    """
    keys = (settings.exptime_keyword,) if settings.exptime_keyword else EXPTIME_KEYWORDS
    key, value = _first(headers, keys)
    if key is None:
        raise FrameRefused(f"{frame}: no exposure time in the header (looked for {' and '.join(keys)}); "
                           "set [photometry.keywords].exptime to the keyword that holds it")
    t = _number(value)
    if t is None or not math.isfinite(t) or not 0 < t <= EXPTIME_MAX_S:
        raise FrameRefused(f"{frame}: {key} = {shown(value)} is not an exposure time in seconds (0 < t <= {EXPTIME_MAX_S:g})")
    return t


def _check_timesys(headers: Sequence[Mapping[str, Any]], frame: str) -> None:
    if not any("TIMESYS" in h for h in headers):
        return  # FITS standard 4.0: without TIMESYS, times are UTC
    value = header_value(headers, "TIMESYS")
    if not isinstance(value, str):
        raise FrameRefused(f"{frame}: TIMESYS = {shown(value)} does not say which time system the header's times are in; "
                           "varstar reads UTC times (TIMESYS = 'UTC' or no TIMESYS)")
    if value.strip().upper() != "UTC":
        raise FrameRefused(f"{frame}: TIMESYS = {shown(value)}: varstar reads header times in UTC only; "
                           "write the times in UTC (TIMESYS = 'UTC')")


def _iso_time(headers: Sequence[Mapping[str, Any]], key: str, value: Any, settings: PhotometrySettings,
              frame: str) -> tuple[str, str]:
    """(ISO date and time text, what it was read from) from a date keyword (+ time-of-day keyword)."""
    text = str(value).strip()
    m = _DATE.match(text)
    if not m:
        raise FrameRefused(f"{frame}: {key} = {shown(value)} is not a date in the FITS form YYYY-MM-DDThh:mm:ss[.sss]")
    if m.group(4) is not None:
        return f"{m.group(1)}-{m.group(2)}-{m.group(3)}T{m.group(4)}:{m.group(5)}:{m.group(6)}", key
    tkey = settings.time_of_day_keyword
    tval = header_value(headers, tkey)
    if tval is None:
        raise FrameRefused(f"{frame}: {key} = {shown(value)} has no time of day and the header has no {tkey}; "
                           "set [photometry.keywords].time_of_day to the keyword that holds it")
    tm = _TIME.match(str(tval).strip())
    if not tm:
        raise FrameRefused(f"{frame}: {tkey} = {shown(tval)} is not a time of day hh:mm:ss[.sss]")
    return f"{m.group(1)}-{m.group(2)}-{m.group(3)}T{str(tval).strip()}", f"{key} + {tkey}"


def _time_of(headers: Sequence[Mapping[str, Any]], key: str, value: Any, settings: PhotometrySettings,
             frame: str) -> tuple[Any, str]:
    """An astropy Time (UTC) from one time keyword, and what it was read from."""
    from astropy.time import Time

    number = None if isinstance(value, str) else _number(value)
    if number is None:
        if key.startswith(("MJD", "JD")) and isinstance(value, str) and _number(value) is not None:
            number = _number(value)
    if number is not None:
        if not math.isfinite(number):
            raise FrameRefused(f"{frame}: {key} = {shown(value)} is not a time")
        if key.startswith("MJD"):
            fmt = "mjd"
        elif JD_MIN <= number <= JD_MAX:
            fmt = "jd"
        else:
            raise FrameRefused(f"{frame}: {key} = {shown(value)} is neither a Julian Date nor in a keyword named MJD...; "
                               "name the keyword of the time with [photometry.keywords].time")
        return Time(number, format=fmt, scale="utc"), key
    iso, what = _iso_time(headers, key, value, settings, frame)
    try:
        return Time(iso, format="isot", scale="utc"), what
    except ValueError:
        raise FrameRefused(f"{frame}: {what} = {shown(iso)} is not a valid date and time") from None


def mid_exposure_jd(headers: Sequence[Mapping[str, Any]], exptime_s: float, settings: PhotometrySettings,
                    frame: str) -> float:
    """Mid-exposure Julian Date (UTC) from the header.

    The time is read from ``DATE-OBS`` (with ``TIME-OBS`` when the date has no
    time of day), else ``MJD-OBS``, else ``JD`` (or the configured keyword);
    it marks the start of the exposure unless ``[photometry].time_point`` says
    otherwise, and half the exposure is added (astropy.time, offline).

    Raises
    ------
    FrameRefused
        No time, a time that cannot be read, a ``TIMESYS`` other than UTC, a
        time outside 1858-2132, or a mean-time keyword that disagrees.
    """
    from astropy.time import TimeDelta

    from ..timescale import offline_astropy

    _check_timesys(headers, frame)
    keys = (settings.time_keyword,) if settings.time_keyword else TIME_KEYWORDS
    key, value = _first(headers, keys)
    if key is None:
        raise FrameRefused(f"{frame}: no observation time in the header (looked for {', '.join(keys)}); "
                           "set [photometry.keywords].time to the keyword that holds it")
    with offline_astropy():
        start, what = _time_of(headers, key, value, settings, frame)
        mid = start + TimeDelta(_OFFSET_D[settings.time_point] * exptime_s, format="sec")
        jd = float(mid.jd1) + float(mid.jd2)
        mean_key, mean_value = _first(headers, MEAN_TIME_KEYWORDS)
        if mean_key is not None and mean_key != key:
            mean, _ = _time_of(headers, mean_key, mean_value, settings, frame)
            diff_s = abs(float((mid - mean).sec))
            tolerance_s = max(2.0, 0.1 * exptime_s)
            if diff_s > tolerance_s:
                raise FrameRefused(
                    f"{frame}: the mid-exposure from {what} ({settings.time_point} of the exposure) + half the exposure "
                    f"differs from {mean_key} by {diff_s:.1f} s; if {key} is not the {settings.time_point} of the exposure, "
                    "set [photometry].time_point (start, mid or end)")
    if not JD_MIN <= jd <= JD_MAX:
        raise FrameRefused(f"{frame}: {what} gives JD {jd:.5f}, outside the years 1858-2132")
    return jd


def frame_band(headers: Sequence[Mapping[str, Any]], settings: PhotometrySettings, bands: Iterable[str],
               frame: str) -> str:
    """The band of the frame's filter: ``[photometry.filters]`` first, else a catalogue band of that name.

    A mapping's key matches the header's filter name exactly (surrounding blanks
    aside) or, failing that, ignoring case; a filter name equal to one of
    ``bands`` ignoring case is that band.

    Raises
    ------
    FrameRefused
        No filter keyword, or a filter that is neither mapped nor a catalogue band.
    """
    key = settings.filter_keyword
    value = header_value(headers, key)
    if value is None:
        raise FrameRefused(f"{frame}: no {key} keyword in the header, so the band is unknown; "
                           "set [photometry.keywords].filter to the keyword that names the filter")
    name = str(value).strip()
    mapping = dict(settings.filters)
    if name in mapping:
        return mapping[name]
    folded = {k.casefold(): v for k, v in settings.filters}
    if name.casefold() in folded:
        return folded[name.casefold()]
    by_case = {b.casefold(): b for b in sorted(bands)}
    if name.casefold() in by_case:
        return by_case[name.casefold()]
    known = ", ".join(sorted(bands)) or "none"
    # the band the name most likely means: one of the catalogue bands written in it as a word ("Johnson B")
    words = set(re.split(r"[\s_\-/()]+", name))
    guess = next((b for b in sorted(bands) if b in words), sorted(bands)[0] if bands else "V")
    raise FrameRefused(f"{frame}: {key} = {shown(name)} is neither in [photometry.filters] nor a band of the comparison "
                       f"stars' catalogue magnitudes ({known}); map it in the target description: varstar edit-target "
                       f"ARCHIVE --set 'photometry.filters.{json.dumps(name)}={json.dumps(guess)}' (in the TOML file: "
                       f"[photometry.filters] {json.dumps(name)} = {json.dumps(guess)})")


def frame_airmass(headers: Sequence[Mapping[str, Any]], settings: PhotometrySettings) -> float:
    """The header's airmass, or NaN (no keyword, not a number, or outside 0.99..40)."""
    if not settings.airmass_keyword:
        return math.nan
    x = _number(header_value(headers, settings.airmass_keyword))
    if x is None or not math.isfinite(x) or not AIRMASS_MIN <= x <= AIRMASS_MAX:
        return math.nan
    return x


def _detector_value(headers: Sequence[Mapping[str, Any]], keyword: str, fallback: float | None, setting: str,
                    table_key: str, frame: str, *, zero_ok: bool, what: str) -> float | None:
    """A detector value from the header keyword, else the setting; None where neither gives one."""
    if keyword:
        value = header_value(headers, keyword)
        if value is not None:
            x = _number(value)
            if x is None or not math.isfinite(x) or x < 0 or (x == 0 and not zero_ok):
                raise FrameRefused(
                    f"{frame}: {keyword} = {shown(value)} is not a usable {what} (it must be {'zero or ' if zero_ok else ''}positive); "
                    f"correct the header, or set [photometry.keywords].{table_key} = \"\" "
                    f"and give [photometry].{setting}")
            return x
    return fallback


def integer_limit(headers: Sequence[Mapping[str, Any]]) -> float | None:
    """The largest value an integer image can hold (BITPIX, BZERO, BSCALE), or None for a floating-point one.

    An analogue-to-digital converter's full range is the usual saturation level
    of raw integer frames when nothing else is known (common practice).
    """
    bitpix = _number(header_value(headers[:1], "BITPIX"))
    if bitpix is None or bitpix <= 0:
        return None
    bzero = _number(header_value(headers[:1], "BZERO")) or 0.0
    bscale = _number(header_value(headers[:1], "BSCALE")) or 1.0
    top = 255.0 if bitpix == 8 else 2.0 ** (int(bitpix) - 1) - 1.0
    return bzero + bscale * top


def read_frame_info(headers: Sequence[Mapping[str, Any]], settings: PhotometrySettings, bands: Iterable[str],
                    frame: str) -> FrameInfo:
    """Everything the header of one frame must give, checked.

    Parameters
    ----------
    headers
        The image's header, then the primary header (when they differ).
    settings
        The ``[photometry]`` settings.
    bands
        The bands of the comparison stars' catalogue magnitudes.
    frame
        The frame's path, for messages.

    Raises
    ------
    FrameRefused
        Naming the frame and the keyword.
    """
    exptime = exposure_time(headers, settings, frame)
    jd = mid_exposure_jd(headers, exptime, settings, frame)
    band = frame_band(headers, settings, bands, frame)
    gain = _detector_value(headers, settings.gain_keyword, settings.gain_e_per_adu, "gain_e_per_adu", "gain", frame,
                           zero_ok=False, what="gain (e-/ADU)")
    if gain is None:
        raise FrameRefused(f"{frame}: the header has no {settings.gain_keyword or 'gain'} keyword; "
                           f"give the detector's gain as [photometry].gain_e_per_adu in {settings.source}")
    rn = _detector_value(headers, settings.read_noise_keyword, settings.read_noise_e, "read_noise_e", "read_noise", frame,
                         zero_ok=True, what="read noise (e-)")
    if rn is None:
        raise FrameRefused(f"{frame}: the header has no {settings.read_noise_keyword or 'read-noise'} keyword; "
                           f"give the detector's read noise as [photometry].read_noise_e in {settings.source}")
    saturation = _detector_value(headers, settings.saturation_keyword, settings.saturation_adu, "saturation_adu",
                                 "saturation", frame, zero_ok=False, what="saturation level (ADU)")
    if saturation is None:
        saturation = integer_limit(headers)
    return FrameInfo(jd, band, exptime, frame_airmass(headers, settings), gain, rn, saturation)
