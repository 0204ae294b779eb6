"""Synthetic FITS frames of the invented demo field, with known truth.

:func:`write_frames` draws one night's exposures of a scenario (by default the
invented demo field of ``demo_series/``) as small calibrated CCD frames: every
star a Moffat (1969) image at its invented position, a sky with a gentle
gradient, photon (Poisson) and read noise, a few hot pixels and one saturated
star.  The frames are the *same exposures* as the shipped measurement tables:
the same frame ids (``FRAMEID``), mid-exposure times, exposure times, airmass,
seeing and the same expected electrons of every star (the simulator's truth,
:func:`varstar.simulate.simulate`: the variable star's light curve, the
secretly variable comparison, extinction, colour terms, zero-point drift and
clouds).  Aperture photometry of the frames therefore gives instrumental
magnitudes ``-2.5 log10(e- / s)`` on the scale of the tables' ``mag`` column
(the scenario's zero points), apart from the aperture's own losses and the
noise realisation, which is drawn afresh here (the frames carry no
scintillation: the injected flux is the expected one).

The camera is the scenario's :class:`~varstar.simulate.Telescope`: its plate
scale (1.1"/px for the demo), gain, read noise and dark current, so the sky per
pixel is the one the tables' noise model used.  Frames are "calibrated": bias
and dark removed, flat-fielded, so a pixel holds sky + dark + stars in ADU
(values may be negative from the read noise); the dark current's electrons are
kept in the background, as a frame without dark subtraction would have them.

Star positions are invented too (:func:`frame_star_positions`): the target
sits at the ``[target]`` position and the other stars are scattered around it
(fixed seed, no two closer than 50"). :func:`frame_target_toml` is the demo
target description with these positions added to every ``[[stars]]`` table.

Everything random takes a seed; the same seed gives byte-identical files.
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, OutputError
from ..timescale import offline_astropy
from .catalogues import target_toml
from .fields import demo_scenario
from .noise import mag_to_flux
from .scenario import Scenario, SimulatedSeries
from .series import simulate

__all__ = [
    "DEFAULT_FRAME_SEED",
    "FILTER_NAMES",
    "MOFFAT_BETA",
    "POSITION_SEED",
    "FrameSet",
    "frame_star_positions",
    "frame_target_toml",
    "moffat_alpha",
    "moffat_stamps",
    "tan_deproject",
    "tan_project",
    "truth_frames_csv",
    "write_frames",
]

#: Default seed of the frames' own random steps (pointing, sky gradient, hot pixels, pixel noise).
DEFAULT_FRAME_SEED = 20260915
#: Seed of the invented star positions (:func:`frame_star_positions`, :func:`frame_target_toml`).
POSITION_SEED = 7
#: ``FILTER`` header value of each band.  V is written plainly, B with its system's name, so a
#: reader must map a longer filter name onto a band.
FILTER_NAMES: Mapping[str, str] = {"V": "V", "B": "Johnson B"}
#: Moffat (1969) exponent of the star images.  Seeing-limited images are well described by
#: beta ~ 2.5-4.5 (common practice); 3.5 gives visible wings.
MOFFAT_BETA = 3.5
#: Sub-pixel samples per axis when a star image is integrated over its pixels.
OVERSAMPLE = 4
#: Camera rotation: angle (degrees) by which the pixel axes are turned from north-up, east-left.
ROTATION_DEG = 1.2
#: Scatter (arcsec, per axis) of the telescope's pointing from frame to frame.
POINTING_JITTER_ARCSEC = 2.0
#: Relative change of the sky level across the frame's width (range drawn per set).
SKY_GRADIENT = (0.02, 0.06)
#: Hot pixels per frame set (fixed positions, like a camera's defects).
N_HOT_PIXELS = 6
#: Where the invented stars may lie: within this radius of the target, never closer than the separation.
FIELD_RADIUS_ARCSEC = 150.0
MIN_SEPARATION_ARCSEC = 50.0

# Second word of the seed sequences: positions [seed, 4]; a frame set [seed, 5]; one frame [seed, 6, night, exposure].
_STREAM_POSITIONS = 4
_STREAM_SET = 5
_STREAM_FRAME = 6


# ----------------------------------------------------------------------------
# Geometry: the gnomonic (TAN) projection and the invented star positions
# ----------------------------------------------------------------------------


def tan_project(ra_deg: np.ndarray | float, dec_deg: np.ndarray | float,
                ra0_deg: float, dec0_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Standard coordinates (xi, eta), degrees, of positions about a tangent point.

    The gnomonic projection (Calabretta & Greisen 2002, ``TAN``, with the native
    pole at the default ``LONPOLE = 180``): xi grows to the east, eta to the north.

    Parameters
    ----------
    ra_deg, dec_deg
        Positions, degrees.
    ra0_deg, dec0_deg
        Tangent point (``CRVAL``), degrees.

    Returns
    -------
    tuple of numpy.ndarray
        ``xi`` and ``eta`` in degrees.
    """
    a = np.radians(np.asarray(ra_deg, dtype=float) - ra0_deg)
    d = np.radians(np.asarray(dec_deg, dtype=float))
    d0 = math.radians(dec0_deg)
    cos_c = np.sin(d) * math.sin(d0) + np.cos(d) * math.cos(d0) * np.cos(a)
    xi = np.cos(d) * np.sin(a) / cos_c
    eta = (np.sin(d) * math.cos(d0) - np.cos(d) * math.sin(d0) * np.cos(a)) / cos_c
    return np.degrees(xi), np.degrees(eta)


def tan_deproject(xi_deg: np.ndarray | float, eta_deg: np.ndarray | float,
                  ra0_deg: float, dec0_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Right ascension and declination (degrees) of standard coordinates; the inverse of :func:`tan_project`.

    Parameters
    ----------
    xi_deg, eta_deg
        Standard coordinates, degrees (xi east, eta north).
    ra0_deg, dec0_deg
        Tangent point, degrees.

    Returns
    -------
    tuple of numpy.ndarray
        ``ra`` in [0, 360) and ``dec``, degrees.
    """
    x = np.radians(np.asarray(xi_deg, dtype=float))
    y = np.radians(np.asarray(eta_deg, dtype=float))
    d0 = math.radians(dec0_deg)
    den = math.cos(d0) - y * math.sin(d0)
    ra = np.mod(ra0_deg + np.degrees(np.arctan2(x, den)), 360.0)
    dec = np.degrees(np.arctan2(math.sin(d0) + y * math.cos(d0), np.hypot(x, den)))
    return ra, dec


def frame_star_positions(scenario: Scenario | None = None, *, seed: int = POSITION_SEED) -> pd.DataFrame:
    """Invented sky positions of the scenario's stars.

    The target star sits at the scenario's position (the ``[target]`` table);
    every other star is drawn uniformly within :data:`FIELD_RADIUS_ARCSEC` of it,
    redrawn until it lies at least :data:`MIN_SEPARATION_ARCSEC` from every star
    placed before.  Positions are rounded to 1e-6 degree, as
    :func:`frame_target_toml` prints them, and the rounded values are used.

    Parameters
    ----------
    scenario
        The field (default :func:`~varstar.simulate.demo_scenario`).
    seed
        Seed of the draw.

    Returns
    -------
    pandas.DataFrame
        One row per star in the scenario's order: ``star, role, ra_deg, dec_deg``.
    """
    scenario = scenario or demo_scenario()
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), _STREAM_POSITIONS]))
    placed: list[tuple[float, float]] = [(0.0, 0.0)]  # the target, at the tangent point
    offsets: dict[str, tuple[float, float]] = {}
    for s in scenario.stars:
        if s.role == "target":
            offsets[s.id] = (0.0, 0.0)
            continue
        for _ in range(100_000):
            r = FIELD_RADIUS_ARCSEC * math.sqrt(rng.random())
            th = 2.0 * math.pi * rng.random()
            cand = (r * math.cos(th), r * math.sin(th))
            if all(math.hypot(cand[0] - p[0], cand[1] - p[1]) >= MIN_SEPARATION_ARCSEC for p in placed):
                break
        else:  # pragma: no cover - only with far more stars than the field holds
            raise InputError(f"scenario {scenario.field_name!r}: cannot place star {s.id!r} "
                             f"{MIN_SEPARATION_ARCSEC}\" from the others within {FIELD_RADIUS_ARCSEC}\"")
        placed.append(cand)
        offsets[s.id] = cand
    xi = np.array([offsets[s.id][0] for s in scenario.stars]) / 3600.0
    eta = np.array([offsets[s.id][1] for s in scenario.stars]) / 3600.0
    ra, dec = tan_deproject(xi, eta, scenario.ra_deg, scenario.dec_deg)
    return pd.DataFrame({
        "star": [s.id for s in scenario.stars],
        "role": [s.role for s in scenario.stars],
        "ra_deg": np.round(ra, 6),
        "dec_deg": np.round(dec, 6),
    })


def frame_target_toml(scenario: Scenario | None = None, *, seed: int = POSITION_SEED) -> str:
    """The scenario's target description with ``ra`` and ``dec`` (degrees) in every ``[[stars]]`` table.

    The text is :func:`~varstar.simulate.target_toml` (for the demo field, the
    shipped ``demo_series/target.toml``) with one comment line added after the
    header and, after each star's ``role`` line, its position from
    :func:`frame_star_positions` -- the positions :func:`write_frames` draws the
    stars at.

    Parameters
    ----------
    scenario
        The field (default :func:`~varstar.simulate.demo_scenario`).
    seed
        Seed of the invented positions.

    Returns
    -------
    str
        TOML text.
    """
    scenario = scenario or demo_scenario()
    pos = frame_star_positions(scenario, seed=seed).set_index("star")
    out: list[str] = []
    star_id: str | None = None
    header_done = False
    for line in target_toml(scenario).splitlines():
        if not header_done and not line.startswith("#"):
            out.append(f"# Star positions (ra, dec: ICRS degrees) are invented as well (seed {seed}); "
                       "they are where varstar.simulate.frames draws the stars.")
            header_done = True
        out.append(line)
        if line.startswith("id = ") and out[-2:-1] == ["[[stars]]"]:
            star_id = line.split("=", 1)[1].strip().strip('"')
        elif line.startswith("role = ") and star_id is not None:
            out.append(f"ra = {pos.loc[star_id, 'ra_deg']:.6f}")
            out.append(f"dec = {pos.loc[star_id, 'dec_deg']:.6f}")
            star_id = None
    # the frames name the B filter "Johnson B" (see write_frames): say which band that is
    out += ["", "[photometry.filters]", f'"{FILTER_NAMES["B"]}" = "B"']
    return "\n".join(out) + "\n"


# ----------------------------------------------------------------------------
# Star images
# ----------------------------------------------------------------------------


def moffat_alpha(fwhm_px: float, beta: float = MOFFAT_BETA) -> float:
    """Moffat (1969) width alpha of a profile of full width at half maximum ``fwhm_px``.

    I(r) = I0 (1 + r^2 / alpha^2)^(-beta) falls to I0 / 2 at r = alpha sqrt(2^(1/beta) - 1),
    so alpha = FWHM / (2 sqrt(2^(1/beta) - 1)).
    """
    return fwhm_px / (2.0 * math.sqrt(2.0 ** (1.0 / beta) - 1.0))


def moffat_stamps(x: np.ndarray, y: np.ndarray, fwhm_px: float, *, beta: float = MOFFAT_BETA,
                  half: int, oversample: int = OVERSAMPLE) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pixel-integrated Moffat images of unit flux, one square stamp per star.

    The profile I(r) ~ (1 + r^2 / alpha^2)^(-beta) (Moffat 1969) is averaged over
    ``oversample`` x ``oversample`` points in each pixel, then each stamp is
    scaled to sum to exactly 1, so a stamp times a flux puts exactly that flux
    into the frame (the wings beyond the stamp, under 1e-4 of the flux for the
    stamps :func:`write_frames` uses, are folded back in).

    Parameters
    ----------
    x, y
        Star centres, pixels, 0-based (the centre of pixel ``[row, col]`` is
        ``x = col``, ``y = row``).
    fwhm_px
        Full width at half maximum, pixels.
    beta
        Moffat exponent.
    half
        Half width of the stamps: each is ``2 half + 1`` pixels square.
    oversample
        Samples per pixel and axis.

    Returns
    -------
    tuple of numpy.ndarray
        ``stamps`` (n, 2 half + 1, 2 half + 1), and ``col0``, ``row0`` (n,), the
        frame pixel of each stamp's ``[0, 0]``.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ix = np.rint(x).astype(np.int64)
    iy = np.rint(y).astype(np.int64)
    sub = (np.arange(oversample) + 0.5) / oversample - 0.5
    grid = np.arange(-half, half + 1, dtype=float)
    dx = (ix - x)[:, None, None] + grid[None, :, None] + sub[None, None, :]  # (n, col, sub)
    dy = (iy - y)[:, None, None] + grid[None, :, None] + sub[None, None, :]  # (n, row, sub)
    a2 = moffat_alpha(fwhm_px, beta) ** 2
    r2 = dy[:, :, None, :, None] ** 2 + dx[:, None, :, None, :] ** 2  # (n, row, col, sub_y, sub_x)
    stamps = np.power(1.0 + r2 / a2, -beta).sum(axis=(3, 4))
    stamps /= stamps.sum(axis=(1, 2), keepdims=True)
    return stamps, ix - half, iy - half


# ----------------------------------------------------------------------------
# The frame set
# ----------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class FrameSet:
    """What :func:`write_frames` wrote, and the truth behind it.

    Attributes
    ----------
    folder
        The folder holding the frames and ``truth.csv``.
    paths
        The frame files in time order.
    truth
        One row per frame and star: ``file, frame, night, band, filter, date_obs,
        jd_utc, exptime_s, airmass, star, role, ra_deg, dec_deg, x_px, y_px,
        mag_true, mag_inst_true, flux_e, flux_adu, fwhm_arcsec, fwhm_px,
        background_e_px, peak_adu, saturated``.  ``frame`` is the exposure's id
        in the demo measurement tables; ``jd_utc`` the mid-exposure JD(UTC);
        ``x_px``/``y_px`` 0-based pixel positions (add 1 for FITS pixels);
        ``flux_e``/``flux_adu`` the star's whole injected flux; ``mag_true`` its
        true standard magnitude and ``mag_inst_true`` = -2.5 log10(flux_e /
        exptime_s); ``background_e_px`` sky + dark per pixel at the star;
        ``peak_adu`` the noise-free brightest pixel (background included);
        ``saturated`` whether pixels of the star were clipped.
    stars
        ``star, role, ra_deg, dec_deg``: the positions used (:func:`frame_star_positions`).
    night
        The night drawn (its evening date).
    seed
        The seed of the frames' random steps.
    saturate_adu
        The saturation level (``SATURATE``): pixels above it are clipped to it.
    hot_pixels
        ``x_px, y_px`` (0-based) and ``rate_e_per_s`` of each hot pixel.
    """

    folder: Path
    paths: tuple[Path, ...]
    truth: pd.DataFrame
    stars: pd.DataFrame
    night: str
    seed: int
    saturate_adu: float
    hot_pixels: pd.DataFrame


@dataclass(frozen=True)
class _Plan:
    """The exposures chosen, their pointing, geometry and noise-free star images (internal to this module)."""

    rows: pd.DataFrame          # truth rows of the chosen exposures, (frame, star) in scenario star order
    frames: pd.DataFrame        # one row per chosen exposure
    x: np.ndarray               # (frame, star) 0-based pixel positions
    y: np.ndarray
    crval: np.ndarray           # (frame, 2)
    rngs: list[np.random.Generator]  # one noise stream per frame
    stamps: list[np.ndarray]    # per frame (star, S, S), unit flux
    corners: list[tuple[np.ndarray, np.ndarray]]
    background: np.ndarray      # (frame, star): sky + dark electrons per pixel at the star
    peak_e: np.ndarray          # (frame, star): noise-free brightest pixel, electrons, background included


def _cd_matrix(scale_arcsec: float, rotation_deg: float) -> np.ndarray:
    """CD matrix (degrees per pixel) of a north-up, east-left frame turned by ``rotation_deg``.

    From CDELT1 = -s, CDELT2 = s and the rotation rho, as FITS WCS Paper II converts
    CROTA2 (Calabretta & Greisen 2002, from memory): CD1_1 = CDELT1 cos rho, CD1_2 = -CDELT2 sin rho, CD2_1 = CDELT1 sin rho,
    CD2_2 = CDELT2 cos rho.  Rounded to 1e-13 degree so the header holds exactly
    the values used.
    """
    s = scale_arcsec / 3600.0
    rho = math.radians(rotation_deg)
    cd = np.array([[-s * math.cos(rho), -s * math.sin(rho)], [-s * math.sin(rho), s * math.cos(rho)]])
    return np.round(cd, 13)


def _choose_exposures(scenario: Scenario, truth: pd.DataFrame, night: str | None, bands: Sequence[str],
                      first: int, n_frames: int) -> tuple[pd.DataFrame, int]:
    """The truth rows of the chosen night's exposures in ``bands``, ``first`` to ``first + n_frames``.

    Adds ``exposure`` (index of the exposure among all of its night's, both bands).
    Returns the rows and the night's index.
    """
    evenings = [p.evening for p in scenario.nights]
    night = evenings[0] if night is None else str(night)
    if night not in evenings:
        raise InputError(f"night {night!r} is not a night of scenario {scenario.field_name!r}; choose one of {evenings}")
    names = [b.name for b in scenario.bands]
    bands = tuple(bands)
    if not bands or len(set(bands)) != len(bands) or any(b not in names for b in bands):
        raise InputError(f"bands {bands!r}: give distinct bands among {names}")
    if isinstance(n_frames, bool) or int(n_frames) != n_frames or n_frames < 1:
        raise InputError(f"n_frames must be a positive whole number, got {n_frames!r}")
    if isinstance(first, bool) or int(first) != first or first < 0:
        raise InputError(f"first must be a whole number >= 0, got {first!r}")
    rows = truth[truth["night"] == night]
    frame_ids = pd.unique(rows["frame"])
    exposure = pd.Series(np.arange(frame_ids.size), index=frame_ids)
    rows = rows.assign(exposure=exposure.loc[rows["frame"]].to_numpy())
    chosen = pd.unique(rows.loc[rows["band"].isin(bands), "frame"])
    if first + n_frames > chosen.size:
        raise InputError(f"night {night} has {chosen.size} exposures in bands {list(bands)}; "
                         f"exposures {first} to {first + n_frames - 1} were asked for")
    keep = chosen[int(first): int(first) + int(n_frames)]
    order = {s.id: i for i, s in enumerate(scenario.stars)}
    rows = rows[rows["frame"].isin(keep)].copy()
    rows["_star_order"] = rows["star"].map(order)
    rows = rows.sort_values(["exposure", "_star_order"], kind="stable").drop(columns="_star_order")
    return rows.reset_index(drop=True), evenings.index(night)


def _plan(scenario: Scenario, rows: pd.DataFrame, night_idx: int, positions: pd.DataFrame, size: int,
          seed: int, set_rng: np.random.Generator, rotation_deg: float) -> _Plan:
    """Pointing, star positions, background and noise-free star images of every chosen exposure."""
    tel = scenario.telescope
    n_star = len(scenario.stars)
    frames = rows.groupby("exposure", sort=True).first().reset_index()
    n_frame = len(frames)
    cd = _cd_matrix(tel.pixel_scale_arcsec, rotation_deg)
    cd_inv = np.linalg.inv(cd)
    crpix0 = (size - 1) / 2.0  # 0-based; FITS CRPIX = this + 1

    # Pointing: the telescope returns to the target with a small scatter (one stream per frame).
    frame_rngs = [np.random.default_rng(np.random.SeedSequence([int(seed), _STREAM_FRAME, night_idx, int(e)]))
                  for e in frames["exposure"]]
    jitter = np.array([g.normal(0.0, POINTING_JITTER_ARCSEC, 2) for g in frame_rngs]) / 3600.0
    cra, cdec = tan_deproject(jitter[:, 0], jitter[:, 1], scenario.ra_deg, scenario.dec_deg)
    crval = np.round(np.column_stack([cra, cdec]), 9)

    ra = positions["ra_deg"].to_numpy()
    dec = positions["dec_deg"].to_numpy()
    x = np.empty((n_frame, n_star))
    y = np.empty((n_frame, n_star))
    for j in range(n_frame):
        xi, eta = tan_project(ra, dec, crval[j, 0], crval[j, 1])
        p = cd_inv @ np.vstack([xi, eta])
        x[j], y[j] = crpix0 + p[0], crpix0 + p[1]

    fwhm_px = frames["fwhm_arcsec"].to_numpy() / tel.pixel_scale_arcsec
    half = int(math.ceil(7.0 * moffat_alpha(float(fwhm_px.max())))) + 1
    margin = half + 1
    if x.min() < margin or y.min() < margin or x.max() > size - 1 - margin or y.max() > size - 1 - margin:
        spread = float(max(np.abs(x - crpix0).max(), np.abs(y - crpix0).max()))
        raise InputError(f"size {size}: the field's stars and their images need frames of at least "
                         f"{2 * int(math.ceil(spread + margin)) + 2} pixels")

    # Background: sky as the simulator has it (series.expected_signal: surface brightness times
    # airmass), plus the dark current, with a gentle linear gradient across the frame.
    band = frames["band"].to_numpy()
    sky_mag = np.array([scenario.band(b).sky_mag_arcsec2 for b in band]) + scenario.nights[night_idx].sky_offset_mag
    zp = np.array([scenario.band(b).zero_point_mag for b in band])
    exptime = frames["exptime"].to_numpy()
    sky_px = mag_to_flux(sky_mag, zp) * tel.pixel_scale_arcsec**2 * frames["airmass"].to_numpy() * exptime
    level = sky_px + tel.dark_e_per_s * exptime
    angle = set_rng.uniform(0.0, 2.0 * math.pi)
    slope0 = set_rng.uniform(*SKY_GRADIENT)
    slope = slope0 * (1.0 + 0.1 * np.array([g.standard_normal() for g in frame_rngs]))
    gx = sky_px * slope * math.cos(angle) / size  # electrons per pixel per pixel
    gy = sky_px * slope * math.sin(angle) / size
    frames = frames.assign(level=level, gx=gx, gy=gy, fwhm_px=fwhm_px)
    background = level[:, None] + gx[:, None] * (x - crpix0) + gy[:, None] * (y - crpix0)

    flux = rows["n_star_e"].to_numpy().reshape(n_frame, n_star)
    stamps, corners = [], []
    peak = np.empty((n_frame, n_star))
    for j in range(n_frame):
        st, c0, r0 = moffat_stamps(x[j], y[j], float(fwhm_px[j]), half=half)
        stamps.append(st)
        corners.append((c0, r0))
        k = st.reshape(n_star, -1).argmax(axis=1)
        pr, pc = np.divmod(k, st.shape[2])
        bg_at = level[j] + gx[j] * (c0 + pc - crpix0) + gy[j] * (r0 + pr - crpix0)
        peak[j] = flux[j] * st.reshape(n_star, -1).max(axis=1) + bg_at
    return _Plan(rows=rows, frames=frames, x=x, y=y, crval=crval, rngs=frame_rngs, stamps=stamps, corners=corners,
                 background=background, peak_e=peak)


def _saturation_level(peak_adu: np.ndarray, cap_adu: float) -> float:
    """A saturation level (ADU) that clips only the brightest star.

    The level is 1.15 times the highest noise-free pixel of every star but the
    brightest (many standard deviations of its photon noise above it), rounded
    down to 100 ADU and capped at the camera's limit; the brightest star's image
    is clipped in every frame whose seeing puts its peak above that.  Raises
    InputError when the brightest star is not clearly brighter than the rest
    (its highest pixel under 1.3 times theirs).
    """
    star_max = peak_adu.max(axis=0)
    order = np.argsort(star_max)[::-1]
    brightest, others = star_max[order[0]], star_max[order[1]]
    if brightest < 1.3 * others:
        raise InputError("no saturation level clips only the brightest star of these frames; give saturate_adu")
    return float(min(math.floor(1.15 * others / 100.0) * 100.0, math.floor(cap_adu)))


def _hot_pixels(plan: _Plan, size: int, half: int, level_e: float, max_exptime: float,
                rng: np.random.Generator) -> pd.DataFrame:
    """Positions (away from every star image) and dark rates of :data:`N_HOT_PIXELS` hot pixels.

    Their rates put them between 20 % and 60 % of the saturation level in the
    longest exposure, so they never clip.
    """
    xs, ys = plan.x.mean(axis=0), plan.y.mean(axis=0)
    keep_out = half + 10.0
    out: list[tuple[int, int]] = []
    while len(out) < N_HOT_PIXELS:
        c, r = (int(v) for v in rng.integers(3, size - 3, 2))
        if np.all(np.hypot(xs - c, ys - r) > keep_out) and (c, r) not in out:
            out.append((c, r))
    rate = rng.uniform(0.2, 0.6, N_HOT_PIXELS) * level_e / max_exptime
    return pd.DataFrame({"x_px": [c for c, _ in out], "y_px": [r for _, r in out], "rate_e_per_s": rate})


def _date_obs(jd_mid: np.ndarray, exptime_s: np.ndarray) -> tuple[list[str], np.ndarray]:
    """UTC start of each exposure: ISO 8601 text to the millisecond (``DATE-OBS``) and the
    MJD of that text (``MJD-OBS``, so the two keywords agree exactly)."""
    from astropy.time import Time

    with offline_astropy():
        t = Time(np.asarray(jd_mid, dtype=float), -0.5 * np.asarray(exptime_s, dtype=float) / 86400.0,
                 format="jd", scale="utc", precision=3)
        iso = list(t.isot)
        mjd = np.round(Time(iso, format="isot", scale="utc").mjd, 10)
        return iso, mjd


def _header(hdu, scenario: Scenario, frame: pd.Series, date_obs: str, mjd_obs: float, filter_name: str, crval: np.ndarray,
            cd: np.ndarray, size: int, saturate_adu: float, seed: int) -> None:
    """Fill a frame's FITS header: observation, camera and a celestial TAN WCS."""
    tel = scenario.telescope
    h = hdu.header
    h["OBJECT"] = (scenario.field_name, "invented field")
    h["FRAMEID"] = (str(frame["frame"]), "exposure id in the simulated measurement tables")
    h["DATE-OBS"] = (date_obs, "UTC start of exposure")
    h["MJD-OBS"] = (mjd_obs, "[d] MJD(UTC) of DATE-OBS")
    h["TIMESYS"] = ("UTC", "time scale of DATE-OBS")
    h["EXPTIME"] = (float(frame["exptime"]), "[s] exposure time")
    h["FILTER"] = (filter_name, "filter")
    h["AIRMASS"] = (float(frame["airmass"]), "airmass at mid-exposure")
    h["GAIN"] = (float(tel.gain_e_per_adu), "[e-/adu] detector gain")
    h["RDNOISE"] = (float(tel.read_noise_e), "[e-] read noise")
    h["SATURATE"] = (float(saturate_adu), "[adu] pixels above are clipped to this value")
    h["BUNIT"] = ("adu", "bias- and dark-subtracted, flat-fielded counts")
    h["WCSAXES"] = 2
    h["CTYPE1"] = "RA---TAN"
    h["CTYPE2"] = "DEC--TAN"
    h["CUNIT1"] = "deg"
    h["CUNIT2"] = "deg"
    h["RADESYS"] = "ICRS"
    h["CRPIX1"] = (size + 1) / 2.0
    h["CRPIX2"] = (size + 1) / 2.0
    h["CRVAL1"] = float(crval[0])
    h["CRVAL2"] = float(crval[1])
    h["CD1_1"] = float(cd[0, 0])
    h["CD1_2"] = float(cd[0, 1])
    h["CD2_1"] = float(cd[1, 0])
    h["CD2_2"] = float(cd[1, 1])
    h["COMMENT"] = f"Synthetic frame of an invented field, drawn by varstar.simulate.frames (seed {seed})."


def _render(plan: _Plan, j: int, size: int, scenario: Scenario, hot: pd.DataFrame,
            saturate_adu: float) -> tuple[np.ndarray, np.ndarray]:
    """One frame (float32 ADU, clipped) and which stars had pixels clipped."""
    tel = scenario.telescope
    fr = plan.frames.iloc[j]
    crpix0 = (size - 1) / 2.0
    grid = np.arange(size, dtype=float) - crpix0
    expected = fr["level"] + fr["gx"] * grid[None, :] + fr["gy"] * grid[:, None]
    n_star = plan.x.shape[1]
    flux = plan.rows["n_star_e"].to_numpy()[j * n_star:(j + 1) * n_star]
    st = plan.stamps[j]
    c0, r0 = plan.corners[j]
    s = st.shape[1]
    for i in range(n_star):
        expected[r0[i]:r0[i] + s, c0[i]:c0[i] + s] += flux[i] * st[i]
    expected[hot["y_px"].to_numpy(), hot["x_px"].to_numpy()] += hot["rate_e_per_s"].to_numpy() * fr["exptime"]
    rng = plan.rngs[j]
    electrons = rng.poisson(expected).astype(float) + rng.normal(0.0, tel.read_noise_e, expected.shape)
    adu = electrons / tel.gain_e_per_adu
    clipped = adu >= saturate_adu
    # A star is saturated if pixels within 2 FWHM of its centre were clipped.
    rad = int(math.ceil(2.0 * fr["fwhm_px"]))
    sat = np.zeros(n_star, dtype=bool)
    for i in range(n_star):
        cx, cy = int(round(plan.x[j, i])), int(round(plan.y[j, i]))
        sat[i] = bool(clipped[cy - rad:cy + rad + 1, cx - rad:cx + rad + 1].any())
    return np.minimum(adu, saturate_adu).astype(np.float32), sat


#: Print format of the numeric columns of ``truth.csv``.
_TRUTH_FORMATS = {
    "jd_utc": "%.6f", "exptime_s": "%g", "airmass": "%.4f", "ra_deg": "%.6f", "dec_deg": "%.6f",
    "x_px": "%.4f", "y_px": "%.4f", "mag_true": "%.5f", "mag_inst_true": "%.5f", "flux_e": "%.2f",
    "flux_adu": "%.2f", "fwhm_arcsec": "%.4f", "fwhm_px": "%.4f", "background_e_px": "%.3f", "peak_adu": "%.2f",
}


def truth_frames_csv(truth: pd.DataFrame) -> str:
    """The frames' truth table as CSV text (fixed decimals; ``saturated`` as 0/1)."""
    cols = {}
    for c in truth.columns:
        if c in _TRUTH_FORMATS:
            cols[c] = np.char.mod(_TRUTH_FORMATS[c], truth[c].to_numpy(dtype=float))
        elif c == "saturated":
            cols[c] = truth[c].astype(int).astype(str).to_numpy()
        else:
            cols[c] = truth[c].astype(str).to_numpy()
    return pd.DataFrame(cols).to_csv(index=False, lineterminator="\n")


def write_frames(
    folder: str | Path,
    *,
    night: str | None = None,
    n_frames: int = 40,
    size: int = 512,
    seed: int = DEFAULT_FRAME_SEED,
    bands: tuple[str, ...] = ("V", "B"),
    first: int = 0,
    filter_names: Mapping[str, str] | None = None,
    saturate_adu: float | None = None,
    rotation_deg: float = ROTATION_DEG,
    scenario: Scenario | None = None,
    series: SimulatedSeries | None = None,
    position_seed: int = POSITION_SEED,
) -> FrameSet:
    """Draw synthetic FITS frames of one night of the invented demo field and write them with their truth.

    The frames are exposures ``first`` to ``first + n_frames - 1`` (in time
    order, B and V interleaved as the simulated observer took them) of the
    chosen night, with the same ids, times, airmass, seeing and expected
    electrons as the simulator's truth behind the shipped measurement tables.
    Each frame is ``size`` x ``size`` float32 pixels in ADU: sky with a gentle
    gradient, dark current, every star as a pixel-integrated Moffat image
    (beta = :data:`MOFFAT_BETA`), hot pixels, Poisson and read noise, and pixels
    above ``SATURATE`` clipped (by default only the brightest star reaches it).

    Files: ``<frame id>-<band>.fits`` (e.g. ``20260911-001-V.fits``) and
    ``truth.csv``.  Nothing is overwritten: if any of these files exists, nothing
    is written and :class:`~varstar.errors.OutputError` is raised.

    Parameters
    ----------
    folder
        Where to write (created if missing).
    night
        Evening date of one of the scenario's nights (default: its first).
    n_frames
        Number of frames.
    size
        Frame width and height, pixels (the demo field needs at least 300).
    seed
        Seed of the frames' random steps: pointing scatter, sky gradient, hot
        pixels and pixel noise.  The truth's fluxes do not depend on it.
    bands
        Bands to draw (exposures in other bands are skipped).
    first
        Index of the first exposure drawn among the night's exposures in ``bands``.
    filter_names
        ``FILTER`` header value of each band (default :data:`FILTER_NAMES`:
        ``"V"`` and ``"Johnson B"``).
    saturate_adu
        Saturation level, ADU.  Default: chosen for the set so that the
        brightest star alone is clipped (1.15 times the brightest noise-free
        pixel of every other star, rounded down to 100 ADU, at most the
        camera's limit).
    rotation_deg
        Rotation of the pixel axes from north-up, east-left, degrees.
    scenario
        The field (default :func:`~varstar.simulate.demo_scenario`).
    series
        ``simulate(scenario)``, if already at hand (saves its second or so).
    position_seed
        Seed of the invented star positions (:func:`frame_star_positions`).

    Returns
    -------
    FrameSet
        The folder, frame paths, truth table, star positions, saturation level
        and hot pixels.

    Raises
    ------
    InputError
        For a night, band, frame range or size that cannot be drawn.
    OutputError
        When a file to be written exists already, or ``folder`` is not a folder.
    """
    from astropy.io import fits

    scenario = scenario or demo_scenario()
    if isinstance(size, bool) or int(size) != size or not 64 <= size <= 8192:
        raise InputError(f"size must be a whole number of pixels from 64 to 8192, got {size!r}")
    size = int(size)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed must be a whole number >= 0, got {seed!r}")
    series = series if series is not None else simulate(scenario)
    if set(series.truth["star"]) != {s.id for s in scenario.stars}:
        raise InputError("series: its stars are not the scenario's; pass simulate(scenario)")
    rows, night_idx = _choose_exposures(scenario, series.truth, night, bands, first, n_frames)
    names = dict(FILTER_NAMES if filter_names is None else filter_names)
    missing = [b for b in bands if not isinstance(names.get(b), str) or not names[b].strip()]
    if missing:
        raise InputError(f"filter_names gives no FILTER text for band(s) {missing}")
    positions = frame_star_positions(scenario, seed=position_seed)
    set_rng = np.random.default_rng(np.random.SeedSequence([int(seed), _STREAM_SET]))
    plan = _plan(scenario, rows, night_idx, positions, size, seed, set_rng, rotation_deg)

    tel = scenario.telescope
    gain = tel.gain_e_per_adu
    cap_adu = tel.saturation_e / gain
    level = _saturation_level(plan.peak_e / gain, cap_adu) if saturate_adu is None else float(saturate_adu)
    if not 0 < level <= cap_adu:
        raise InputError(f"saturate_adu must be above 0 and at most the camera's limit {cap_adu:.0f} ADU, got {level}")
    half = plan.stamps[0].shape[1] // 2
    hot = _hot_pixels(plan, size, half, level * gain, float(plan.frames["exptime"].max()), set_rng)

    # Refuse before drawing anything if a file is in the way.
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder}: exists and is not a folder; give a folder for the frames")
    file_names = [f"{f}-{b}.fits" for f, b in zip(plan.frames["frame"], plan.frames["band"])]
    targets = [folder / n for n in file_names] + [folder / "truth.csv"]
    present = [str(p) for p in targets if p.exists() or p.is_symlink()]
    if present:
        raise OutputError(f"{present[0]} exists already ({len(present)} of the files to write do); "
                          "frames are never overwritten: choose an empty folder or remove them")
    folder.mkdir(parents=True, exist_ok=True)

    date_obs, mjd_obs = _date_obs(plan.frames["jd"].to_numpy(), plan.frames["exptime"].to_numpy())
    cd = _cd_matrix(tel.pixel_scale_arcsec, rotation_deg)
    n_star = len(scenario.stars)
    saturated = np.zeros((len(plan.frames), n_star), dtype=bool)
    for j in range(len(plan.frames)):
        fr = plan.frames.iloc[j]
        data, saturated[j] = _render(plan, j, size, scenario, hot, level)
        hdu = fits.PrimaryHDU(data)
        _header(hdu, scenario, fr, date_obs[j], float(mjd_obs[j]), names[fr["band"]], plan.crval[j], cd, size, level,
                seed)
        buf = io.BytesIO()
        hdu.writeto(buf)
        with open(targets[j], "xb") as fh:
            fh.write(buf.getvalue())

    rep = lambda a: np.repeat(np.asarray(a), n_star)  # noqa: E731 - per-frame -> per-row
    fr = plan.frames
    flux_e = plan.rows["n_star_e"].to_numpy()
    truth = pd.DataFrame({
        "file": rep(np.array(file_names, dtype=object)),
        "frame": plan.rows["frame"].to_numpy(dtype=object),
        "night": plan.rows["night"].to_numpy(dtype=object),
        "band": plan.rows["band"].to_numpy(dtype=object),
        "filter": rep(np.array([names[b] for b in fr["band"]], dtype=object)),
        "date_obs": rep(np.array(date_obs, dtype=object)),
        "jd_utc": plan.rows["jd"].to_numpy(),
        "exptime_s": plan.rows["exptime"].to_numpy(),
        "airmass": plan.rows["airmass"].to_numpy(),
        "star": plan.rows["star"].to_numpy(dtype=object),
        "role": plan.rows["role"].to_numpy(dtype=object),
        "ra_deg": np.tile(positions["ra_deg"].to_numpy(), len(fr)),
        "dec_deg": np.tile(positions["dec_deg"].to_numpy(), len(fr)),
        "x_px": plan.x.ravel(),
        "y_px": plan.y.ravel(),
        "mag_true": plan.rows["mag_true"].to_numpy(),
        "mag_inst_true": plan.rows["mag_inst_true"].to_numpy(),
        "flux_e": flux_e,
        "flux_adu": flux_e / gain,
        "fwhm_arcsec": plan.rows["fwhm_arcsec"].to_numpy(),
        "fwhm_px": rep(fr["fwhm_px"].to_numpy()),
        "background_e_px": plan.background.ravel(),
        "peak_adu": plan.peak_e.ravel() / gain,
        "saturated": saturated.ravel(),
    })
    with open(targets[-1], "xb") as fh:
        fh.write(truth_frames_csv(truth).encode("utf-8"))
    return FrameSet(folder=folder, paths=tuple(targets[:-1]), truth=truth, stars=positions,
                    night=str(plan.rows["night"].iloc[0]), seed=int(seed), saturate_adu=level, hot_pixels=hot)
