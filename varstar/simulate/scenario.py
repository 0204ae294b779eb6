"""What a simulation is made of: the field's stars, the filters, the telescope, the
nights, passing clouds (:class:`Scenario`), and what a simulation returns
(:class:`SimulatedSeries`).

Frozen dataclasses with no behaviour beyond a star's mean magnitude in a band,
a scenario's consistency check and their JSON-safe ``to_dict`` (recorded in
``truth.json``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from typing import Any

import pandas as pd

from ..errors import InputError
from .lightcurves import Variability

__all__ = [
    "BAND_COLOUR_SLOPE",
    "MEASUREMENT_COLUMNS",
    "TRUTH_FILE_COLUMNS",
    "BandSetup",
    "CloudPassage",
    "NightPlan",
    "Scenario",
    "SimStar",
    "SimulatedSeries",
    "Telescope",
]

#: Colour index of each supported band relative to V, per unit B-V: M_band = V + c (B-V).
#: B and V are exact by definition; R and I are rough main-sequence slopes (from
#: memory, Johnson-Cousins) used only by the synthetic generator.
BAND_COLOUR_SLOPE = {"B": 1.0, "V": 0.0, "R": -0.55, "I": -1.10}


@dataclass(frozen=True)
class SimStar:
    """One star of the simulated field.

    ``V`` and ``BV`` are the true mean standard V magnitude and B-V colour; the
    catalogue lists them with Gaussian errors of ``catalog_err`` (band -> mag).
    ``in_catalogue`` False leaves the star's magnitudes out of the target file
    (usual for the variable target).
    """

    id: str
    role: str
    V: float
    BV: float
    catalog_err: Mapping[str, float] = field(default_factory=lambda: {"V": 0.01, "B": 0.015})
    variability: Variability | None = None
    in_catalogue: bool = True

    def mean_mag(self, band: str) -> float:
        """True mean standard magnitude in ``band`` (V plus the band's colour slope times B-V)."""
        return self.V + BAND_COLOUR_SLOPE[band] * self.BV

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe description of the star, its B magnitude and its variability."""
        return {"id": self.id, "role": self.role, "V": self.V, "BV": self.BV, "B": round(self.V + self.BV, 6),
                "catalog_err": dict(self.catalog_err), "in_catalogue": self.in_catalogue,
                "variability": None if self.variability is None else self.variability.to_dict()}


@dataclass(frozen=True)
class BandSetup:
    """One filter and how it is observed.

    ``zero_point_mag``: magnitude of a star giving 1 e-/s above the atmosphere;
    ``colour_term``: eps in m = M + eps (B-V) + ...; ``k1`` / ``k2``: first- and
    second-order extinction (mag per airmass, and per airmass per mag of B-V);
    ``k1_night_sigma``: night-to-night scatter of k1; ``sky_mag_arcsec2``: sky
    surface brightness at the zenith.
    """

    name: str
    exptime_s: float
    zero_point_mag: float
    colour_term: float
    k1: float
    k2: float
    k1_night_sigma: float
    sky_mag_arcsec2: float

    def to_dict(self) -> dict[str, Any]:
        """The fields as a plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class Telescope:
    """Telescope and camera: aperture, detector noise, sampling, photometry aperture."""

    aperture_cm: float = 35.6
    gain_e_per_adu: float = 1.4
    read_noise_e: float = 9.0
    dark_e_per_s: float = 0.02
    pixel_scale_arcsec: float = 1.1
    aperture_radius_px: float = 5.0
    n_background_px: float = 400.0
    full_well_e: float = 95000.0
    adc_max_adu: float = 65535.0

    @property
    def n_pix(self) -> float:
        """Pixels in the photometry aperture."""
        return math.pi * self.aperture_radius_px**2

    @property
    def saturation_e(self) -> float:
        """Electrons at which a pixel stops responding: the full well or the converter's top, whichever is lower."""
        return min(self.full_well_e, self.adc_max_adu * self.gain_e_per_adu)

    def to_dict(self) -> dict[str, Any]:
        """The fields as a plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class NightPlan:
    """One observing night: the evening's date at the site, when the observer starts and stops.

    Observing starts ``start_delay_h`` after the dark window opens (Sun below the
    scenario's limit and field above its altitude limit) and lasts at most
    ``max_hours``.  ``seeing_arcsec`` is the zenith FWHM; ``sky_offset_mag``
    brightens (negative) the sky, e.g. for moonlight.
    """

    evening: str
    start_delay_h: float = 0.0
    max_hours: float | None = None
    seeing_arcsec: float = 2.6
    sky_offset_mag: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        """The fields as a plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class CloudPassage:
    """Passing clouds: grey extinction between ``floor_mag`` and ``peak_mag``.

    Starts ``start_after_h`` after the night's first exposure and lasts
    ``duration_h``.  Optionally a very thick moment of ``thick_mag`` lasting
    ``thick_minutes`` at 60 % of the passage, in which faint stars are lost.
    """

    night: int
    start_after_h: float
    duration_h: float
    peak_mag: float = 1.2
    floor_mag: float = 0.3
    thick_mag: float | None = None
    thick_minutes: float = 5.0

    def to_dict(self) -> dict[str, Any]:
        """The fields as a plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class Scenario:
    """Everything that defines a simulated series of nights of one field."""

    field_name: str
    ra_deg: float
    dec_deg: float
    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    stars: tuple[SimStar, ...]
    bands: tuple[BandSetup, ...]
    nights: tuple[NightPlan, ...]
    telescope: Telescope = Telescope()
    clouds: tuple[CloudPassage, ...] = ()
    seed: int = 0
    overhead_s: float = 20.0
    overhead_jitter_s: float = 4.0
    sun_limit_deg: float = -12.0
    altitude_limit_deg: float = 25.0
    scintillation_factor: float = 1.5
    seeing_airmass_exponent: float = 0.6
    seeing_jitter: float = 0.12
    zp_night_sigma_mag: float = 0.04
    zp_drift_sigma_mag_per_h: float = 0.01
    transparency_jitter_mag: float = 0.004
    detection_snr: float = 5.0
    missing_fraction: float = 0.004
    n_cosmic: int = 4
    wide_form_night: int | None = None
    #: A "published" ephemeris of the target written into its TOML: (epoch BJD_TDB, period d,
    #: "maximum" or "minimum").  Invented like everything else; it may differ from the truth.
    published_ephemeris: tuple[float, float, str] | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe description of the whole scenario (nested parts through their ``to_dict``)."""
        out: dict[str, Any] = {}
        for k in self.__dataclass_fields__:
            v = getattr(self, k)
            if isinstance(v, tuple):
                out[k] = [x.to_dict() if hasattr(x, "to_dict") else x for x in v]
            elif hasattr(v, "to_dict"):
                out[k] = v.to_dict()
            else:
                out[k] = v
        return out

    def band(self, name: str) -> BandSetup:
        """The setup of band ``name`` (KeyError if the scenario does not observe it)."""
        for b in self.bands:
            if b.name == name:
                return b
        raise KeyError(name)

    def validate(self) -> None:
        """Raise :class:`InputError` for an inconsistent scenario."""
        names = [b.name for b in self.bands]
        if not names or len(set(names)) != len(names):
            raise InputError(f"scenario {self.field_name!r}: bands must be distinct and not empty, got {names}")
        for b in names:
            if b not in ("B", "V"):
                raise InputError(f"scenario {self.field_name!r}: band {b!r} is not simulated (use B and/or V)")
        ids = [s.id for s in self.stars]
        if len(set(ids)) != len(ids):
            raise InputError(f"scenario {self.field_name!r}: star ids must be unique, got {ids}")
        if sum(s.role == "target" for s in self.stars) != 1:
            raise InputError(f"scenario {self.field_name!r}: exactly one star must have role 'target'")
        for s in self.stars:
            if s.role not in ("target", "comparison", "check"):
                raise InputError(f"scenario star {s.id!r}: role must be target, comparison or check")
            if s.variability is not None:
                amp = getattr(s.variability, "amplitude", None) or getattr(s.variability, "rate", {})
                missing = [b for b in names if b not in amp]
                if missing:
                    raise InputError(f"scenario star {s.id!r}: variability lacks band(s) {missing}")
        for c in self.clouds:
            if not 0 <= c.night < len(self.nights):
                raise InputError(f"scenario cloud passage: night index {c.night} is not one of the {len(self.nights)} nights")
        if self.wide_form_night is not None and not 0 <= self.wide_form_night < len(self.nights):
            raise InputError(f"scenario wide_form_night {self.wide_form_night} is not a night index")


@dataclass(frozen=True)
class SimulatedSeries:
    """What :func:`simulate` returns.

    ``nights``: one long-form measurement table per night (columns ``jd, band,
    star, mag, mag_err, airmass, exptime, flag, frame``).  ``truth``: one row per
    exposure per star (measured or not) with ``jd, bjd_tdb, band, star, role,
    mag_true, cloud, airmass`` and the model's intermediate quantities.
    ``info``: JSON-safe facts (period, epoch, amplitudes, variable comparison,
    cloudy frames, flagged and lost rows, extinction by night).
    """

    nights: list[pd.DataFrame]
    truth: pd.DataFrame
    info: dict[str, Any]
    evenings: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """The info dict (the tables are not part of the JSON form)."""
        return dict(self.info)


#: Columns of a long-form measurement table, in file order.
MEASUREMENT_COLUMNS = ("jd", "band", "star", "mag", "mag_err", "airmass", "exptime", "flag", "frame")
#: Columns of the truth table written to ``truth.csv``, in file order.
TRUTH_FILE_COLUMNS = ("jd", "bjd_tdb", "band", "star", "role", "mag_true", "airmass", "cloud")
