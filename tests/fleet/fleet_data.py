"""Invented targets and nights of the fleet tests (fixed seeds).

Every field is invented with :func:`varstar.simulate.synthetic_night` (its own
name, field seed, sky position and period per target); nothing is a real star.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from varstar.simulate import measurements_csv, synthetic_night

#: Invented targets: name, field seed, RA, Dec, period (days).
TARGETS = [
    ("Wren Hollow 7", 11, 330.0, 12.0, 0.3512),
    ("Tarn Vale 12", 12, 345.0, 18.0, 0.4173),
    ("Kestrel Moor 3", 13, 355.0, 8.0, 0.2861),
    ("Osier Bend 21", 14, 5.0, 22.0, 0.5234),
]
N_EXPOSURES = 60
N_STARS = 8


@dataclass(frozen=True)
class Invented:
    name: str
    toml: Path
    nights: tuple[Path, ...]


def invented_target(folder: Path, k: int, n_nights: int = 2, *, star_prefix: str = "", vary_star: str = "",
                    file_stem: str | None = None) -> Invented:
    """Target ``TARGETS[k]``: its description (with an ephemeris) and ``n_nights`` night files in ``folder``.

    ``star_prefix`` renames every star id (so that the files' stars belong to this
    target alone); ``vary_star`` makes that comparison star vary on the last night
    (a ramp of 0.15 mag across the night); ``file_stem`` names the night files
    (default: the target's name in lower case with dashes).
    """
    name, field_seed, ra, dec, period = TARGETS[k]
    files = []
    toml_text = ""
    for night in range(n_nights):
        t, df = synthetic_night(N_EXPOSURES, N_STARS, seed=1000 * k + night, field_seed=field_seed, ra_deg=ra,
                                dec_deg=dec, start_jd=2461300.75 + night, period=period,
                                epoch=2461295.3827 + 0.1 * k, missing_fraction=0.0, flag_fraction=0.0)
        if star_prefix:
            df["star"] = star_prefix + df["star"].astype(str)
            for sid in sorted(set(df["star"].str.slice(len(star_prefix))), key=len, reverse=True):
                t = t.replace(f'id = "{sid}"', f'id = "{star_prefix}{sid}"')
        if vary_star and night == n_nights - 1:
            rows = df["star"] == vary_star
            jd = df.loc[rows, "jd"]
            df.loc[rows, "mag"] = df.loc[rows, "mag"] + 0.15 * (jd - jd.min()) / (jd.max() - jd.min())
        if night == 0:
            t = t.replace(f'name = "Synthetic field (field seed {field_seed}, invented)"', f'name = "{name}"')
            toml_text = t + f'\n[ephemeris]\nepoch = {2461295.3827 + 0.1 * k}\nperiod = {period}\nkind = "maximum"\n'
        stem = file_stem or name.lower().replace(" ", "-")
        path = folder / f"{stem}_2026-09-{16 + night}.csv"
        path.write_text(measurements_csv(df), encoding="utf-8")
        files.append(path)
    toml = folder / f"target-{k}.toml"
    toml.write_text(toml_text, encoding="utf-8")
    return Invented(name, toml, tuple(files))
