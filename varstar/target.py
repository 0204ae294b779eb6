"""Target description: a TOML file -> :class:`Target`.

The format is varstar's own (documented in the README):

``[target]`` name, ra, dec; ``[site]`` latitude, longitude, elevation;
``[[stars]]`` one table per star with ``id``, ``role`` (target | comparison |
check) and catalogue standard magnitudes by band (``V = 12.1``, ``V_err = 0.01``).
Tables this version does not know (``[transformation]``, ``[ephemeris]``, ...)
are kept verbatim in :attr:`Target.extra` and in the original text.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from .errors import InputError
from .inputs import finite_number, id_problem, load_toml, printable, read_toml_text, shown

ROLES = ("target", "comparison", "check")
_KNOWN_TABLES = ("target", "site", "stars")
_STAR_KEYS = ("id", "role", "name", "notes", "ra", "dec")
_BAND_RE = re.compile(r"^[A-Za-z][A-Za-z0-9']{0,7}$")


@dataclass(frozen=True)
class Site:
    """Observing site (geodetic, WGS84)."""

    latitude_deg: float
    longitude_deg: float
    elevation_m: float


@dataclass(frozen=True)
class Star:
    """One star measured in the field."""

    id: str
    role: str
    catalog: Mapping[str, float] = field(default_factory=dict)
    catalog_err: Mapping[str, float] = field(default_factory=dict)
    #: ICRS position in degrees (``ra``, ``dec`` in its ``[[stars]]`` table; the target's defaults to
    #: ``[target]``); None where not given.  Needed to measure the star on FITS frames.
    ra_deg: float | None = None
    dec_deg: float | None = None


@dataclass(frozen=True)
class Target:
    """A target field: the variable, its comparison and check stars, and the site."""

    name: str
    ra_deg: float
    dec_deg: float
    site: Site
    stars: tuple[Star, ...]
    extra: Mapping[str, Any] = field(default_factory=dict)
    source_text: str = ""
    source: str = "<string>"
    #: Interstellar colour excess E(B-V) and its error (``[target] ebv``), None if not given.
    ebv: float | None = None
    ebv_err: float = 0.0

    @property
    def star_ids(self) -> tuple[str, ...]:
        return tuple(s.id for s in self.stars)

    @property
    def target_star(self) -> Star:
        return next(s for s in self.stars if s.role == "target")

    def star(self, star_id: str) -> Star:
        for s in self.stars:
            if s.id == star_id:
                return s
        raise KeyError(star_id)

    def stars_with_role(self, role: str) -> tuple[Star, ...]:
        return tuple(s for s in self.stars if s.role == role)

    def catalog_bands(self) -> set[str]:
        """Bands in which at least one comparison star has a catalogue magnitude."""
        return {b for s in self.stars_with_role("comparison") for b in s.catalog}

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "ra_deg": self.ra_deg,
            "dec_deg": self.dec_deg,
            "site": {
                "latitude_deg": self.site.latitude_deg,
                "longitude_deg": self.site.longitude_deg,
                "elevation_m": self.site.elevation_m,
            },
            "stars": [
                {"id": s.id, "role": s.role, "catalog": dict(s.catalog), "catalog_err": dict(s.catalog_err),
                 **({"ra_deg": s.ra_deg, "dec_deg": s.dec_deg} if s.ra_deg is not None else {})}
                for s in self.stars
            ],
        }


def parse_angle(value: Any, *, kind: str, where: str) -> float:
    """Parse an angle given in degrees or sexagesimal text.

    ``kind`` is ``"ra"`` (sexagesimal in hours, 0 <= ra < 360 deg) or ``"dec"``
    (sexagesimal in degrees, -90..90).
    """
    if isinstance(value, bool):
        raise InputError(f"{where}: expected a number of degrees or a sexagesimal string, got {value!r}")
    if isinstance(value, (int, float)):
        deg = finite_number(value, where)
    elif isinstance(value, str):
        text = value.strip()
        parts = re.split(r"[:\s hdms°'\"]+", text.replace("+", "").replace("−", "-").strip())
        parts = [p for p in parts if p != ""]
        try:
            nums = [float(p) for p in parts]
        except ValueError:
            raise InputError(f"{where}: cannot read {value!r} as an angle (use degrees or e.g. '18:54:02.4')") from None
        if not 1 <= len(nums) <= 3 or any(not 0 <= n < 60 for n in nums[1:]):
            raise InputError(f"{where}: cannot read {value!r} as an angle (use degrees or e.g. '18:54:02.4')")
        negative = text.lstrip().startswith(("-", "−"))
        mag = abs(nums[0]) + sum(n / 60.0**k for k, n in enumerate(nums[1:], start=1))
        if len(nums) == 1:
            deg = -mag if negative else mag
        else:
            deg = (mag * 15.0 if kind == "ra" else mag) * (-1 if negative else 1)
    else:
        raise InputError(f"{where}: expected a number of degrees or a sexagesimal string, got {value!r}")
    if not math.isfinite(deg):
        raise InputError(f"{where}: angle must be finite, got {value!r}")
    if kind == "ra" and not 0.0 <= deg < 360.0:
        raise InputError(f"{where}: right ascension must be in [0, 360) degrees, got {deg}")
    if kind == "dec" and not -90.0 <= deg <= 90.0:
        raise InputError(f"{where}: declination must be in [-90, 90] degrees, got {deg}")
    return deg


def _number(table: Mapping[str, Any], key: str, where: str, lo: float, hi: float) -> float:
    if key not in table:
        raise InputError(f"{where}: missing key '{key}'")
    v = finite_number(table[key], f"{where}.{key}")
    if not lo <= v <= hi:
        raise InputError(f"{where}.{key}: {v} is outside the plausible range [{lo}, {hi}]")
    return float(v)


def _parse_stars(stars_t: list, source: str, roles: tuple[str, ...]) -> list[Star]:
    """The ``[[stars]]`` tables: ids, roles and catalogue magnitudes by band."""
    stars: list[Star] = []
    seen: set[str] = set()
    for k, st in enumerate(stars_t, start=1):
        w = f"{source}: [[stars]] #{k}"
        if not isinstance(st, dict):
            raise InputError(f"{w}: expected a table")
        sid = st.get("id")
        if not isinstance(sid, str) or not sid.strip():
            raise InputError(f"{w}: 'id' must be a non-empty string")
        why = id_problem(sid)
        if why:
            raise InputError(f"{w}: 'id' {shown(sid)} {why}")
        sid = sid.strip()
        w = f"{source}: star '{sid}'"
        if sid in seen:
            raise InputError(f"{w}: id is used twice")
        seen.add(sid)
        role = st.get("role", roles[0] if len(roles) == 1 else None)
        if role not in roles:
            raise InputError(f"{w}: role must be one of {', '.join(roles)}, got {role!r}")
        cat: dict[str, float] = {}
        cat_err: dict[str, float] = {}
        for key, val in st.items():
            if key in _STAR_KEYS:
                continue
            band, is_err = (key[:-4], True) if key.endswith("_err") else (key, False)
            if not _BAND_RE.match(band):
                raise InputError(f"{w}: unknown key '{key}' (expected a band name like V or B, or V_err)")
            val = finite_number(val, f"{w}.{key}")
            if is_err:
                if not 0 <= val < 5:
                    raise InputError(f"{w}.{key}: uncertainty must be in [0, 5) mag, got {val}")
                cat_err[band] = float(val)
            else:
                if not -30 < val < 40:
                    raise InputError(f"{w}.{key}: magnitude {val} is not plausible")
                cat[band] = float(val)
        pos = [parse_angle(st[k], kind=k, where=f"{w}.{k}") if k in st else None for k in ("ra", "dec")]
        if (pos[0] is None) != (pos[1] is None):
            raise InputError(f"{w}: give both 'ra' and 'dec', or neither")
        orphan = set(cat_err) - set(cat)
        if orphan:
            b = sorted(orphan)[0]
            raise InputError(f"{w}: '{b}_err' given without '{b}'")
        stars.append(Star(sid, role, cat, cat_err, pos[0], pos[1]))
    return stars


def parse_target(text: str, source: str = "<string>") -> Target:
    """Parse the text of a target TOML file.

    Raises
    ------
    InputError
        With a message naming ``source`` and the offending key.
    """
    doc = load_toml(text, source)
    tgt = doc.get("target")
    if not isinstance(tgt, dict):
        raise InputError(f"{source}: missing [target] table (name, ra, dec)")
    name = tgt.get("name", "")
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"{source}: [target].name must be a non-empty string")
    if not printable(name):
        raise InputError(f"{source}: [target].name {name!r} contains a control character (tab, line end, ...); use printable text")
    for key in ("ra", "dec"):
        if key not in tgt:
            raise InputError(f"{source}: [target] is missing '{key}'")
    ra = parse_angle(tgt["ra"], kind="ra", where=f"{source}: [target].ra")
    dec = parse_angle(tgt["dec"], kind="dec", where=f"{source}: [target].dec")
    for key, hi in (("ebv", 5.0), ("ebv_err", 1.0)):
        if key in tgt:
            _number(tgt, key, f"{source}: [target]", 0.0, hi)
    if "ebv_err" in tgt and "ebv" not in tgt:
        raise InputError(f"{source}: [target].ebv_err given without ebv")

    site_t = doc.get("site")
    if not isinstance(site_t, dict):
        raise InputError(f"{source}: missing [site] table (latitude, longitude, elevation)")
    w = f"{source}: [site]"
    site = Site(
        latitude_deg=_number(site_t, "latitude", w, -90, 90),
        longitude_deg=_number(site_t, "longitude", w, -180, 360),
        elevation_m=_number(site_t, "elevation", w, -500, 9000),
    )
    if site.longitude_deg > 180:
        site = Site(site.latitude_deg, site.longitude_deg - 360.0, site.elevation_m)

    stars_t = doc.get("stars")
    if not isinstance(stars_t, list) or not stars_t:
        raise InputError(f"{source}: no [[stars]] tables: list the target and at least two comparison stars")
    stars = _parse_stars(stars_t, source, ROLES)

    n_target = sum(s.role == "target" for s in stars)
    if n_target != 1:
        raise InputError(f"{source}: exactly one star must have role = \"target\", found {n_target}")
    # the target star is where [target] says, unless its own table gives a position
    stars = [dataclasses.replace(s, ra_deg=ra, dec_deg=dec) if s.role == "target" and s.ra_deg is None else s
             for s in stars]
    comps = [s for s in stars if s.role == "comparison"]
    if len(comps) < 2:
        raise InputError(f"{source}: at least two [[stars]] with role = \"comparison\" are needed, found {len(comps)}")
    if not any(s.catalog for s in comps):
        raise InputError(f"{source}: no comparison star has a catalogue magnitude (e.g. V = 12.10)")

    extra = {k: v for k, v in doc.items() if k not in _KNOWN_TABLES}
    return Target(
        name=name.strip(),
        ra_deg=ra,
        dec_deg=dec,
        site=site,
        stars=tuple(stars),
        extra=extra,
        source_text=text,
        source=source,
        ebv=float(tgt["ebv"]) if "ebv" in tgt else None,
        ebv_err=float(tgt.get("ebv_err", 0.0)),
    )


def reduction_options(target: Target) -> tuple[dict[str, int | float], tuple[str, ...]]:
    """The ``[reduction]`` table: ensemble settings given, and comparison stars excluded.

    Returns
    -------
    (settings, excluded)
        Keyword arguments for :class:`varstar.ensemble.EnsembleSettings` (only
        the keys given) and the ids of ``exclude``.

    Raises
    ------
    InputError
        Naming the file and key: an unknown setting, a value that is not a
        finite number (:func:`finite_number`), a count that is not a whole
        number, a value that is not positive or that the settings refuse, or an
        ``exclude`` entry that is not a comparison star.
    """
    import dataclasses

    from .ensemble import EnsembleSettings  # here: numpy and scipy.special

    table = target.extra.get("reduction", {})
    w = f"{target.source}: [reduction]"
    if not isinstance(table, dict):
        raise InputError(f"{w} must be a table")
    defaults = EnsembleSettings()
    known = {f.name for f in dataclasses.fields(EnsembleSettings)}
    kw: dict[str, int | float] = {}
    for key, val in table.items():
        if key == "exclude":
            continue
        if key not in known:
            raise InputError(f"{w}.{key} is not a setting (known: {', '.join(sorted(known))})")
        x = finite_number(val, f"{w}.{key}")
        if isinstance(getattr(defaults, key), int):
            if not isinstance(val, int):
                raise InputError(f"{w}.{key} must be a whole number, got {shown(val)}")
            x = int(val)
        if x <= 0:
            raise InputError(f"{w}.{key} must be positive, got {val}")
        kw[key] = x
    try:
        EnsembleSettings(**kw)
    except InputError as exc:
        raise InputError(f"{w}: {exc}") from None
    names = table.get("exclude", [])
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        raise InputError(f"{w}.exclude must be a list of star ids, e.g. [\"C4\"]")
    roles = {s.id: s.role for s in target.stars}
    for n in names:
        if roles.get(n) != "comparison":
            raise InputError(f"{w}.exclude names {shown(n)}, which is not a comparison star")
    return kw, tuple(names)


#: How a measurement table's time column may be declared (``[measurements]`` in the description,
#: or the ingest options): its format, time system and point of the exposure; defaults first.
TIME_CHOICES = {
    "time_format": ("jd", "mjd"),
    "time_system": ("utc", "hjd_utc", "bjd_tdb"),
    "time_point": ("mid", "start", "end"),
}


def time_declaration(target: Target, **given: str | None) -> dict[str, str]:
    """The declared time column: ``[measurements]`` of the description, overridden by ``given`` (not None).

    Returns ``{"time_format", "time_system", "time_point"}`` with the defaults
    (JD, UTC, mid-exposure) where nothing is declared.

    Raises
    ------
    InputError
        Naming the key (or option) and the values it takes.
    """
    table = target.extra.get("measurements", {})
    w = f"{target.source}: [measurements]"
    if not isinstance(table, dict):
        raise InputError(f"{w} must be a table")
    for key in table:
        if key not in TIME_CHOICES:
            raise InputError(f"{w}.{key} is not a key of this table (known: {', '.join(TIME_CHOICES)})")
    out = {}
    for key, choices in TIME_CHOICES.items():
        val = given.get(key)
        where = f"--{key.replace('_', '-')}"
        if val is None:
            val, where = table.get(key, choices[0]), f"{w}.{key}"
        if not isinstance(val, str) or val.lower() not in choices:
            raise InputError(f"{where}: {shown(val)} is not one of {', '.join(choices)}")
        out[key] = val.lower()
    return out


def check_tables(target: Target) -> None:
    """Check the optional tables other modules read later (``[reduction]``, ``[measurements]``, ``[ephemeris]``;
    ``[photometry]`` is checked by :func:`varstar.workflows.frames.check_photometry`, which the commands that
    store or use a description call).

    :func:`parse_target` keeps them verbatim; a file being read for a new
    archive is checked here as well, so that ``init`` refuses what ``ingest`` or
    ``timings`` would refuse later.  (``[transformation]`` is resolved when the
    archive is created: it may name another file.)
    """
    reduction_options(target)
    time_declaration(target)
    if "ephemeris" in target.extra:
        from .timings import ephemeris_from_table  # here: numpy

        table = target.extra["ephemeris"]
        if not isinstance(table, dict):
            raise InputError(f"{target.source}: [ephemeris] must be a table")
        ephemeris_from_table(table, f"{target.source}: [ephemeris]")


def read_target(path: str | Path) -> Target:
    """Read and validate a target TOML file, its optional tables included (:func:`check_tables`)."""
    p = Path(path)
    target = parse_target(read_toml_text(p), source=str(p))
    check_tables(target)
    return target


@dataclass(frozen=True)
class StandardField:
    """A field of standard stars (catalogue B and V) used to fit transformation coefficients."""

    name: str
    stars: tuple[Star, ...]
    source: str = "<string>"

    @property
    def star_ids(self) -> tuple[str, ...]:
        return tuple(s.id for s in self.stars)


def parse_standards(text: str, source: str = "<string>") -> StandardField:
    """Parse a standard-field TOML: ``[field] name`` and ``[[stars]]`` with ``id``, ``B``, ``V`` (and errors)."""
    doc = load_toml(text, source)
    field_t = doc.get("field", {})
    if not isinstance(field_t, dict):
        raise InputError(f"{source}: [field] must be a table")
    name = field_t.get("name", "standard field")
    if not isinstance(name, str) or not printable(name):
        raise InputError(f"{source}: [field].name must be printable text, got {shown(name)}")
    stars_t = doc.get("stars")
    if not isinstance(stars_t, list) or not stars_t:
        raise InputError(f"{source}: no [[stars]] tables: list the standard stars with their B and V")
    stars = _parse_stars(stars_t, source, ("standard",))
    for st in stars:
        if not {"B", "V"} <= set(st.catalog):
            raise InputError(f"{source}: star '{st.id}' needs both B and V standard magnitudes")
    return StandardField(name=name, stars=tuple(stars), source=source)


def read_standards(path: str | Path) -> StandardField:
    """Read and validate a standard-field TOML file."""
    p = Path(path)
    return parse_standards(read_toml_text(p), source=str(p))
