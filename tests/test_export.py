"""Tests of varstar.export: strict JSON, spreadsheet-safe CSV, atomic writes, safe file names.

Outside references named beside the checks: RFC 8259 (JSON has no NaN or
Infinity), the OWASP "CSV Injection" guidance (cells starting with ``=``, ``+``,
``-``, ``@``, tab or carriage return are read as formulas; prefix them with a
single quote; from memory), POSIX ``rename`` atomicity, and the Windows
reserved device names (CON, PRN, AUX, NUL, COM1-9, LPT1-9; Microsoft "Naming
Files, Paths, and Namespaces", from memory).
"""

from __future__ import annotations

import json
import os
import re
import unicodedata
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from varstar.errors import OutputError, VarstarError
from varstar.export import (
    LIGHTCURVE_COLUMNS,
    lightcurve_table,
    plain,
    safe_filename,
    safe_text_columns,
    to_json,
    write_atomic,
    write_csv,
)


def strict_loads(text: str):
    """json.loads that refuses the non-standard NaN / Infinity tokens (RFC 8259 has none)."""

    def refuse(token: str):
        raise ValueError(f"non-standard JSON constant {token}")

    return json.loads(text, parse_constant=refuse)


# --------------------------------------------------------------------------- JSON


def test_to_json_non_finite_become_null_and_numpy_types_become_python():
    obj = {
        "nan": float("nan"),
        "np_nan": np.float64("nan"),
        "inf": float("inf"),
        "minus_inf": -np.inf,
        "f32_inf": np.float32("inf"),
        "f32": np.float32(0.25),  # exactly representable: must stay 0.25
        "i64": np.int64(2**40 + 3),
        "u8": np.uint8(200),
        "b": np.bool_(True),
        "arr": np.array([1.5, np.nan, np.inf, -2.0]),
        "iarr": np.arange(3, dtype=np.int32),
        "nested": ({"x": [np.float64(1e-300), (np.nan,)]},),
        np.int64(7): "numpy key",
        "s": np.str_("C1"),
        "none": None,
    }
    text = to_json(obj)
    back = strict_loads(text)
    assert back["nan"] is None and back["np_nan"] is None
    assert back["inf"] is None and back["minus_inf"] is None and back["f32_inf"] is None
    assert back["f32"] == 0.25 and type(back["f32"]) is float
    assert back["i64"] == 2**40 + 3 and type(back["i64"]) is int
    assert back["u8"] == 200
    assert back["b"] is True
    assert back["arr"] == [1.5, None, None, -2.0]
    assert back["iarr"] == [0, 1, 2]
    assert back["nested"] == [{"x": [1e-300, [None]]}]
    assert back["7"] == "numpy key"
    assert back["s"] == "C1" and back["none"] is None
    # The plain form has only Python builtins in it.
    p = plain(obj)
    assert type(p["i64"]) is int and type(p["b"]) is bool and type(p["arr"]) is list
    assert all(type(k) is str for k in p)


def test_to_json_is_one_line_without_indent_and_keeps_unicode():
    text = to_json({"name": "Wren-Hollow 7 — Δ", "v": [1, 2]})
    assert "\n" not in text
    assert "—" in text and "Δ" in text  # ensure_ascii=False: readable text
    assert strict_loads(text) == {"name": "Wren-Hollow 7 — Δ", "v": [1, 2]}
    pretty = to_json({"a": [np.nan]}, indent=2)
    assert strict_loads(pretty) == {"a": [None]} and "\n" in pretty


def test_to_json_float_round_trip_is_exact():
    # BJD_TDB values need all their digits: JSON floats from repr() round-trip exactly.
    x = 2461303.6012345678
    assert strict_loads(to_json({"bjd": np.float64(x)}))["bjd"] == x


def test_plain_handles_zero_dimensional_arrays():
    assert strict_loads(to_json({"x": np.array(1.5), "y": np.array(np.nan)})) == {"x": 1.5, "y": None}


# --------------------------------------------------------------------------- spreadsheet-safe CSV

HOSTILE = ["=HYPERLINK(\"http://x\",\"y\")", "+1+1", "-2+3", "@SUM(A1:A2)", "\tTAB", "\rCR"]


def test_safe_text_columns_prefixes_formula_starts_and_leaves_numbers_alone():
    df = pd.DataFrame(
        {
            "star": HOSTILE + ["C1", "K1"],
            "flags": ["", "zero_point_jump", "-", "a=b", "x", "", "=1", "ok"],
            "mag": [-1.25, 12.5, -0.0, 13.0, -7.5, 2.0, 3.0, 4.0],
            "quality": np.array([0, 1, 2, 0, 4, 0, 0, 0], dtype=np.uint8),
        }
    )
    before = df.copy(deep=True)
    out = safe_text_columns(df)
    # OWASP CSV injection: every cell starting with = + - @ TAB CR gets a leading quote.
    assert out["star"].tolist() == ["'" + s for s in HOSTILE] + ["C1", "K1"]
    assert out["flags"].tolist() == ["", "zero_point_jump", "'-", "a=b", "x", "", "'=1", "ok"]
    # Numbers are untouched, including negative ones, and keep their dtype.
    assert out["mag"].dtype == np.float64 and out["mag"].tolist() == df["mag"].tolist()
    assert out["quality"].dtype == np.uint8
    # The input is not modified.
    pd.testing.assert_frame_equal(df, before)


def test_write_csv_reads_back_with_numbers_as_numbers(tmp_path):
    df = pd.DataFrame(
        {
            "star": ["=cmd|' /C calc'!A0", "-C3", "@K1", "+V1", "C2"],
            "band": ["V", "B", "V", "B", "=B"],
            "mag": [-1.2345678901, 12.3456789012, -13.5, 0.0, 14.25],
            "mag_err": [0.001, 0.0123456789, 0.5, 0.02, 0.003],
            "quality": [0, 1, 0, 2, 0],
        }
    )
    path = write_csv(df, tmp_path / "obs.csv")
    assert path == tmp_path / "obs.csv"
    text = path.read_text(encoding="utf-8")
    assert text.splitlines()[0] == "star,band,mag,mag_err,quality"  # no index column
    assert "\r\n" not in text
    back = pd.read_csv(path)
    assert back["mag"].dtype == np.float64 and back["mag_err"].dtype == np.float64
    assert back["quality"].dtype == np.int64
    # %.10g keeps ten significant digits.
    np.testing.assert_allclose(back["mag"], df["mag"], rtol=1e-9, atol=0)
    np.testing.assert_allclose(back["mag_err"], df["mag_err"], rtol=1e-9, atol=0)
    assert back["star"].tolist() == ["'=cmd|' /C calc'!A0", "'-C3", "'@K1", "'+V1", "C2"]
    assert back["band"].tolist() == ["V", "B", "V", "B", "'=B"]
    # No raw cell anywhere starts a formula (first character of every field).
    for row in text.splitlines()[1:]:
        for cell in row.split(","):
            assert not cell.lstrip('"').startswith(("=", "+", "@")), row
    assert not list(tmp_path.glob(".*.tmp"))


def _lc(n: int = 6) -> pd.DataFrame:
    rng = np.random.default_rng(3)
    bjd = 2461303.6 + np.sort(rng.uniform(0, 0.3, n))  # full float64 digits, finer than 1e-8 d
    return pd.DataFrame(
        {
            "extra": np.arange(n),  # not an export column: dropped
            "flags": ["", "zero_point_jump", "", "", "", ""][:n],
            "quality": np.array([0, 1, 0, 0, 0, 0][:n], dtype=np.uint8),
            "frame": [f"20260919-{k:03d}" for k in range(n)],
            "night": ["2026-09-19"] * n,
            "airmass": np.linspace(1.1, 1.4, n),
            "cal_err": np.full(n, 0.0071),
            "mag_err": np.full(n, 0.0053),
            "mag": 13.0 + 0.3 * np.sin(np.arange(n)),
            "transformed": np.arange(n) % 2 == 0,
            "bv": np.where(np.arange(n) % 2 == 0, 0.41, np.nan),
            "bv_err": np.where(np.arange(n) % 2 == 0, 0.008, np.nan),
            "mag_untransformed": 13.02 + 0.3 * np.sin(np.arange(n)),
            "mag_untransformed_err": np.full(n, 0.005),
            "epsilon_v": np.where(np.arange(n) % 2 == 0, 0.045, np.nan),
            "mu_bv": np.where(np.arange(n) % 2 == 0, 0.92, np.nan),
            "k2_bv": np.where(np.arange(n) % 2 == 0, 0.0, np.nan),
            "star": ["V1"] * n,
            "band": ["V", "B"] * (n // 2),
            "jd_utc": bjd - 0.0041234567,
            "hjd_utc": np.where(np.arange(n) == 2, np.nan, bjd - 0.0000812345),
            "bjd_tdb": bjd,
        }
    )


def test_lightcurve_table_keeps_bjd_to_1e8_day_through_the_csv_file(tmp_path):
    lc = _lc()
    table = lightcurve_table(lc)
    assert tuple(table.columns) == LIGHTCURVE_COLUMNS
    write_csv(table, tmp_path / "lc.csv")
    back = pd.read_csv(tmp_path / "lc.csv")
    assert tuple(back.columns) == LIGHTCURVE_COLUMNS
    for col in ("bjd_tdb", "jd_utc", "hjd_utc"):
        assert back[col].dtype == np.float64
        ok = np.isfinite(lc[col].to_numpy())
        # Written with 8 decimals: the round trip is within half a unit of 1e-8 d
        # (plus float64 resolution at 2.46e6, ~4.7e-10 d).
        err = np.abs(back[col].to_numpy()[ok] - lc[col].to_numpy()[ok])
        assert err.max() <= 0.5e-8 + 1e-9, (col, err.max())
        # An empty cell for a missing time, not 'nan'.
        assert np.array_equal(np.isfinite(back[col].to_numpy()), ok)
    line = (tmp_path / "lc.csv").read_text().splitlines()[3]  # third data row: hjd missing
    fields = line.split(",")
    assert re.fullmatch(r"\d{7}\.\d{8}", fields[0]) and fields[1] == ""
    # Numbers stay numbers and text stays text.
    np.testing.assert_allclose(back["mag"], lc["mag"], rtol=1e-9)
    assert back["quality"].tolist() == lc["quality"].tolist()
    assert back["frame"].tolist() == lc["frame"].tolist()
    assert back["flags"].fillna("").tolist() == lc["flags"].tolist()


def test_lightcurve_table_of_empty_light_curve_has_the_header_only(tmp_path):
    empty = _lc().iloc[:0]
    write_csv(lightcurve_table(empty), tmp_path / "e.csv")
    assert (tmp_path / "e.csv").read_text() == ",".join(LIGHTCURVE_COLUMNS) + "\n"


# --------------------------------------------------------------------------- atomic writes


def _listing(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


def test_write_atomic_writes_and_replaces_without_temporaries(tmp_path):
    p = tmp_path / "summary.json"
    assert write_atomic(p, b"first") == p
    assert p.read_bytes() == b"first"
    write_atomic(p, b"second, longer")
    assert p.read_bytes() == b"second, longer"
    assert _listing(tmp_path) == {"summary.json"}


def test_write_atomic_missing_folder_raises_output_error_naming_the_path(tmp_path):
    target = tmp_path / "no-such-folder" / "obs.csv"
    with pytest.raises(OutputError) as exc:
        write_atomic(target, b"x")
    assert isinstance(exc.value, VarstarError)
    assert str(target) in str(exc.value)
    assert _listing(tmp_path) == set()  # the folder was not created either


def test_write_atomic_failure_after_temporary_leaves_nothing_behind(tmp_path):
    # The destination is a directory: the temporary file is written, the rename fails.
    (tmp_path / "obs.csv").mkdir()
    with pytest.raises(OutputError, match="obs.csv"):
        write_atomic(tmp_path / "obs.csv", b"data")
    assert _listing(tmp_path) == {"obs.csv"}
    assert (tmp_path / "obs.csv").is_dir() and not any((tmp_path / "obs.csv").iterdir())


def test_write_atomic_failing_rename_keeps_the_old_file(tmp_path, monkeypatch):
    import errno

    import varstar.export as ex

    p = tmp_path / "observations.csv"
    p.write_bytes(b"old complete content")

    def no_space(src, dst):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(ex.os, "replace", no_space)
    with pytest.raises(OutputError) as exc:
        write_atomic(p, b"new content that never lands")
    assert os.strerror(errno.ENOSPC) in str(exc.value)
    assert p.read_bytes() == b"old complete content"
    assert _listing(tmp_path) == {"observations.csv"}


def test_write_csv_to_missing_folder_is_an_output_error(tmp_path):
    with pytest.raises(OutputError):
        write_csv(pd.DataFrame({"a": [1]}), tmp_path / "nope" / "a.csv")


# --------------------------------------------------------------------------- safe file names

# Windows reserved device names (Microsoft, "Naming Files, Paths, and Namespaces"; from memory).
RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(1, 10)), *(f"LPT{i}" for i in range(1, 10))}
SAFE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


def _is_safe(stem: str) -> bool:
    return bool(SAFE.fullmatch(stem)) and stem.split(".")[0].upper() not in RESERVED and len(stem) <= 255


@pytest.mark.parametrize(
    "text, expected",
    [
        ("../../etc/passwd", "etc_passwd"),
        ("a/b\\c", "a_b_c"),
        ("\x00evil", "evil"),
        ("", "target"),
        ("....", "target"),
        ("..", "target"),
        (".bashrc", "bashrc"),
        ("Wren-Hollow 7 (invented demo field)", "Wren-Hollow_7_invented_demo_field"),
        ("Ωmega Cépheï", "mega_Cephei"),  # NFKD: accents drop to ASCII letters, Greek has no ASCII form
        ("日本の星", "target"),
    ],
)
def test_safe_filename_examples(text, expected):
    out = safe_filename(text)
    assert out == expected
    assert _is_safe(out)


@pytest.mark.parametrize("name", ["CON", "con", "Nul", "PRN.txt", "aux.tar.gz", "COM1", "lpt9", "LPT9.", "COM\u00b9"])
def test_safe_filename_never_returns_a_reserved_device_name(name):
    out = safe_filename(name)
    assert _is_safe(out), out
    assert out.split(".")[0].upper() not in RESERVED


def test_safe_filename_is_usable_as_a_file_name(tmp_path):
    for text in ["../../etc/passwd", "a/b\\c", "\x00evil", "....", "x" * 500, "-rf --no-preserve-root"]:
        stem = safe_filename(text)
        p = tmp_path / f"{stem}.h5"
        p.write_bytes(b"")
        assert p.parent == tmp_path and p.exists()
    assert len(safe_filename("x" * 500)) <= 80


def test_safe_filename_default_is_used_for_nothing_left():
    assert safe_filename("///", default="archive") == "archive"
    assert safe_filename("CON", default="archive").startswith("archive_")


@settings(max_examples=400, deadline=None)
@given(st.text(max_size=120))
def test_safe_filename_property(text):
    out = safe_filename(text)
    assert SAFE.fullmatch(out), repr(out)
    assert out.split(".")[0].upper() not in RESERVED
    assert "/" not in out and "\\" not in out and not out.startswith(".")
    assert out not in (".", "..")
    # Deterministic, and idempotent: a safe stem is kept as it is.
    assert safe_filename(text) == out
    assert safe_filename(out) == out
    # Every ASCII letter or digit of the (NFKD-normalised) input survives, in order, when it fits.
    ascii_text = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode()
    kept = re.sub(r"[^A-Za-z0-9]", "", ascii_text)
    if kept and len(ascii_text) <= 78:  # longer names are cut to 80 characters
        assert kept in re.sub(r"[^A-Za-z0-9]", "", out)
