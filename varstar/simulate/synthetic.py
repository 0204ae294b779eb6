"""A fast, fully vectorised generator of one night of invented data, for benchmarks
and scale tests (no astropy call).

:func:`synthetic_night` runs in named steps: the star field
(:func:`synthetic_field`, from its own seed so that every night shows the same
field), the exposures (:func:`synthetic_exposures`), the true magnitudes
(:func:`synthetic_true_magnitudes`), the instrument and its noise
(:func:`synthetic_measure`), and the measurement table and target TOML.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from ..timescale import hardie_airmass, night_label
from ..almanac import SIDEREAL_DEG_PER_DAY, approx_bjd_tdb, approx_field_altitude, gmst_deg, precess_approx
from .catalogues import toml_text
from .lightcurves import pulsation_template
from .noise import ccd_noise_e, ccd_snr, flux_to_mag, mag_err_from_snr, mag_to_flux, scintillation_sigma
from .scenario import BAND_COLOUR_SLOPE, Telescope

__all__ = [
    "SYNTHETIC_BANDS",
    "SyntheticExposures",
    "SyntheticField",
    "synthetic_exposures",
    "synthetic_field",
    "synthetic_measure",
    "synthetic_night",
    "synthetic_true_magnitudes",
]

#: Band -> (exptime_s, zero_point_mag, colour_term, k1, k2, sky_mag_arcsec2) of the synthetic camera.
SYNTHETIC_BANDS = {
    "B": (90.0, 20.60, 0.038, 0.32, -0.030, 22.0),
    "V": (60.0, 20.90, -0.045, 0.19, -0.004, 21.1),
    "R": (60.0, 20.90, 0.030, 0.13, 0.0, 20.5),
    "I": (60.0, 20.30, 0.020, 0.08, 0.0, 19.6),
}


@dataclass(frozen=True)
class SyntheticField:
    """The synthetic star field: ``ids`` and ``roles`` per star, true ``v`` and ``bv``,
    the V catalogue error ``cat_err_v``, each band's colour ``slope``, the true mean
    standard magnitudes ``std_mean`` and catalogue magnitudes ``cat`` (band, star)."""

    ids: list[str]
    roles: list[str]
    v: np.ndarray
    bv: np.ndarray
    cat_err_v: np.ndarray
    slope: np.ndarray
    std_mean: np.ndarray
    cat: np.ndarray


def synthetic_field(n_stars: int, bands: tuple[str, ...], field_seed: int) -> SyntheticField:
    """``V1`` (the demo's target magnitude and colour), comparisons ``C1``... and, with four
    or more stars, a check star ``K1``; magnitudes, colours and catalogue errors from ``field_seed``."""
    frng = np.random.default_rng(np.random.SeedSequence([int(field_seed), 3]))
    n_comp = n_stars - 1 - (1 if n_stars >= 4 else 0)
    ids = ["V1"] + [f"C{k}" for k in range(1, n_comp + 1)] + (["K1"] if n_stars >= 4 else [])
    roles = ["target"] + ["comparison"] * n_comp + (["check"] if n_stars >= 4 else [])
    v = np.concatenate([[13.05], np.sort(frng.uniform(10.8, 15.0, n_stars - 1))])
    bv = np.concatenate([[0.38], frng.uniform(0.3, 1.4, n_stars - 1)])
    cat_err_v = 0.006 + 0.004 * (v - 10.0)
    slope = np.array([BAND_COLOUR_SLOPE[b] for b in bands])
    std_mean = v[None, :] + slope[:, None] * bv[None, :]  # (band, star)
    cat = std_mean + (cat_err_v * (1.0 + 0.4 * np.abs(slope[:, None]))) * frng.standard_normal(std_mean.shape)
    return SyntheticField(ids=ids, roles=roles, v=v, bv=bv, cat_err_v=cat_err_v, slope=slope, std_mean=std_mean, cat=cat)


@dataclass(frozen=True)
class SyntheticExposures:
    """Interleaved exposures: mid-exposure ``jd`` (UTC), ``band_idx``, ``exptime`` (s),
    ``airmass``, approximate ``bjd`` (TDB) and each exposure's ``band_params`` (its
    band's row of :data:`SYNTHETIC_BANDS`)."""

    jd: np.ndarray
    band_idx: np.ndarray
    exptime: np.ndarray
    airmass: np.ndarray
    bjd: np.ndarray
    band_params: np.ndarray


def synthetic_exposures(
    n_frames: int, bands: tuple[str, ...], start_jd: float, night_hours: float, centre_on_transit: bool,
    ra_deg: float, dec_deg: float, latitude_deg: float, longitude_deg: float,
) -> SyntheticExposures:
    """``n_frames`` exposures spread evenly over ``night_hours``, centred on the field's transit
    nearest ``start_jd + night_hours / 2`` (or starting at ``start_jd``); airmass and BJD_TDB
    from the cheap almanac."""
    nb = len(bands)
    span = night_hours / 24.0
    cadence = span / n_frames
    if centre_on_transit:
        t_c = start_jd + 0.5 * span
        ra_d, _ = precess_approx(ra_deg, dec_deg, np.array([t_c]))
        ha = ((gmst_deg(t_c) + longitude_deg - ra_d[0]) + 180.0) % 360.0 - 180.0
        t0 = t_c - ha / SIDEREAL_DEG_PER_DAY - 0.5 * span
    else:
        t0 = start_jd
    k = np.arange(n_frames)
    band_idx = k % nb
    jd = np.round(t0 + (k + 0.5) * cadence, 6)
    prm = np.array([SYNTHETIC_BANDS[b] for b in bands])  # (band, 6)
    exptime = np.minimum(prm[band_idx, 0], np.floor(0.8 * cadence * 86400.0 * 10.0) / 10.0)
    if np.any(exptime <= 0):
        raise InputError(f"synthetic_night: {n_frames} exposures do not fit in {night_hours} h")
    alt = approx_field_altitude(jd, ra_deg, dec_deg, latitude_deg, longitude_deg)
    if np.any(alt < 5.0):
        raise InputError("synthetic_night: the field is below 5 deg altitude; use centre_on_transit=True or another start_jd")
    airmass = hardie_airmass(90.0 - alt)
    bjd = approx_bjd_tdb(jd, ra_deg, dec_deg)
    return SyntheticExposures(jd=jd, band_idx=band_idx, exptime=exptime, airmass=airmass, bjd=bjd, band_params=prm[band_idx])


def synthetic_true_magnitudes(
    fld: SyntheticField, exp: SyntheticExposures, bands: tuple[str, ...],
    period: float, epoch: float, amplitude_v: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Peak-to-peak amplitude per band, and true magnitude and B-V (exposure, star); only ``V1`` varies."""
    n_frames, n_stars = exp.jd.size, len(fld.ids)
    amp = amplitude_v * (1.0 + 0.31 * fld.slope)  # B larger than V, redder bands smaller (RR-Lyrae-like)
    shape = pulsation_template(((exp.bjd - epoch) / period) % 1.0)
    mag_true = np.broadcast_to(fld.std_mean[exp.band_idx], (n_frames, n_stars)).copy()
    mag_true[:, 0] += amp[exp.band_idx] * shape
    i_b = bands.index("B") if "B" in bands else None
    i_v = bands.index("V") if "V" in bands else None
    colour = np.broadcast_to(fld.bv, (n_frames, n_stars)).copy()
    if i_b is not None and i_v is not None:
        colour[:, 0] = fld.bv[0] + (amp[i_b] - amp[i_v]) * shape
    return amp, mag_true, colour


def synthetic_measure(
    exp: SyntheticExposures, mag_true: np.ndarray, colour: np.ndarray, tel: Telescope, elevation_m: float,
    rng: np.random.Generator, missing_fraction: float, flag_fraction: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Instrumental magnitudes, their reported errors, flags and the rows kept, (exposure, star).

    Draws from ``rng``, in order: the night's zero-point offset and drift,
    transparency, scintillation and CCD noise, flags and their damage, random
    losses.  Rows below a signal-to-noise of 5 are not kept.
    """
    jd, prm, airmass, exptime = exp.jd, exp.band_params, exp.airmass, exp.exptime
    n_frames = jd.size
    n_stars = mag_true.shape[1]
    X = airmass[:, None]
    zp = -prm[:, 1] + 0.01 * rng.standard_normal() + 0.01 * rng.standard_normal() * (jd - jd.mean()) * 24.0
    zp = zp + rng.exponential(0.004, n_frames)
    m_inst = (mag_true + prm[:, 2][:, None] * colour + prm[:, 3][:, None] * X
              + prm[:, 4][:, None] * X * colour + zp[:, None])
    t = exptime[:, None]
    n_e = t * mag_to_flux(m_inst)
    sky_px = (exptime * mag_to_flux(prm[:, 5], prm[:, 1]) * tel.pixel_scale_arcsec**2 * airmass)[:, None]
    dark_px = tel.dark_e_per_s * t
    sig_e = ccd_noise_e(n_e, tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e)
    sig_sc = scintillation_sigma(tel.aperture_cm, X, elevation_m, t, 1.5)
    z = rng.standard_normal((2, n_frames, n_stars))
    n_meas = n_e * (1.0 + sig_sc * z[0]) + sig_e * z[1]
    n_meas = np.clip(n_meas, 1e-3 * n_e, None)
    mag = flux_to_mag(n_meas / t)
    mag_err = mag_err_from_snr(ccd_snr(n_meas, tel.n_pix, tel.n_background_px, sky_px, dark_px, tel.read_noise_e))
    flag = (rng.random((n_frames, n_stars)) < flag_fraction).astype(np.int64)
    # A flagged measurement is bad: here clipped (saturated-like), fainter by 0.02-0.3 mag.
    mag = np.where(flag == 1, mag + rng.uniform(0.02, 0.3, flag.shape), mag)
    keep = (rng.random((n_frames, n_stars)) >= missing_fraction).ravel()
    # Below a signal-to-noise of 5 the upstream photometry reports no measurement.
    keep &= (mag_err <= mag_err_from_snr(5.0)).ravel()
    return mag, mag_err, flag, keep


def _synthetic_table(fld: SyntheticField, exp: SyntheticExposures, bands: tuple[str, ...], longitude_deg: float,
                     mag: np.ndarray, mag_err: np.ndarray, flag: np.ndarray, keep: np.ndarray) -> pd.DataFrame:
    """The long-form measurement table of the kept rows; frames named ``YYYYMMDD-NNNN``."""
    jd = exp.jd
    n_frames, n_stars = jd.size, len(fld.ids)
    date = night_label(np.array([jd[0]]), longitude_deg)[0].replace("-", "")
    frames = np.char.add(date + "-", np.char.zfill(np.arange(1, n_frames + 1).astype(str), 4 if n_frames < 10000 else 6))
    ids_arr = np.array(fld.ids, dtype=object)
    return pd.DataFrame(
        {
            "jd": np.repeat(jd, n_stars)[keep],
            "band": np.repeat(np.array(bands, dtype=object)[exp.band_idx], n_stars)[keep],
            "star": np.tile(ids_arr, n_frames)[keep],
            "mag": mag.ravel()[keep],
            "mag_err": mag_err.ravel()[keep],
            "airmass": np.repeat(exp.airmass, n_stars)[keep],
            "exptime": np.repeat(exp.exptime, n_stars)[keep],
            "flag": flag.ravel()[keep],
            "frame": np.repeat(frames.astype(object), n_stars)[keep],
        }
    )


def _synthetic_toml(fld: SyntheticField, bands: tuple[str, ...], field_seed: int, ra_deg: float, dec_deg: float,
                    latitude_deg: float, longitude_deg: float, elevation_m: float) -> str:
    """The synthetic field's target TOML: catalogue magnitudes for every star but the target."""
    entries = []
    for i, (sid, role) in enumerate(zip(fld.ids, fld.roles)):
        if role == "target":
            entries.append((sid, role, {}, {}))
        else:
            entries.append((sid, role, {b: float(np.round(fld.cat[j, i], 3)) for j, b in enumerate(bands)},
                            {b: float(np.round(fld.cat_err_v[i] * (1.0 + 0.4 * abs(fld.slope[j])), 3))
                             for j, b in enumerate(bands)}))
    return toml_text(f"Synthetic field (field seed {field_seed}, invented)", ra_deg, dec_deg, latitude_deg,
                     longitude_deg, elevation_m, entries, "Synthetic scale-test field from varstar.simulate.synthetic_night.")


def synthetic_night(
    n_exposures: int,
    n_stars: int,
    bands: Sequence[str] = ("B", "V"),
    seed: int | np.random.Generator = 0,
    start_jd: float = 2461300.75,
    *,
    field_seed: int = 0,
    ra_deg: float = 341.7625,
    dec_deg: float = 18.6083,
    latitude_deg: float = 34.21,
    longitude_deg: float = -108.39,
    elevation_m: float = 2050.0,
    night_hours: float = 7.0,
    centre_on_transit: bool = True,
    period: float = 0.46173,
    epoch: float = 2461295.3827,
    amplitude_v: float = 0.68,
    missing_fraction: float = 0.003,
    flag_fraction: float = 0.001,
    telescope: Telescope | None = None,
) -> tuple[str, pd.DataFrame]:
    """One synthetic night, fully vectorised, for benchmarks and scale tests.

    ``n_exposures`` exposures in *each* band, interleaved (B, V, B, V, ...), of
    ``n_stars`` stars: ``V1`` the target (pulsating, as in the demo), ``C1`` ...
    comparisons and, with four or more stars, a last check star ``K1``.  The
    measurement table has ``n_exposures * n_stars * len(bands)`` rows less about
    ``missing_fraction`` of them.

    The exposures span ``night_hours`` (so the cadence shortens, and the exposure
    time with it, as ``n_exposures`` grows) centred on the field's meridian
    transit nearest ``start_jd + night_hours / 2`` (the Sun is ignored: these are
    scale data), or starting at ``start_jd`` when ``centre_on_transit`` is False.
    Airmass (Hardie 1962) comes from cheap sidereal-time geometry, consistent
    with the JD and coordinates; the light curve is evaluated at an approximate
    BJD_TDB (:func:`approx_bjd_tdb`, good to seconds).  No astropy call.

    Parameters
    ----------
    seed
        Noise and defects of this night.
    field_seed
        The star field (magnitudes, colours, catalogue errors): keep it fixed
        across nights to get the same field every night.

    Returns
    -------
    (str, pandas.DataFrame)
        The target TOML text and the long-form measurement table (columns
        ``jd, band, star, mag, mag_err, airmass, exptime, flag, frame``).  The
        table's ``attrs["truth"]`` holds the target's period, epoch and amplitudes.
    """
    if n_exposures < 1 or n_stars < 3:
        raise InputError(f"synthetic_night: need n_exposures >= 1 and n_stars >= 3, got {n_exposures}, {n_stars}")
    bands = tuple(bands)
    unknown = [b for b in bands if b not in SYNTHETIC_BANDS]
    if unknown or not bands or len(set(bands)) != len(bands):
        raise InputError(f"synthetic_night: bands must be distinct names among {', '.join(SYNTHETIC_BANDS)}, got {bands}")
    tel = telescope or Telescope()
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)

    fld = synthetic_field(n_stars, bands, field_seed)
    exp = synthetic_exposures(n_exposures * len(bands), bands, start_jd, night_hours, centre_on_transit,
                              ra_deg, dec_deg, latitude_deg, longitude_deg)
    amp, mag_true, colour = synthetic_true_magnitudes(fld, exp, bands, period, epoch, amplitude_v)
    mag, mag_err, flag, keep = synthetic_measure(exp, mag_true, colour, tel, elevation_m, rng,
                                                 missing_fraction, flag_fraction)
    df = _synthetic_table(fld, exp, bands, longitude_deg, mag, mag_err, flag, keep)
    df.attrs["truth"] = {
        "target": "V1", "period": period, "epoch": epoch,
        "amplitude_p2p": {b: float(a) for b, a in zip(bands, amp)},
    }
    toml = _synthetic_toml(fld, bands, field_seed, ra_deg, dec_deg, latitude_deg, longitude_deg, elevation_m)
    return toml, df

