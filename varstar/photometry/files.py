"""FITS files: finding frames, opening one image, the master calibration frames.

Frames are opened with :func:`astropy.io.fits.open` and ``memmap=True``: the
pixels stay on disk and only those the apertures touch are read (a compressed
or gzipped file is decompressed in memory by astropy).  The user's files are
only ever read.
"""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from .header import EXPTIME_KEYWORDS, FrameRefused, header_value
from .settings import PhotometrySettings

#: File name endings of FITS frames (any case), each optionally followed by ".gz" (common practice).
FRAME_SUFFIXES = (".fits", ".fit", ".fts")
#: What reading a damaged FITS file raises in astropy (truncated data: TypeError "buffer is too
#: small"; no SIMPLE card: OSError; a cut gzip stream: EOFError; bad cards: ValueError).
READ_ERRORS = (OSError, EOFError, TypeError, ValueError, IndexError)


def is_frame_name(path: Path) -> bool:
    """Whether a file name ends like a FITS frame (``.fits``, ``.fit``, ``.fts``, optionally ``.gz``; any case)."""
    name = path.name.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    return name.endswith(FRAME_SUFFIXES)


def find_frames(paths: Sequence[str | Path]) -> list[Path]:
    """The frames named by files and folders, sorted.

    A folder stands for the FITS frames directly inside it (hidden files
    skipped); a file named explicitly is taken whatever its name (it is
    refused later if it is not a FITS image).

    Raises
    ------
    InputError
        A path that does not exist, or a folder without frames.
    """
    found: set[Path] = set()
    for p in paths:
        path = Path(p)
        if path.is_dir():
            inside = [f for f in path.iterdir() if f.is_file() and not f.name.startswith(".") and is_frame_name(f)]
            if not inside:
                raise InputError(f"{path}: no FITS frames in this folder "
                                 f"(looked for names ending in {', '.join(FRAME_SUFFIXES)}, optionally .gz)")
            found.update(inside)
        elif path.is_file():
            found.add(path)
        else:
            raise InputError(f"{path}: no such file or folder")
    return sorted(found, key=lambda f: (str(f.parent), f.name))


def _image_hdu(hdul: Any, path: str) -> tuple[Any, tuple[Any, ...]]:
    """The first HDU holding a 2-D image, and the headers to search (its own, then the primary one)."""
    for k, hdu in enumerate(hdul):
        if not getattr(hdu, "is_image", False):
            continue
        if hdu.header.get("NAXIS") == 2:
            headers = (hdu.header,) if k == 0 else (hdu.header, hdul[0].header)
            return hdu, headers
    raise FrameRefused(f"{path}: holds no 2-D image (a frame must have one image HDU with NAXIS = 2)")


def _open(path: str | Path, memmap: bool) -> Any:
    from astropy.io import fits

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # non-standard cards astropy fixes; damage raises below
        warnings.filterwarnings("error", message=".*truncated.*")
        return fits.open(path, memmap=memmap, lazy_load_hdus=False)


@contextlib.contextmanager
def open_image(path: str | Path) -> Iterator[tuple[np.ndarray, tuple[Any, ...]]]:
    """Open a FITS file and yield its first 2-D image and headers (image, then primary).

    The array is memory-mapped where possible (not for integer images scaled by
    ``BZERO``/``BSCALE``, which astropy converts to floating point in memory)
    and valid only inside the block.  The headers are copies taken before the
    pixels are read: they keep the ``BITPIX``, ``BZERO`` and ``BSCALE`` of the
    file, which astropy changes once it has scaled the data.

    Raises
    ------
    FrameRefused
        The file cannot be read as FITS (missing, damaged, truncated), or holds no 2-D image.
    """
    shown = str(path)
    try:
        hdul = _open(path, memmap=True)
    except READ_ERRORS + (Warning,) as exc:
        raise FrameRefused(f"{shown}: cannot be read as a FITS file ({_why(exc)})") from None
    with contextlib.ExitStack() as stack:
        stack.enter_context(hdul)
        hdu, headers = _image_hdu(hdul, shown)
        headers = tuple(h.copy() for h in headers)
        if any(k in hdu.header for k in ("BZERO", "BSCALE", "BLANK")) and type(hdu).__name__ != "CompImageHDU":
            try:
                hdul = stack.enter_context(_open(path, memmap=False))
            except READ_ERRORS + (Warning,) as exc:
                raise FrameRefused(f"{shown}: cannot be read as a FITS file ({_why(exc)})") from None
            hdu, _ = _image_hdu(hdul, shown)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                warnings.filterwarnings("error", message=".*truncated.*")
                data = hdu.data
                if data is None or data.ndim != 2:
                    raise FrameRefused(f"{shown}: holds no 2-D image")
                # touch the last pixel: a truncated file fails here, not half-way through the measurement
                _ = data[-1, -1]
        except READ_ERRORS + (Warning,) as exc:
            raise FrameRefused(f"{shown}: its image cannot be read ({_why(exc)}); the file may be truncated or damaged") from None
        yield data, headers


def _why(exc: BaseException) -> str:
    """The first sentence of what the library said, for a message."""
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    text = text.split(". ")[0].rstrip(".")
    return text if len(text) <= 160 else text[:157] + "..."


@dataclass(frozen=True)
class Masters:
    """The master calibration frames of a run, checked.

    Attributes
    ----------
    bias, dark, flat
        Paths (None where not given).
    shape
        (ny, nx) shared by every master given.
    dark_exptime_s
        Exposure of the master dark (s), for scaling; NaN without a dark.
    dark_adu_per_s
        Median level of the master dark per second (ADU/s; 0 without a dark):
        the dark current whose noise stays in a frame after the dark is subtracted.
    """

    bias: Path | None
    dark: Path | None
    flat: Path | None
    shape: tuple[int, int]
    dark_exptime_s: float = float("nan")
    dark_adu_per_s: float = 0.0

    def items(self) -> list[tuple[str, Path]]:
        """(key, path) of the masters given."""
        return [(k, p) for k, p in (("bias", self.bias), ("dark", self.dark), ("flat", self.flat)) if p is not None]


def read_master(path: Path, key: str, settings: PhotometrySettings) -> tuple[np.ndarray, tuple[Any, ...]]:
    """A master frame as a float array and its headers.

    Raises
    ------
    InputError
        Naming ``[photometry].key`` and the file: missing, unreadable, not a 2-D image.
    """
    if not path.is_file():
        raise InputError(f"{settings.where(key)}: {path} does not exist")
    try:
        with open_image(path) as (data, headers):
            return np.array(data, dtype=np.float64), tuple(h.copy() for h in headers)
    except FrameRefused as exc:
        raise InputError(f"{settings.where(key)}: {exc}") from None


def check_masters(settings: PhotometrySettings) -> Masters | None:
    """Read and check the master frames once, before any frame is measured.

    Raises
    ------
    InputError
        A master missing or unreadable, masters of different sizes (naming both
        files), a dark without an exposure time, a flat with no positive pixel.
    """
    given = [(k, p) for k, p in (("bias", settings.bias), ("dark", settings.dark), ("flat", settings.flat)) if p is not None]
    if not given:
        return None
    shape = None
    first = None
    dark_exptime, dark_level = float("nan"), 0.0
    for key, path in given:
        data, headers = read_master(path, key, settings)
        if shape is None:
            shape, first = data.shape, (key, path)
        elif data.shape != shape:
            raise InputError(f"{settings.where(key)}: {path} is {data.shape[1]} x {data.shape[0]} pixels but "
                             f"[photometry].{first[0]} {first[1]} is {shape[1]} x {shape[0]}; masters must match the frames")
        if key == "dark":
            keys = (settings.exptime_keyword,) if settings.exptime_keyword else EXPTIME_KEYWORDS
            value = next((header_value(headers, k) for k in keys if header_value(headers, k) is not None), None)
            try:
                dark_exptime = float(value)
            except (TypeError, ValueError):
                dark_exptime = float("nan")
            if not (np.isfinite(dark_exptime) and dark_exptime > 0):
                raise InputError(f"{settings.where('dark')}: {path} has no usable exposure time ({' or '.join(keys)}); "
                                 "the master dark is scaled by exposure and needs one")
            dark_level = float(np.nanmedian(data)) / dark_exptime
        if key == "flat" and not np.nanmean(data) > 0:
            raise InputError(f"{settings.where('flat')}: {path} has no positive mean level; it cannot be a flat field")
    return Masters(settings.bias, settings.dark, settings.flat, tuple(shape), dark_exptime, max(dark_level, 0.0))
