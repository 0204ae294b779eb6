"""The two invented fields the demo ships: the demo field and the standard field.

:func:`demo_scenario` is the variable-star field of ``demo_series/`` (a
pulsating target, a secretly variable comparison, clouds on the third night);
:func:`standard_field_scenario` is the field of standard stars observed with
the same camera for fitting transformation coefficients.  Both are fixed,
seeded descriptions; nothing here draws random numbers.
"""

from __future__ import annotations

import dataclasses

from .lightcurves import Pulsation, Sinusoid
from .scenario import BandSetup, CloudPassage, NightPlan, Scenario, SimStar, Telescope

__all__ = ["demo_scenario", "standard_field_scenario"]


def demo_scenario() -> Scenario:
    """The invented demo field shipped in ``demo_series/``.

    Field "Wren-Hollow 7" is made up (name, stars, magnitudes; coordinates picked
    so the field is well placed on autumn evenings from a mid-northern site).  Its
    target V1 pulsates with P = 0.46173 d and a V range of 0.68 mag; comparison
    C4 is secretly variable (0.08 mag, 1.7313 d); clouds pass on the third night.
    """
    p = Pulsation(period=0.46173, epoch=2461295.3827, amplitude={"V": 0.68, "B": 0.89}, n_harmonics=5)
    c4 = Sinusoid(period=1.7313, epoch=2461294.911, amplitude={"V": 0.080, "B": 0.092})
    stars = (
        SimStar("V1", "target", V=13.05, BV=0.38, catalog_err={"V": 0.05, "B": 0.06}, variability=p, in_catalogue=False),
        SimStar("C1", "comparison", V=11.38, BV=0.52, catalog_err={"V": 0.008, "B": 0.010}),
        SimStar("C2", "comparison", V=12.18, BV=1.21, catalog_err={"V": 0.010, "B": 0.014}),
        SimStar("C3", "comparison", V=12.74, BV=0.64, catalog_err={"V": 0.011, "B": 0.014}),
        SimStar("C4", "comparison", V=13.31, BV=0.95, catalog_err={"V": 0.013, "B": 0.018}, variability=c4),
        SimStar("C5", "comparison", V=13.87, BV=0.37, catalog_err={"V": 0.016, "B": 0.019}),
        SimStar("C6", "comparison", V=14.42, BV=1.38, catalog_err={"V": 0.020, "B": 0.030}),
        SimStar("C7", "comparison", V=14.85, BV=0.78, catalog_err={"V": 0.024, "B": 0.032}),
        SimStar("K1", "check", V=13.58, BV=0.71, catalog_err={"V": 0.014, "B": 0.019}),
    )
    # Zero points from a 35 cm aperture, ~880 / 980 A passbands and ~35 % / ~25 %
    # total throughput (rough estimate from Vega's flux, from memory); sky for a
    # rural site; extinction typical of a 2 km site (common practice).
    bands = (
        BandSetup("V", exptime_s=60.0, zero_point_mag=20.90, colour_term=-0.045, k1=0.19, k2=-0.004,
                  k1_night_sigma=0.02, sky_mag_arcsec2=21.1),
        BandSetup("B", exptime_s=90.0, zero_point_mag=20.60, colour_term=0.038, k1=0.32, k2=-0.030,
                  k1_night_sigma=0.03, sky_mag_arcsec2=22.0),
    )
    nights = (
        NightPlan("2026-09-11", start_delay_h=0.4, max_hours=5.6, seeing_arcsec=2.5),
        NightPlan("2026-09-12", start_delay_h=1.2, max_hours=4.8, seeing_arcsec=2.9),
        NightPlan("2026-09-19", start_delay_h=0.2, max_hours=6.1, seeing_arcsec=2.7, sky_offset_mag=-0.4),
        NightPlan("2026-09-26", start_delay_h=3.6, max_hours=4.4, seeing_arcsec=3.1, sky_offset_mag=-0.9),
        NightPlan("2026-10-06", start_delay_h=0.1, max_hours=5.4, seeing_arcsec=2.4),
        NightPlan("2026-10-10", start_delay_h=2.4, max_hours=5.1, seeing_arcsec=2.6),
    )
    clouds = (CloudPassage(night=2, start_after_h=2.1, duration_h=1.0, peak_mag=1.45, floor_mag=0.3, thick_mag=4.2, thick_minutes=6.0),)
    return Scenario(
        field_name="Wren-Hollow 7 (invented demo field)",
        ra_deg=341.7625,
        dec_deg=18.6083,
        latitude_deg=34.21,
        longitude_deg=-108.39,
        elevation_m=2050.0,
        stars=stars,
        bands=bands,
        nights=nights,
        telescope=Telescope(),
        clouds=clouds,
        seed=20260911,
        wide_form_night=5,
        published_ephemeris=(2461295.3861, 0.4617140, "maximum"),
    )


def standard_field_scenario() -> Scenario:
    """An invented field of twelve standard stars, observed with the demo telescope.

    "Lantern Cluster" is made up.  Its stars span B-V from about 0 to 1.6 (the
    trade wants at least ~1 mag of colour to pin down the slopes, common
    practice) with small catalogue errors, as standard-star catalogues have.
    It is observed for half an hour at the start of the demo's first night, with
    the same filters, camera and colour terms as the demo field, so the fitted
    coefficients apply to the demo series.
    """
    demo = demo_scenario()
    V = (10.62, 11.05, 11.48, 11.90, 12.21, 12.57, 12.83, 13.12, 13.40, 13.66, 13.95, 14.22)
    BV = (0.02, 1.48, 0.35, 0.91, 0.18, 1.21, 0.64, 1.59, 0.47, 0.08, 1.03, 0.76)
    errs = {"V": 0.006, "B": 0.008}
    stars = tuple(
        SimStar(f"S{k + 1:02d}", "target" if k == 0 else "comparison", V=v, BV=c, catalog_err=errs)
        for k, (v, c) in enumerate(zip(V, BV))
    )
    return dataclasses.replace(
        demo,
        field_name="Lantern Cluster (invented standard field)",
        ra_deg=318.40,
        dec_deg=9.75,
        stars=stars,
        nights=(NightPlan("2026-09-11", start_delay_h=0.0, max_hours=0.5, seeing_arcsec=2.5),),
        clouds=(),
        seed=demo.seed + 101,
        n_cosmic=0,
        missing_fraction=0.0,
        wide_form_night=None,
        published_ephemeris=None,
    )
