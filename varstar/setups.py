"""Transformation coefficients as observers keep them: in TOML files.

Coefficients belong to an observing setup (telescope + filters + camera), not to
a target, so several targets can share them through a small *setups file*::

    [setups.garden-35cm]
    epsilon_v = -0.045
    epsilon_v_err = 0.006
    mu_bv = 1.083
    mu_bv_err = 0.010
    k2_bv = -0.03          # optional second-order extinction of b - v

A target description refers to one (``[transformation] setup = "garden-35cm"``
and ``setups = "../setups.toml"``, relative to the target file) or gives the
values directly in its ``[transformation]`` table.  Either form may set
``max_gap_minutes``: the largest time between a V and a B exposure that may be
paired for the colour.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping

from .errors import InputError
from .inputs import finite_number, load_toml, read_toml_text

if TYPE_CHECKING:  # pragma: no cover
    from .transform import Coefficients

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover
    import tomli as tomllib  # type: ignore[no-redef]

#: Default largest gap between paired V and B exposures (common practice: interleaved
#: series alternate within a few minutes; a quarter of an hour is generous).
DEFAULT_MAX_GAP_MIN = 15.0
_VALUE_KEYS = ("epsilon_v", "mu_bv", "k2_bv")
_KNOWN = {*_VALUE_KEYS, *(k + "_err" for k in _VALUE_KEYS), "max_gap_minutes", "setup", "setups"}
_SETUP_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


def _load(path: Path) -> dict[str, Any]:
    """A setups or coefficients file as a checked TOML document (:func:`varstar.inputs.load_toml`)."""
    return load_toml(read_toml_text(path), str(path))


def coefficients_from_table(table: Mapping[str, Any], where: str, *, source: str) -> tuple["Coefficients", float]:
    """Coefficients and the pairing limit (days) from a table of values."""
    from .transform import Coefficients

    unknown = sorted(set(table) - _KNOWN)
    if unknown:
        raise InputError(f"{where}: unknown key '{unknown[0]}' (known: {', '.join(sorted(_KNOWN - {'setup', 'setups'}))})")
    vals: dict[str, float] = {}
    for key in (*_VALUE_KEYS, *(k + "_err" for k in _VALUE_KEYS), "max_gap_minutes"):
        if key in table:
            vals[key] = finite_number(table[key], f"{where}.{key}")
    have = [k for k in ("epsilon_v", "mu_bv") if k in vals]
    if len(have) == 1:
        missing = ({"epsilon_v", "mu_bv"} - set(have)).pop()
        raise InputError(f"{where}: '{have[0]}' is given without '{missing}'; the V transformation needs both (its band pair B and V)")
    if not have:
        raise InputError(f"{where}: give epsilon_v and mu_bv (or setup = \"NAME\" with setups = \"FILE\")")
    for k in _VALUE_KEYS:
        if f"{k}_err" in vals and k not in vals:
            raise InputError(f"{where}: '{k}_err' given without '{k}'")
    gap_min = vals.pop("max_gap_minutes", DEFAULT_MAX_GAP_MIN)
    if not 0 < gap_min <= 240:
        raise InputError(f"{where}.max_gap_minutes: {gap_min:g} is outside (0, 240] minutes")
    try:
        coeffs = Coefficients(source=source, **vals)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
    return coeffs, gap_min / 1440.0


def read_setup(path: str | Path, name: str | None = None) -> tuple["Coefficients", float]:
    """Coefficients from a setups file (``[setups.NAME]``) or a file with a ``[transformation]`` table."""
    path = Path(path)
    doc = _load(path)
    if "setups" in doc:
        setups = doc["setups"]
        if not isinstance(setups, dict) or not setups:
            raise InputError(f"{path}: [setups] holds no setup")
        if name is None:
            if len(setups) != 1:
                raise InputError(f"{path}: holds several setups ({', '.join(setups)}); name one with --setup")
            name = next(iter(setups))
        if name not in setups or not isinstance(setups[name], dict):
            raise InputError(f"{path}: no setup '{name}' (setups: {', '.join(setups)})")
        return coefficients_from_table(setups[name], f"{path}: [setups.{name}]", source=f"{path.name}:{name}")
    if "transformation" in doc and isinstance(doc["transformation"], dict):
        if name is not None:
            raise InputError(f"{path}: has a [transformation] table, not named setups; leave out --setup")
        return resolve_transformation(doc["transformation"], path)
    raise InputError(f"{path}: neither [setups.NAME] tables nor a [transformation] table found")


def resolve_transformation(table: Mapping[str, Any], toml_path: Path) -> tuple["Coefficients", float]:
    """The ``[transformation]`` table of a target (or coefficients) file, references followed."""
    where = f"{toml_path}: [transformation]"
    if not isinstance(table, dict):
        raise InputError(f"{where} must be a table")
    if "setup" in table or "setups" in table:
        if not isinstance(table.get("setup"), str) or not isinstance(table.get("setups"), str):
            raise InputError(f"{where}: give both setup = \"NAME\" and setups = \"FILE\" (relative to {toml_path.name})")
        others = set(table) - {"setup", "setups"}
        if others:
            raise InputError(f"{where}: with setup = ..., give the values in the setups file, not here ({', '.join(sorted(others))})")
        return read_setup(toml_path.parent / table["setups"], table["setup"])
    return coefficients_from_table(table, where, source=f"{toml_path.name} [transformation]")


def _fmt(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(float(v)) if isinstance(v, float) else str(v)
    return '"' + str(v).replace("\\", "\\\\").replace('"', '\\"') + '"'


def setup_text(name: str, coeffs: "Coefficients", notes: Mapping[str, Any] | None = None) -> str:
    """The ``[setups.NAME]`` table for ``coeffs`` as TOML text."""
    if not _SETUP_NAME.match(name):
        raise InputError(f"setup name {name!r}: use letters, digits, '-', '_' or '.' (at most 64)")
    lines = [f"[setups.{name}]"]
    for k in ("epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "k2_bv", "k2_bv_err"):
        lines.append(f"{k} = {_fmt(round(float(getattr(coeffs, k)), 6))}")
    for k, v in (notes or {}).items():
        lines.append(f"# {k}: {v}")
    return "\n".join(lines) + "\n"


def save_setup(path: str | Path, name: str, coeffs: "Coefficients", notes: Mapping[str, Any] | None = None) -> Path:
    """Add or replace setup ``name`` in a setups file, keeping the other setups as written."""
    from .export import write_atomic

    path = Path(path)
    block = setup_text(name, coeffs, notes)
    if path.exists():
        text = path.read_text(encoding="utf-8")
        _load(path)  # refuse to rewrite a file that is not valid TOML
        pattern = re.compile(rf"^\[setups\.{re.escape(name)}\]\n(?:(?!\[).*\n?)*", re.M)
        text = pattern.sub(lambda _m: block, text) if pattern.search(text) else text.rstrip("\n") + "\n\n" + block
    else:
        text = "# Transformation coefficients per observing setup (varstar setups file)\n\n" + block
    tomllib.loads(text)  # what we write must read back
    return write_atomic(path, text.encode("utf-8"))
