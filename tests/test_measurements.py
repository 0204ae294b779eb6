"""Measurement tables: long and wide forms, column mapping, validation messages."""

from __future__ import annotations

import numpy as np
import pytest

from varstar.errors import InputError
from varstar.measurements import TIDY_COLUMNS, parse_measurements, read_measurements

IDS = ("T", "C1", "C2", "K")

LONG = b"""# a comment line
jd,band,star,mag,mag_err,exptime,flag,frame
2461000.600000,V,T,-1.234,0.005,60,0,f1
2461000.600000,V,C1,-2.000,0.004,60,0,f1
2461000.600000,V,C2,-1.500,0.004,60,0,f1

2461000.601000,B,T,-0.900,0.007,90,0,f2
2461000.601000,B,C1,-1.700,0.006,90,1,f2
"""


def parse(data: bytes, **kw):
    return parse_measurements(data, "night.csv", IDS, **kw)


def test_long_form_values_and_lines():
    t = parse(LONG)
    assert tuple(t.columns) == TIDY_COLUMNS
    assert len(t) == 5
    # Line numbers count comment and blank lines, as an editor shows them.
    assert t["line"].tolist() == [3, 4, 5, 7, 8]
    assert t["mag"].tolist() == [-1.234, -2.0, -1.5, -0.9, -1.7]
    assert t["flag"].tolist() == [0, 0, 0, 0, 1]
    assert t["exptime_s"].iloc[0] == 60.0
    assert np.isnan(t["airmass"]).all()
    assert t["frame"].tolist() == ["f1", "f1", "f1", "f2", "f2"]


def test_wide_form_equals_long_form():
    wide = b"""jd,band,exptime,frame,T,T_err,C1,C1_err,C2,C2_err
2461000.600000,V,60,f1,-1.234,0.005,-2.000,0.004,-1.500,0.004
2461000.601000,B,90,f2,-0.900,0.007,-1.700,0.006,,
"""
    w = parse(wide)
    lng = parse(LONG.replace(b",1,f2", b",0,f2"))
    key = ["frame", "star"]
    a = w.sort_values(key).reset_index(drop=True)
    b = lng.sort_values(key).reset_index(drop=True)
    for col in ("jd", "band", "star", "mag", "mag_err", "exptime_s", "frame"):
        assert a[col].tolist() == b[col].tolist(), col


def test_column_mapping():
    data = b"""JD_UTC,FILTER,ID,MAG,ERR
2461000.6,V,T,-1.2,0.01
2461000.6,V,C1,-2.0,0.01
"""
    t = parse(data, columns={"jd": "JD_UTC", "band": "FILTER", "star": "ID", "mag": "MAG", "mag_err": "ERR"})
    assert t["star"].tolist() == ["T", "C1"]
    # Without a frame column, rows sharing jd and band form one exposure.
    assert t["frame"].nunique() == 1


@pytest.mark.parametrize(
    "data, words",
    [
        (b"jd,band,star,mag\n2461000.6,V,T,1\n", ["missing column", "mag_err"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,X9,1,0.01\n", ["line 2", "unknown star id 'X9'"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,T,abc,0.01\n", ["line 2", "'mag'", "'abc'"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,T,nan,0.01\n", ["line 2", "'mag'", "not a finite number"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,T,inf,0.01\n", ["line 2", "not a finite number"]),
        (b"jd,band,star,mag,mag_err\n61000.1,V,T,1,0.01\n", ["'jd'", "modified JD"]),
        (b"jd,band,star,mag,mag_err,exptime\n2461000.6,V,T,1,0.01,-5\n", ["'exptime'", "plausible"]),
        (b"jd,band,star,mag,mag_err,exptime\n2461000.6,V,T,1,0.01,1e9\n", ["'exptime'", "plausible"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,T,1,0\n", ["'mag_err'", "positive"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,T,,0.01\n", ["'mag' is empty"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,,T,1,0.01\n", ["'band' is empty"]),
        (b"jd,band,star,mag,mag_err\n2461000.6,V,T,1,0.01\n2461000.6,V,T,1.1,0.01\n", ["line 3", "measured twice", "line 2"]),
        (b"jd,band,star,mag,mag_err,frame\n2461000.6,V,T,1,0.01,a\n2461000.7,V,C1,1,0.01,a\n", ["different 'jd'"]),
        (b"jd,band,star,mag,mag_err,colour\n2461000.6,V,T,1,0.01,red\n", ["unknown column 'colour'"]),
        (b"", ["empty table"]),
        (b"jd,band,star,mag,mag_err\n", ["no rows"]),
        (b"\xff\xfe\x00j", ["not UTF-8"]),
        (b"jd,band,T\n2461000.6,V,1\n", ["'T' has no error column"]),
        (b"jd,band,Z,Z_err\n2461000.6,V,1,0.1\n", ["column 'Z'", "neither"]),
    ],
)
def test_bad_tables_name_file_line_and_column(data, words):
    with pytest.raises(InputError) as exc:
        parse(data)
    msg = str(exc.value)
    assert msg.startswith("night.csv")
    for w in words:
        assert w in msg, (w, msg)


def test_flagged_row_may_lack_magnitude():
    data = b"jd,band,star,mag,mag_err,flag\n2461000.6,V,T,,,4\n2461000.6,V,C1,1.0,0.01,0\n"
    t = parse(data)
    assert t["flag"].tolist() == [4, 0]
    assert np.isnan(t["mag"].iloc[0])


def test_read_several_files_prefixes_frames(tmp_path):
    a = tmp_path / "a.csv"
    b = tmp_path / "b.csv"
    a.write_bytes(LONG)
    b.write_bytes(LONG)
    t = read_measurements([a, b], IDS)
    assert len(t) == 10
    assert t["frame"].nunique() == 4  # f1, f2 in each file, kept apart
    with pytest.raises(InputError, match="file not found"):
        read_measurements(tmp_path / "missing.csv", IDS)


def test_fast_and_text_paths_agree():
    # A clean long table is read with pandas' float parser; one empty optional cell
    # sends the whole table through the text path.  Both must give the same values.
    clean = b"jd,band,star,mag,mag_err,airmass\n2461000.6, V ,T, -1.2345678901,0.005 ,1.234\n2461000.6,V,C1,-2.0,0.004,1.234\n"
    holey = clean.replace(b",1.234\n2461000.6,V,C1", b",\n2461000.6,V,C1").replace(b"0.004,1.234", b"0.004,")
    a, b = parse(clean), parse(holey)
    for col in ("jd", "band", "star", "mag", "mag_err", "frame"):
        assert a[col].tolist() == b[col].tolist(), col
    assert a["mag"].iloc[0] == -1.2345678901 and a["band"].iloc[0] == "V"
    assert a["airmass"].tolist() == [1.234, 1.234] and np.isnan(b["airmass"]).all()
