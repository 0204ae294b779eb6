"""Target description: a TOML file -> :class:`Target`.

The format is varstar's own (documented in the README):

``[target]`` name, ra, dec; ``[site]`` latitude, longitude, elevation;
``[[stars]]`` one table per star with ``id``, ``role`` (target | comparison |
check) and catalogue standard magnitudes by band (``V = 12.1``, ``V_err = 0.01``).
Tables this version does not know (``[transformation]``, ``[ephemeris]``, ...)
are kept verbatim in :attr:`Target.extra` and in the original text.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO, Mapping

from .errors import InputError

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]

ROLES = ("target", "comparison", "check")
_KNOWN_TABLES = ("target", "site", "stars")
_STAR_KEYS = ("id", "role", "name", "notes")
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
                {"id": s.id, "role": s.role, "catalog": dict(s.catalog), "catalog_err": dict(s.catalog_err)}
                for s in self.stars
            ],
        }


#: Deepest nesting a varstar TOML file may have.  A target needs 3 levels (``[[stars]]`` -> one
#: star's table -> a value; ``[reduction] exclude = [...]``), a setups file 2 (``[setups.NAME]``);
#: 16 leaves room for tables of one's own while a value nested hundreds deep (which
#: recursive readers cannot follow) is refused with a message (our choice).
MAX_TOML_DEPTH = 16

#: Characters no id or name may contain: the Unicode general categories Cc (control
#: characters: NUL, tab, line ends, DEL, the C1 set), Zl and Zp (the line and paragraph
#: separators, which split a line in editors and terminals).  Cc is exactly U+0000-U+001F
#: and U+007F-U+009F, Zl is U+2028 and Zp U+2029 (Unicode Standard, section 4.5 "General
#: Category", from memory; ``tests/test_input_adversarial.py`` checks the pattern against
#: Python's :mod:`unicodedata`).  Which categories to refuse is our choice.  The one rule
#: for every id (star, band, frame) and for the target's name.
_NOT_IN_TEXT = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def _finite(v: Any) -> bool:
    """True for a TOML number (not a boolean) that is a finite float.

    TOML integers may be larger than any float; ``math.isfinite`` would raise
    OverflowError on them.
    """
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    try:
        return math.isfinite(float(v))
    except OverflowError:
        return False


def _shown(v: Any) -> str:
    """A value for a message: short, and an integer too large for a float by its length."""
    if isinstance(v, int) and not isinstance(v, bool) and not _finite(v):
        try:
            digits = f"{len(str(abs(v)))} digits"
        except ValueError:  # beyond Python's limit for turning integers into text
            digits = "thousands of digits"
        return f"an integer of {digits} (too large for a number)"
    text = repr(v)
    return text if len(text) <= 60 else text[:57] + "..."


def finite_number(value: Any, where: str) -> float:
    """The one check of every numeric value of a TOML file (target, setups, coefficients).

    Parameters
    ----------
    value
        The value as :mod:`tomllib` returned it.
    where
        The file and key, e.g. ``"t.toml: [site].latitude"``; the message starts with it.

    Returns
    -------
    float
        The value as a finite float.

    Raises
    ------
    InputError
        For a boolean, text, array or table, NaN or infinity, and an integer too
        large for a float (TOML integers have no size limit; ``float()`` and
        ``math.isfinite`` raise OverflowError on them).
    """
    if not _finite(value):
        raise InputError(f"{where}: expected a finite number, got {_shown(value)}")
    return float(value)


def _printable(text: str) -> bool:
    """No control character, line or paragraph separator (see :data:`_NOT_IN_TEXT`)."""
    return _NOT_IN_TEXT.search(text) is None


def id_problem(text: str) -> str | None:
    """Why ``text`` cannot be an id, or None: the one rule for star, band and frame ids.

    An id is text that is not empty after removing surrounding blanks and holds
    no control character (tab, line end, NUL, ...) and no line or paragraph
    separator: such a character cannot be stored in the archive (NUL) or would
    split or hide part of a message, a table row or a file name.
    """
    if not text.strip():
        return "is empty"
    bad = _NOT_IN_TEXT.search(text)
    if bad:
        return f"contains U+{ord(bad.group()):04X}, a control character or line separator; use printable text"
    return None


def _step(label: str, key: str | int, value: Any, top: bool) -> str:
    """The label of ``value``, found under ``key`` of the container labelled ``label``.

    Key paths read like the file: ``[transformation].epsilon_v``, ``[setups.garden].mu_bv``,
    ``[stars] #2 (id 'C1').V``.
    """
    if isinstance(key, int):
        ident = value.get("id") if isinstance(value, dict) else None
        return f"{label} #{key + 1}" + (f" (id {_shown(ident)})" if isinstance(ident, str) else "")
    if top:
        return f"[{key}]"
    if isinstance(value, dict) and label.startswith("[") and label.endswith("]"):
        return f"{label[:-1]}.{key}]"  # a table inside a table: [setups.garden]
    return f"{label}.{key}"


def _label_of(link: tuple | None) -> str:
    """The key path of a value from its chain of ``(parent link, key, value)`` (built only for a message)."""
    steps = []
    while link is not None:
        link, key, value = link
        steps.append((key, value))
    label = ""
    for depth, (key, value) in enumerate(reversed(steps)):
        label = _step(label, key, value, depth == 0)
    return label or "the top level"


def check_toml_document(doc: Mapping[str, Any], source: str) -> None:
    """Refuse what no varstar TOML file holds, anywhere in it: deep nesting, unrepresentable numbers.

    Walks the document without recursion, looking once at every value.  Every
    table and array deeper than :data:`MAX_TOML_DEPTH` and every integer a
    float cannot hold is refused, naming the key, so that no later reader (of
    ``[ephemeris]``, ``[reduction]`` or tables of one's own) meets them.  NaN
    and infinity are left to the checks of the keys that use the values
    (:func:`finite_number`).
    """
    stack: list[tuple[Any, tuple | None, int]] = [(doc, None, 0)]
    while stack:
        node, link, depth = stack.pop()
        for key, value in (node.items() if isinstance(node, dict) else enumerate(node)):
            kind = type(value)
            if kind is dict or kind is list:
                if depth + 1 > MAX_TOML_DEPTH:
                    raise InputError(
                        f"{source}: {_label_of((link, key, value))}: tables or arrays nested more than "
                        f"{MAX_TOML_DEPTH} levels deep; a varstar file needs at most 3 levels"
                    )
                stack.append((value, (link, key, value), depth + 1))
            elif kind is int and value.bit_length() > 1023 and not _finite(value):  # below 2**1023 a float holds it
                raise InputError(f"{source}: {_label_of((link, key, value))}: expected a finite number, got {_shown(value)}")


def load_toml(text: str, source: str) -> dict[str, Any]:
    """Parse TOML text into a document, every failure as an :class:`InputError` naming ``source``.

    Used for every TOML file varstar reads (target, standard field, setups,
    coefficients), followed by :func:`check_toml_document`.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{source}: not valid TOML: {exc}") from None
    except ValueError:  # Python refuses integers of over 4300 digits (its documentation: "Integer string
        # conversion length limitation"; sys.int_info.default_max_str_digits)
        raise InputError(f"{source}: a number has thousands of digits (too large for any value here)") from None
    except RecursionError:  # tomllib reads nested arrays and inline tables recursively
        raise InputError(
            f"{source}: arrays or inline tables nested too deeply to read (hundreds of levels); "
            f"a varstar file needs at most 3 levels"
        ) from None
    check_toml_document(doc, source)
    return doc


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
            raise InputError(f"{w}: 'id' {_shown(sid)} {why}")
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
        orphan = set(cat_err) - set(cat)
        if orphan:
            b = sorted(orphan)[0]
            raise InputError(f"{w}: '{b}_err' given without '{b}'")
        stars.append(Star(sid, role, cat, cat_err))
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
    if not _printable(name):
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


#: Largest TOML file read: a target of 70,000 stars is about 3 MB, so this leaves
#: room while a device or a wrong file cannot fill the memory (our choice).
MAX_TOML_BYTES = 64 * 2**20


def open_input(path: Path, what: str) -> BinaryIO:
    """Open an input file for reading in binary, every usual OS failure as one :class:`InputError`.

    ``what`` names what the file should be, for the message about a directory
    (``"a TOML file"``, ``"a measurement table"``).
    """
    try:
        return open(path, "rb")
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not {what}") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from None
    except ValueError:  # a NUL in a file name (e.g. given inside a TOML file: setups = "...")
        raise InputError(f"{str(path)!r}: not a usable file name (it contains a NUL character)") from None


def read_toml_text(p: Path) -> str:
    """The text of a TOML file (target, standard field, setups), every failure as an :class:`InputError`.

    At most :data:`MAX_TOML_BYTES` are read, so that a wrong path (a device, a
    huge file) costs little.
    """
    with open_input(p, "a TOML file") as fh:
        try:
            raw = fh.read(MAX_TOML_BYTES + 1)
        except OSError as exc:
            raise InputError(f"{p}: cannot read: {exc.strerror}") from None
    if len(raw) > MAX_TOML_BYTES:
        raise InputError(f"{p}: larger than {MAX_TOML_BYTES // 2**20} MiB; not a varstar TOML file")
    try:
        return raw.decode("utf-8-sig")  # a byte-order mark, as some editors write, is not part of the text
    except UnicodeDecodeError as exc:
        raise InputError(f"{p}: not UTF-8 text (byte {exc.start})") from None


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
                raise InputError(f"{w}.{key} must be a whole number, got {_shown(val)}")
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
            raise InputError(f"{w}.exclude names {_shown(n)}, which is not a comparison star")
    return kw, tuple(names)


def check_tables(target: Target) -> None:
    """Check the optional tables other modules read later (``[reduction]``, ``[ephemeris]``).

    :func:`parse_target` keeps them verbatim; a file being read for a new
    archive is checked here as well, so that ``init`` refuses what ``ingest`` or
    ``timings`` would refuse later.  (``[transformation]`` is resolved when the
    archive is created: it may name another file.)
    """
    reduction_options(target)
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
    if not isinstance(name, str) or not _printable(name):
        raise InputError(f"{source}: [field].name must be printable text, got {_shown(name)}")
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
