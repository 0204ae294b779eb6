"""Simulated differential CCD photometry of one field, with known truth.

Two generators live here:

* :func:`simulate` runs a :class:`Scenario` (an invented field observed from a
  site on chosen nights) through a physical model of the sky, the telescope and
  the camera, and returns measurement tables exactly as upstream photometry
  software would hand them to varstar, together with the truth behind them.
  :func:`demo_scenario` is the invented demo field shipped in ``demo_series/``.
* :func:`synthetic_night` is a fast, fully vectorised generator of one night of
  the same kind of data for benchmarks and scale tests (no astropy call).

The instrumental magnitude of star *i* in exposure *j* taken in band *b* is::

    m_ij = M_i(t_j) + eps_b (B-V)_i(t_j) + k1_b X_j + k2_b X_j (B-V)_i(t_j)
           + zp_b(t_j) + cloud(t_j) + noise

with ``M`` the true standard magnitude in band *b*, ``eps_b`` the colour term,
``k1_b`` / ``k2_b`` the first- and second-order extinction coefficients
(Henden & Kaitchuck 1982), ``X`` the airmass (Hardie 1962), ``zp_b`` the
instrumental zero point (telescope throughput plus a slow drift and small grey
transparency changes) and ``cloud`` a grey extinction.  The instrumental
magnitude is ``-2.5 log10(N / t)`` with ``N`` the electrons collected in the
aperture in ``t`` seconds (Pogson 1856).

Noise: photon, sky, dark and read noise from the CCD equation (Merline &
Howell 1995) plus scintillation (Young 1967, scaled up by ~1.5 as Osborn et al.
2015 find for real sites).  The *reported* ``mag_err`` is the CCD-equation error
only, computed from the measured counts, as upstream photometry reports it: it
knows nothing about scintillation, so bright stars at high airmass scatter more
than their reported errors say.  That is realistic and on purpose.

Everything random takes a seed or a :class:`numpy.random.Generator`; the same
seed gives the same tables bit for bit.  Only :func:`write_series` touches files.

Modules:

* :mod:`.scenario` -- what a simulation is made of (stars, bands, telescope, nights,
  clouds) and what it returns;
* :mod:`.lightcurves` -- the pulsation template and the kinds of variability;
* :mod:`.noise` -- magnitudes and fluxes, the CCD equation, scintillation, saturation;
* :mod:`.almanac` -- cheap astronomy (Sun, sidereal time, altitudes, approximate BJD_TDB);
* :mod:`.catalogues` -- catalogue magnitudes and the TOML star lists;
* :mod:`.schedule` -- dark windows, the exposure schedule, exposure times and frames;
* :mod:`.series` -- :func:`simulate`, in named steps;
* :mod:`.info` -- the JSON-safe facts of a simulated series;
* :mod:`.synthetic` -- :func:`synthetic_night`, in named steps;
* :mod:`.fields` -- the invented demo field and standard field;
* :mod:`.files` -- CSV, TOML and JSON texts of a series, and :func:`write_series`;
* :mod:`.demo_series` -- the shipped demo files.
"""

from __future__ import annotations

from ..almanac import (
    AU_LIGHT_S,
    SIDEREAL_DEG_PER_DAY,
    TT_MINUS_UTC_S,
    approx_altitude,
    approx_bjd_tdb,
    approx_field_altitude,
    approx_sun,
    approx_sun_altitude,
    gmst_deg,
)
from .catalogues import catalogue, standards_toml, target_toml
from .demo_series import demo_files, standard_field_files
from .fields import demo_scenario, standard_field_scenario
from .frames import FrameSet, frame_star_positions, frame_target_toml, write_frames
from .files import measurements_csv, series_files, to_wide, truth_csv, wide_csv, write_series
from .lightcurves import Pulsation, Sinusoid, Trend, Variability, pulsation_template
from .noise import (
    POGSON_K,
    ccd_noise_e,
    ccd_snr,
    flux_to_mag,
    mag_err_from_snr,
    mag_to_flux,
    saturation_loss,
    scintillation_sigma,
)
from .scenario import (
    MEASUREMENT_COLUMNS,
    TRUTH_FILE_COLUMNS,
    BandSetup,
    CloudPassage,
    NightPlan,
    Scenario,
    SimStar,
    SimulatedSeries,
    Telescope,
)
from .schedule import dark_windows
from .series import simulate
from .synthetic import synthetic_night

# Not part of the API: the single module this package replaced imported it, and

__all__ = [
    "FrameSet",
    "frame_star_positions",
    "frame_target_toml",
    "write_frames",
    "AU_LIGHT_S",
    "MEASUREMENT_COLUMNS",
    "POGSON_K",
    "SIDEREAL_DEG_PER_DAY",
    "TRUTH_FILE_COLUMNS",
    "TT_MINUS_UTC_S",
    "BandSetup",
    "CloudPassage",
    "NightPlan",
    "Pulsation",
    "Scenario",
    "SimStar",
    "SimulatedSeries",
    "Sinusoid",
    "Telescope",
    "Trend",
    "Variability",
    "approx_altitude",
    "approx_bjd_tdb",
    "approx_field_altitude",
    "approx_sun",
    "approx_sun_altitude",
    "catalogue",
    "ccd_noise_e",
    "ccd_snr",
    "dark_windows",
    "demo_files",
    "demo_scenario",
    "flux_to_mag",
    "gmst_deg",
    "mag_err_from_snr",
    "mag_to_flux",
    "measurements_csv",
    "pulsation_template",
    "saturation_loss",
    "scintillation_sigma",
    "series_files",
    "simulate",
    "standard_field_files",
    "standard_field_scenario",
    "standards_toml",
    "synthetic_night",
    "target_toml",
    "to_wide",
    "truth_csv",
    "wide_csv",
    "write_series",
]
