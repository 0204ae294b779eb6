"""Tests of varstar.target: the target TOML format and its validation.

The field, its stars and the site are invented.  The reference for what a TOML
document contains is the standard library's ``tomllib`` (TOML 1.0); the
reference for sexagesimal notation is the usual definition (common practice):
hours (or degrees), minutes and seconds in base 60, 1 h of right ascension =
15 deg, and the sign belongs to the whole angle, so "-00:30:00" is -0.5 deg.
"""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from varstar.errors import InputError, VarstarError
from varstar.target import Site, Target, parse_angle, parse_target, read_target

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]

SOURCE = "field_alpha.toml"

# The README format, with an invented field.
EXAMPLE = """\
# Invented field for the tests.
[target]
name = "Field Alpha V1"
ra = "18:54:02.4"
dec = "+12:15:00"

[site]
latitude = 34.2
longitude = -106.3
elevation = 1650

[[stars]]
id = "V1"
role = "target"

[[stars]]
id = "C1"
role = "comparison"
V = 12.104
V_err = 0.012
B = 12.731
B_err = 0.020

[[stars]]
id = "C2"
role = "comparison"
V = 11.87
B = 12.35

[[stars]]
id = "C3"
role = "comparison"
V = 13.02
V_err = 0.03
R = 12.61

[[stars]]
id = "K1"
role = "check"
name = "brighter check star"
notes = "slightly red"
V = 12.50
V_err = 0.015

[transformation]
epsilon_V = -0.031
mu_BV = 1.042
fitted_on = 2025-08-30

[reduction]
clip_sigma = 4.0
min_comparisons = 2

[ephemeris]
epoch_bjd = 2460389.6123
period_d = 0.567213
harmonics = [1, 2, 3]

[anything.nested]
flag = true
"""


def parse(text: str = EXAMPLE) -> Target:
    return parse_target(text, source=SOURCE)


def edited(old: str, new: str, text: str = EXAMPLE) -> str:
    assert text.count(old) == 1, old
    return text.replace(old, new)


# ---------------------------------------------------------------- the good file


def test_example_parses():
    t = parse()
    # "18:54:02.4" = (18 + 54/60 + 2.4/3600) h x 15 deg/h = 283.51 deg (by hand).
    assert t.ra_deg == pytest.approx(283.51, abs=1e-12)
    assert t.dec_deg == pytest.approx(12.25, abs=1e-12)
    assert t.name == "Field Alpha V1"
    assert t.site == Site(34.2, -106.3, 1650.0)
    assert t.star_ids == ("V1", "C1", "C2", "C3", "K1")
    assert [s.role for s in t.stars] == ["target", "comparison", "comparison", "comparison", "check"]
    assert t.target_star.id == "V1"
    assert [s.id for s in t.stars_with_role("comparison")] == ["C1", "C2", "C3"]
    assert [s.id for s in t.stars_with_role("check")] == ["K1"]

    c1 = t.star("C1")
    assert dict(c1.catalog) == {"V": 12.104, "B": 12.731}
    assert dict(c1.catalog_err) == {"V": 0.012, "B": 0.020}
    assert dict(t.star("C2").catalog) == {"V": 11.87, "B": 12.35}
    assert dict(t.star("C2").catalog_err) == {}
    assert dict(t.star("C3").catalog) == {"V": 13.02, "R": 12.61}
    # name and notes are descriptions, not bands.
    assert dict(t.star("K1").catalog) == {"V": 12.50}
    assert dict(t.target_star.catalog) == {}
    # Bands with at least one comparison-star magnitude.
    assert t.catalog_bands() == {"V", "B", "R"}
    with pytest.raises(KeyError):
        t.star("nope")


def test_to_dict_is_plain_json():
    t = parse()
    d = t.to_dict()
    back = json.loads(json.dumps(d))
    assert back == d
    assert back["ra_deg"] == pytest.approx(283.51)
    assert back["site"] == {"latitude_deg": 34.2, "longitude_deg": -106.3, "elevation_m": 1650.0}
    assert back["stars"][1] == {"id": "C1", "role": "comparison", "catalog": {"V": 12.104, "B": 12.731},
                                "catalog_err": {"V": 0.012, "B": 0.020}}


@pytest.mark.parametrize("text, deg", [
    ("+12:15:00", 12.25),
    ("-05:30:00", -5.5),
    ("-00:30:00", -0.5),   # negative zero degrees: the sign is the whole angle's
    ("-00:00:36", -0.01),
    ("−00:30:00", -0.5),   # typographic minus sign
    ("-00 30 00", -0.5),
    ("12.25", 12.25),      # a single number is degrees
])
def test_declination_sexagesimal(text, deg):
    t = parse(edited('dec = "+12:15:00"', f'dec = "{text}"'))
    assert t.dec_deg == pytest.approx(deg, abs=1e-12)
    assert parse_angle(text, kind="dec", where="x") == pytest.approx(deg, abs=1e-12)


@pytest.mark.parametrize("value, deg", [
    ('"18:54:02.4"', 283.51),
    ('"18 54 02.4"', 283.51),
    ('"18h54m02.4s"', 283.51),
    ('"00:00:00"', 0.0),
    ("283.51", 283.51),        # a TOML number is degrees
    ("0", 0.0),
])
def test_right_ascension_forms(value, deg):
    t = parse(edited('ra = "18:54:02.4"', f"ra = {value}"))
    assert t.ra_deg == pytest.approx(deg, abs=1e-12)


def test_longitude_east_of_180_is_wrapped():
    # 253.7 deg east is the same meridian as 106.3 deg west.
    t = parse(edited("longitude = -106.3", "longitude = 253.7"))
    assert t.site.longitude_deg == pytest.approx(-106.3, abs=1e-9)


def test_unknown_tables_are_kept():
    t = parse()
    # Reference: the standard library's TOML reader on the same text.
    doc = tomllib.loads(EXAMPLE)
    assert set(t.extra) == {"transformation", "reduction", "ephemeris", "anything"}
    assert dict(t.extra) == {k: doc[k] for k in ("transformation", "reduction", "ephemeris", "anything")}
    assert t.extra["ephemeris"]["harmonics"] == [1, 2, 3]
    assert t.extra["anything"] == {"nested": {"flag": True}}
    assert t.source_text == EXAMPLE
    assert t.source == SOURCE
    # A top-level key outside any table is kept too.
    t2 = parse("format_note = \"kept\"\n" + EXAMPLE)
    assert t2.extra["format_note"] == "kept"


def test_read_target_from_file(tmp_path):
    # read_target also checks the [ephemeris] that timings will use (parse_target keeps it as it is):
    # the example's keys are not those of an ephemeris, so the file gets a valid one.
    text = edited("epoch_bjd = 2460389.6123\nperiod_d = 0.567213\nharmonics = [1, 2, 3]",
                  "epoch = 2460389.6123\nperiod = 0.567213")
    path = tmp_path / "alpha.toml"
    path.write_text(text, encoding="utf-8")
    t = read_target(path)
    assert t.source == str(path)
    assert t.source_text == text
    assert t.ra_deg == pytest.approx(283.51)
    assert "transformation" in t.extra
    # str path works the same
    assert read_target(str(path)).to_dict() == t.to_dict()


# ---------------------------------------------------------------- bad input


def _remove_star(text: str, star_id: str) -> str:
    blocks = text.split("[[stars]]")
    kept = [b for b in blocks if f'id = "{star_id}"' not in b]
    assert len(kept) == len(blocks) - 1
    return "[[stars]]".join(kept)


BAD_CASES = [
    # (case id, text, substrings that must appear in the message)
    ("missing [target]",
     EXAMPLE.replace('[target]\nname = "Field Alpha V1"\nra = "18:54:02.4"\ndec = "+12:15:00"\n', ""),
     ["[target]"]),
    ("missing ra", edited('ra = "18:54:02.4"\n', ""), ["[target]", "'ra'"]),
    ("missing dec", edited('dec = "+12:15:00"\n', ""), ["[target]", "'dec'"]),
    ("ra out of range (number)", edited('ra = "18:54:02.4"', "ra = 360.0"), ["[target].ra", "360"]),
    ("ra out of range (24h)", edited('ra = "18:54:02.4"', 'ra = "24:00:00"'), ["[target].ra"]),
    ("ra negative", edited('ra = "18:54:02.4"', 'ra = -1.5'), ["[target].ra"]),
    ("dec out of range", edited('dec = "+12:15:00"', 'dec = "-90:00:01"'), ["[target].dec"]),
    ("ra not an angle", edited('ra = "18:54:02.4"', 'ra = "18:5x:02"'), ["[target].ra", "18:5x:02"]),
    ("ra boolean", edited('ra = "18:54:02.4"', "ra = true"), ["[target].ra"]),
    ("ra nan", edited('ra = "18:54:02.4"', "ra = nan"), ["[target].ra", "nan"]),
    ("missing [site]", edited("[site]\n", "[observatory]\n"), ["[site]"]),
    ("site key missing", edited("elevation = 1650\n", ""), ["[site]", "'elevation'"]),
    ("site latitude nan", edited("latitude = 34.2", "latitude = nan"), ["[site].latitude", "nan"]),
    ("site latitude text", edited("latitude = 34.2", 'latitude = "north"'), ["[site].latitude", "north"]),
    ("site latitude out of range", edited("latitude = 34.2", "latitude = 134.2"), ["[site].latitude", "134.2"]),
    ("no target star", edited('id = "V1"\nrole = "target"', 'id = "V1"\nrole = "check"'), ["role", "target", "found 0"]),
    ("two targets", edited('id = "K1"\nrole = "check"', 'id = "K1"\nrole = "target"'), ["role", "target", "found 2"]),
    ("one comparison",
     edited('id = "C2"\nrole = "comparison"', 'id = "C2"\nrole = "check"',
            _remove_star(EXAMPLE, "C3")),
     ["comparison", "found 1"]),
    ("no [[stars]]", EXAMPLE.split("[[stars]]")[0], ["[[stars]]"]),
    ("duplicate id", edited('id = "K1"', 'id = "C1"'), ["'C1'", "id", "twice"]),
    ("duplicate id after stripping", edited('id = "K1"', 'id = " C1 "'), ["'C1'", "id"]),
    ("empty id", edited('id = "K1"', 'id = ""'), ["[[stars]] #5", "'id'"]),
    ("missing id", edited('id = "K1"\n', ""), ["[[stars]] #5", "'id'"]),
    ("bad role", edited('id = "K1"\nrole = "check"', 'id = "K1"\nrole = "comp"'), ["'K1'", "role", "'comp'"]),
    ("missing role", edited('id = "K1"\nrole = "check"\n', 'id = "K1"\n'), ["'K1'", "role"]),
    ("non-numeric magnitude", edited("V = 11.87", 'V = "11.87"'), ["'C2'", ".V", "11.87"]),
    ("boolean magnitude", edited("V = 11.87", "V = true"), ["'C2'", ".V"]),
    ("nan magnitude", edited("V = 11.87", "V = nan"), ["'C2'", ".V", "nan"]),
    ("inf magnitude", edited("V = 11.87", "V = inf"), ["'C2'", ".V", "inf"]),
    ("nan uncertainty", edited("V_err = 0.03", "V_err = nan"), ["'C3'", ".V_err", "nan"]),
    ("negative uncertainty", edited("V_err = 0.03", "V_err = -0.03"), ["'C3'", "V_err"]),
    ("implausible magnitude", edited("V = 11.87", "V = 118.7"), ["'C2'", ".V", "118.7"]),
    ("V_err without V", edited("V = 13.02\n", ""), ["'C3'", "'V_err'", "'V'"]),
    # A short word is read as a band name, so the complaint is about its value.
    ("text under a band-like key", edited("R = 12.61", 'colour = "red"'), ["'C3'", ".colour", "'red'"]),
    ("unknown star key", edited("R = 12.61", '"B-V" = 0.63'), ["'C3'", "unknown key 'B-V'"]),
    ("no comparison magnitude",
     "\n".join(line for line in EXAMPLE.splitlines()
               if not line.startswith(("V ", "B ", "R ", "V_err", "B_err"))) + "\n",
     ["comparison", "magnitude"]),
]


@pytest.mark.parametrize("text, needles", [c[1:] for c in BAD_CASES], ids=[c[0] for c in BAD_CASES])
def test_bad_input_names_file_and_key(text, needles):
    with pytest.raises(InputError) as info:
        parse(text)
    msg = str(info.value)
    assert msg.startswith(SOURCE + ":"), msg
    for needle in needles:
        assert needle in msg, (needle, msg)
    assert isinstance(info.value, VarstarError)


def test_invalid_toml_syntax_names_file_and_line(tmp_path):
    text = edited('dec = "+12:15:00"', "dec = ")
    line = text.splitlines().index("dec = ") + 1  # 1-based, as a person counts
    with pytest.raises(InputError) as info:
        parse(text)
    msg = str(info.value)
    assert msg.startswith(SOURCE + ":") and "TOML" in msg and f"line {line}" in msg, msg

    path = tmp_path / "broken.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_target(path)
    assert str(path) in str(info.value) and f"line {line}" in str(info.value)


def test_non_utf8_file(tmp_path):
    path = tmp_path / "latin1.toml"
    raw = EXAMPLE.replace("# Invented field for the tests.", "# Champ inventé").encode("latin-1")
    path.write_bytes(raw)
    bad_byte = raw.index("é".encode("latin-1"))
    with pytest.raises(InputError) as info:
        read_target(path)
    msg = str(info.value)
    assert str(path) in msg and "UTF-8" in msg and f"byte {bad_byte}" in msg, msg


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere" / "absent.toml"
    with pytest.raises(InputError) as info:
        read_target(path)
    assert str(path) in str(info.value) and "not found" in str(info.value)


def test_directory_instead_of_file(tmp_path):
    with pytest.raises(InputError) as info:
        read_target(tmp_path)
    assert str(tmp_path) in str(info.value)


@pytest.mark.parametrize("text", ["+12:75:00", "+12:15:60", "18:60:00"])
def test_sexagesimal_fields_below_sixty(text):
    kind = "ra" if text.startswith("18") else "dec"
    with pytest.raises(InputError):
        parse_angle(text, kind=kind, where=f"{SOURCE}: [target].{kind}")


# ---------------------------------------------------------------- property test


def _sexagesimal(value: float, *, sign: bool, sep: str, style: str) -> str:
    """Format a non-negative-or-signed value (hours or degrees) in base 60.

    Rounded to 1e-6 s through integers so that seconds never print as 60.
    """
    negative = value < 0 or (value == 0 and math.copysign(1.0, value) < 0)
    micro = round(abs(value) * 3600e6)
    whole, micro_s = divmod(micro, 60 * 60 * 10**6)
    minutes, rest = divmod(micro_s, 60 * 10**6)
    seconds, frac = divmod(rest, 10**6)
    sec_text = f"{seconds:02d}.{frac:06d}"
    head = ("-" if negative else "+") if sign else ""
    if style == "letters":
        a, b, c = ("h", "m", "s") if not sign else ("d", "m", "s")
        return f"{head}{whole:02d}{a}{minutes:02d}{b}{sec_text}{c}"
    return f"{head}{whole:02d}{sep}{minutes:02d}{sep}{sec_text}"


@settings(max_examples=300, deadline=None)
@given(
    deg=st.floats(min_value=0.0, max_value=360.0, exclude_max=True, allow_nan=False),
    sep=st.sampled_from([":", " "]),
    style=st.sampled_from(["separators", "letters"]),
)
@example(deg=0.0, sep=":", style="separators")
@example(deg=359.9999999, sep=":", style="separators")
def test_ra_sexagesimal_round_trip(deg, sep, style):
    text = _sexagesimal(deg / 15.0, sign=False, sep=sep, style=style)
    if text.startswith("24"):  # 359.99999999 rounds up to 24h: out of range, correctly
        with pytest.raises(InputError):
            parse_angle(text, kind="ra", where="x")
        return
    # Definition of sexagesimal hours (common practice): 1 h = 15 deg.
    assert abs(parse_angle(text, kind="ra", where="x") - deg) < 1e-6


@settings(max_examples=300, deadline=None)
@given(
    deg=st.floats(min_value=-90.0, max_value=90.0, allow_nan=False),
    sep=st.sampled_from([":", " "]),
    style=st.sampled_from(["separators", "letters"]),
)
@example(deg=-0.5, sep=":", style="separators")      # "-00:30:00"
@example(deg=-1e-5, sep=":", style="separators")     # "-00:00:00.036000"
@example(deg=-0.0, sep=":", style="separators")
@example(deg=-90.0, sep=" ", style="letters")
def test_dec_sexagesimal_round_trip(deg, sep, style):
    text = _sexagesimal(deg, sign=True, sep=sep, style=style)
    got = parse_angle(text, kind="dec", where="x")
    assert abs(got - deg) < 1e-6
    # The sign is kept even when the degrees field is zero.
    if deg < -1e-6:
        assert got < 0


@given(deg=st.floats(min_value=-90.0, max_value=90.0, allow_nan=False))
def test_numbers_are_degrees(deg):
    assert parse_angle(deg, kind="dec", where="x") == deg
