"""Synthetic FITS frames with known truth for the photometry tests (invented field, fixed seeds).

A frame is a square image of Gaussian stars at known pixel positions with known
total fluxes, on a flat sky, with photon (Poisson) and read (Gaussian) noise.
Each star's light is integrated over the pixels exactly (differences of the
error function), so the total in the image is the injected flux.  The header
carries a TAN (gnomonic) WCS whose projection the helper also computes by hand
from Calabretta & Greisen (2002, A&A 395, 1077, sections 5.1.3 and 2.3), so
tests can compare varstar's positions with astropy and with the equations.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.special import erf

from varstar.target import Target, parse_target

#: The invented field's centre (degrees) and pixel scale (degrees per pixel: 1.2 arcsec).
FIELD_RA, FIELD_DEC = 211.3, 27.4
SCALE_DEG = 1.2 / 3600.0


def tan_sky(x: np.ndarray, y: np.ndarray, crpix: tuple[float, float], crval: tuple[float, float] = (FIELD_RA, FIELD_DEC),
            scale: float = SCALE_DEG) -> tuple[np.ndarray, np.ndarray]:
    """ICRS (ra, dec) degrees of 0-based pixels under a TAN projection with CD = diag(-scale, scale).

    Calabretta & Greisen (2002): intermediate coordinates (x, y) -> native
    spherical (phi, theta) for TAN, R = 180/pi / tan(theta); then the spherical
    rotation to celestial coordinates for a zenithal projection (the
    reference point at the native pole).  Written out as the gnomonic inverse:
    ra = ra0 + atan2(xi, cos dec0 - eta sin dec0),
    dec = atan2(sin dec0 + eta cos dec0, hypot(xi, cos dec0 - eta sin dec0)).
    """
    xi = np.radians(-scale * (np.asarray(x, float) + 1.0 - crpix[0]))
    eta = np.radians(scale * (np.asarray(y, float) + 1.0 - crpix[1]))
    ra0, dec0 = np.radians(crval[0]), np.radians(crval[1])
    den = np.cos(dec0) - eta * np.sin(dec0)
    ra = ra0 + np.arctan2(xi, den)
    dec = np.arctan2(np.sin(dec0) + eta * np.cos(dec0), np.hypot(xi, den))
    return np.degrees(ra) % 360.0, np.degrees(dec)


def tan_pixel(ra: np.ndarray, dec: np.ndarray, crpix: tuple[float, float],
              crval: tuple[float, float] = (FIELD_RA, FIELD_DEC), scale: float = SCALE_DEG) -> tuple[np.ndarray, np.ndarray]:
    """0-based pixels of (ra, dec) degrees: the gnomonic projection (Calabretta & Greisen 2002, TAN)."""
    a, d = np.radians(np.asarray(ra, float)), np.radians(np.asarray(dec, float))
    a0, d0 = np.radians(crval[0]), np.radians(crval[1])
    cos_c = np.sin(d0) * np.sin(d) + np.cos(d0) * np.cos(d) * np.cos(a - a0)
    xi = np.cos(d) * np.sin(a - a0) / cos_c
    eta = (np.cos(d0) * np.sin(d) - np.sin(d0) * np.cos(d) * np.cos(a - a0)) / cos_c
    x = np.degrees(xi) / -scale + crpix[0] - 1.0
    y = np.degrees(eta) / scale + crpix[1] - 1.0
    return x, y


def wcs_cards(shape: tuple[int, int], *, shift_px: tuple[float, float] = (0.0, 0.0),
              crval: tuple[float, float] = (FIELD_RA, FIELD_DEC)) -> dict:
    """Header cards of a TAN WCS centred on the frame; ``shift_px`` moves CRPIX (a WCS slightly off)."""
    ny, nx = shape
    return {
        "CTYPE1": "RA---TAN", "CTYPE2": "DEC--TAN",
        "CRVAL1": crval[0], "CRVAL2": crval[1],
        "CRPIX1": (nx + 1) / 2.0 + shift_px[0], "CRPIX2": (ny + 1) / 2.0 + shift_px[1],
        "CD1_1": -SCALE_DEG, "CD1_2": 0.0, "CD2_1": 0.0, "CD2_2": SCALE_DEG,
        "CUNIT1": "deg", "CUNIT2": "deg", "RADESYS": "ICRS",
    }


def crpix_of(shape: tuple[int, int]) -> tuple[float, float]:
    ny, nx = shape
    return (nx + 1) / 2.0, (ny + 1) / 2.0


def pixel_integrated_gaussian(shape: tuple[int, int], x: float, y: float, flux: float, fwhm: float) -> np.ndarray:
    """A circular Gaussian of total ``flux`` centred at 0-based (x, y), integrated over each pixel (erf)."""
    sigma = fwhm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    ny, nx = shape
    s = sigma * math.sqrt(2.0)
    ex = np.arange(nx + 1) - 0.5
    ey = np.arange(ny + 1) - 0.5
    fx = np.diff(0.5 * erf((ex - x) / s))
    fy = np.diff(0.5 * erf((ey - y) / s))
    return flux * np.outer(fy, fx)


@dataclass
class Field:
    """Stars of the invented field: ids, roles, 0-based positions on an unshifted frame, fluxes (ADU per exposure)."""

    shape: tuple[int, int]
    ids: list[str]
    roles: list[str]
    x: np.ndarray
    y: np.ndarray
    flux: np.ndarray
    ra: np.ndarray = field(init=False)
    dec: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self.ra, self.dec = tan_sky(self.x, self.y, crpix_of(self.shape))


def grid_field(shape: tuple[int, int] = (160, 160), n_side: int = 4, *, seed: int = 7, flux_range=(3e3, 1e5),
               margin: float = 25.0) -> Field:
    """Stars on a jittered grid (spaced well beyond the annulus), log-uniform fluxes; star 0 is the target,
    star 1 the check star, the rest comparison stars."""
    rng = np.random.default_rng(seed)
    ny, nx = shape
    gx = np.linspace(margin, nx - 1 - margin, n_side)
    gy = np.linspace(margin, ny - 1 - margin, n_side)
    xx, yy = np.meshgrid(gx, gy)
    x = xx.ravel() + rng.uniform(-2.0, 2.0, xx.size)
    y = yy.ravel() + rng.uniform(-2.0, 2.0, yy.size)
    flux = 10 ** rng.uniform(np.log10(flux_range[0]), np.log10(flux_range[1]), x.size)
    n = x.size
    ids = ["T"] + ["K"] + [f"C{k}" for k in range(1, n - 1)]
    roles = ["target", "check"] + ["comparison"] * (n - 2)
    return Field(shape, ids, roles, x, y, flux)


def render(fld: Field, *, seed: int, fwhm: float = 3.5, sky_adu: float = 200.0, gain: float = 1.7,
           read_noise_e: float = 8.0, offset: tuple[float, float] = (0.0, 0.0), flux_scale: float = 1.0,
           extra: list[tuple[float, float, float]] | None = None, noise: bool = True) -> np.ndarray:
    """An image (float32, ADU) of the field: stars displaced by ``offset`` pixels, sky, photon and read noise."""
    rng = np.random.default_rng(seed)
    img = np.full(fld.shape, sky_adu, dtype=float)
    stars = [(x + offset[0], y + offset[1], f * flux_scale) for x, y, f in zip(fld.x, fld.y, fld.flux)]
    for x, y, f in stars + list(extra or []):
        img += pixel_integrated_gaussian(fld.shape, x, y, f, fwhm)
    if noise:
        img = rng.poisson(img * gain).astype(float) + rng.normal(0.0, read_noise_e, fld.shape)
        img /= gain
    return img.astype(np.float32)


def header_cards(shape: tuple[int, int], *, date_obs: str = "2023-11-14T21:30:00", exptime: float = 60.0,
                 filt: str = "V", gain: float | None = 1.7, read_noise: float | None = 8.0, airmass: float | None = 1.234,
                 wcs_shift: tuple[float, float] = (0.0, 0.0), wcs: bool = True, **more) -> dict:
    cards = {"DATE-OBS": date_obs, "EXPTIME": exptime, "FILTER": filt}
    if gain is not None:
        cards["GAIN"] = gain
    if read_noise is not None:
        cards["RDNOISE"] = read_noise
    if airmass is not None:
        cards["AIRMASS"] = airmass
    if wcs:
        cards.update(wcs_cards(shape, shift_px=wcs_shift))
    cards.update(more)
    return {k: v for k, v in cards.items() if v is not None}


def write_fits(path: Path, image: np.ndarray, cards: dict) -> Path:
    from astropy.io import fits

    hdu = fits.PrimaryHDU(image)
    for k, v in cards.items():
        hdu.header[k] = v
    hdu.writeto(path, overwrite=True)
    return path


def target_for(fld: Field, *, photometry: str = "", source: str = "field.toml", drop_position: str | None = None,
               bands: tuple[str, ...] = ("V",)) -> Target:
    """A target description of the field (comparison stars get invented catalogue magnitudes)."""
    lines = [
        "[target]", 'name = "Invented field"', f"ra = {float(fld.ra[0])!r}", f"dec = {float(fld.dec[0])!r}", "",
        "[site]", "latitude = 40.0", "longitude = -3.0", "elevation = 700.0", "",
    ]
    for k, (sid, role) in enumerate(zip(fld.ids, fld.roles)):
        lines += ["[[stars]]", f'id = "{sid}"', f'role = "{role}"']
        if sid != drop_position:
            lines += [f"ra = {float(fld.ra[k])!r}", f"dec = {float(fld.dec[k])!r}"]
        if role == "comparison":
            for b in bands:
                lines.append(f"{b} = {12.0 + 0.1 * k!r}")
        lines.append("")
    text = "\n".join(lines) + "\n" + photometry
    return parse_target(text, source=source)


def write_series(folder: Path, fld: Field, n: int, *, seed: int = 100, fwhm: float = 3.5, exptime: float = 60.0,
                 **render_kw) -> list[Path]:
    """``n`` frames of the field one minute apart, each with its own noise."""
    paths = []
    for k in range(n):
        img = render(fld, seed=seed + k, fwhm=fwhm, **render_kw)
        start = dt.datetime(2023, 11, 14, 21, 30) + dt.timedelta(minutes=k)
        cards = header_cards(fld.shape, date_obs=start.strftime("%Y-%m-%dT%H:%M:%S"), exptime=exptime)
        paths.append(write_fits(folder / f"frame_{k:03d}.fits", img, cards))
    return paths
