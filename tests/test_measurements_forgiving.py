"""The measurement reader's forgiving rules: column names in any case, ``;`` and tab delimiters,
rows marked bad upstream kept whatever they hold, placeholder magnitudes flagged instead of refused.

Each test builds a small table as text against the demo target (``demo_series/target.toml``,
an invented field) and would fail on the reader before these rules: there an upper-case header,
a semicolon, a ``99.999`` or a ``nan`` on a flagged row each refused the whole file.  The
placeholder values (99.999, 99.99, 99.9999, -99, -99.999) are what photometry programs commonly
write for "no measurement" (common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import varstar
from varstar.errors import InputError
from varstar.measurements import MAG_ABS_MAX, SENTINEL_FLAG, SENTINELS, parse_measurements, read_measurement_file

from helpers import DEMO, run

TARGET = varstar.read_target(DEMO / "target.toml")
IDS = list(TARGET.star_ids)
T0 = "2461295.614625"


def parse(text: str, **kw):
    return parse_measurements(text.encode("utf-8"), "night.csv", IDS, **kw)


def refusal(text: str, **kw) -> str:
    with pytest.raises(InputError) as exc:
        parse(text, **kw)
    msg = str(exc.value)
    assert msg.startswith("night.csv"), msg
    return msg


LONG = f"""jd,band,star,mag,mag_err
{T0},V,V1,-7.4732,0.00511
{T0},V,C1,-9.2605,0.00203
{T0},V,C2,-8.4858,0.00297
"""


# --------------------------------------------------------------------------- 1. column names


def test_column_names_are_matched_without_regard_to_case():
    plain = parse(LONG)
    for header in ("JD,Band,Star,Mag,Mag_Err", "JD,BAND,STAR,MAG,MAG_ERR", "Jd, band ,sTaR,mag,MAG_err"):
        t = parse(LONG.replace("jd,band,star,mag,mag_err", header))
        for col in ("jd", "band", "star", "mag", "mag_err", "frame"):
            assert t[col].tolist() == plain[col].tolist(), (header, col)


def test_optional_columns_in_another_case_and_the_wide_form():
    t = parse(f"JD,Band,Star,Mag,Mag_Err,Airmass,ExpTime,Flag,Frame\n{T0},V,V1,-7.47,0.005,1.6788,60,2,f1\n")
    assert t["airmass"].tolist() == [1.6788] and t["exptime_s"].tolist() == [60.0]
    assert t["flag"].tolist() == [2] and t["frame"].tolist() == ["f1"]
    # Wide form: the per-exposure names fold, star ids are matched exactly.
    w = parse(f"JD,BAND,V1,V1_err,C1,C1_err\n{T0},V,-7.47,0.005,-9.26,0.002\n")
    assert w["star"].tolist() == ["C1", "V1"]
    msg = refusal(f"JD,BAND,v1,v1_err\n{T0},V,-7.47,0.005\n")
    assert "'v1'" in msg and "neither" in msg


def test_two_columns_equal_but_for_case_are_refused():
    msg = refusal(LONG.replace("jd,band,star,mag,mag_err", "jd,band,star,mag,mag_err,MAG").replace("0.00511\n", "0.00511,1\n"))
    assert "line 1" in msg and "'mag'" in msg and "'MAG'" in msg


def test_a_missing_star_column_is_named_plainly():
    text = "\n".join(",".join(c for k, c in enumerate(ln.split(",")) if k != 2) for ln in LONG.splitlines()) + "\n"
    msg = refusal(text)
    assert "line 1" in msg and "missing column 'star'" in msg, msg
    assert "neither a known column" not in msg, msg


def test_a_near_spelling_of_a_missing_column_is_offered_as_a_mapping():
    msg = refusal(LONG.replace("mag_err", "Mag Err"))
    assert "missing column 'mag_err'" in msg and "'Mag Err'" in msg, msg
    assert "--column 'mag_err=Mag Err'" in msg, msg
    # ... and the mapping it names works.
    t = parse(LONG.replace("mag_err", "Mag Err"), columns={"mag_err": "Mag Err"})
    assert t["mag_err"].tolist() == parse(LONG)["mag_err"].tolist()


# --------------------------------------------------------------------------- 2. delimiters


@pytest.mark.parametrize("sep, word", [(";", "semicolons"), ("\t", "tabs")])
def test_semicolon_and_tab_delimiters_are_read_from_the_header(sep, word):
    plain = parse(LONG)
    assert plain.attrs["warnings"] == []  # a comma: nothing said
    t = parse(LONG.replace(",", sep))
    for col in ("jd", "band", "star", "mag", "mag_err", "frame"):
        assert t[col].tolist() == plain[col].tolist(), col
    assert len(t.attrs["warnings"]) == 1 and word in t.attrs["warnings"][0]
    assert t.attrs["warnings"][0].startswith("night.csv")


def test_with_another_delimiter_a_comma_is_text_and_a_short_row_is_named():
    # A frame id may hold a comma when the cells are separated by semicolons.
    t = parse(f"jd;band;star;mag;mag_err;frame\n{T0};V;V1;-7.47;0.005;a,b\n")
    assert t["frame"].tolist() == ["a,b"]
    msg = refusal(f"jd;band;star;mag;mag_err\n{T0};V;V1;-7.47;0.005\n{T0};V;C1;-9.26\n")
    assert "line 3" in msg and "separated by semicolons" in msg, msg
    msg = refusal(f"jd;band;star;mag;mag_err\n{T0};V;V1;-7,47;0.005\n")
    assert "line 2" in msg and "'mag'" in msg and "decimals with a point" in msg, msg


def test_a_tab_separated_wide_table():
    t = parse(f"jd\tband\tV1\tV1_err\tC1\tC1_err\n{T0}\tV\t-7.47\t0.005\t\t\n")
    assert t["star"].tolist() == ["V1"] and t["mag"].tolist() == [-7.47]


# --------------------------------------------------------------------------- 3. rows marked bad upstream


@pytest.mark.parametrize("mag, err", [("99.999", "9.999"), ("nan", "nan"), ("NaN", "0.01"), ("inf", "0.01"),
                                      ("-7.47", "-1"), ("75", "0.01"), ("-", "-"), ("1e999", "0.01")])
def test_a_flagged_row_is_kept_whatever_its_magnitude_holds(mag, err):
    t = parse(LONG.replace("mag_err\n", "mag_err,flag\n").replace("0.00511\n", f"0.00511,0\n")
              .replace("-9.2605,0.00203\n", f"{mag},{err},4\n").replace("0.00297\n", "0.00297,0\n"))
    assert t["flag"].tolist() == [0, 4, 0]
    row = t.iloc[1]
    assert row["star"] == "C1" and row["line"] == 3
    # Stored as given where it is a plausible number, else empty (NaN): never used either way.
    for col, text in (("mag", mag), ("mag_err", err)):
        try:
            want = float(text)
        except ValueError:
            want = math.nan
        plausible = math.isfinite(want) and (abs(want) <= MAG_ABS_MAX if col == "mag" else 0 <= want <= 5)
        assert (row[col] == want) if plausible else math.isnan(row[col]), (col, row[col])
    assert t.attrs["warnings"] == []  # the file marked it bad: nothing to say


def test_a_flagged_row_still_needs_a_valid_time_band_star_and_frame():
    base = "jd,band,star,mag,mag_err,flag,frame\n{}\n" + f"{T0},V,C1,-9.26,0.002,0,f1\n"
    for bad, words in ((f"nan,V,V1,99.999,0.01,1,f1", ["'jd'"]), (f"{T0},,V1,99.999,0.01,1,f1", ["'band'"]),
                       (f"{T0},V,X9,99.999,0.01,1,f1", ["unknown star id 'X9'"]), (f"{T0},V,V1,99.999,0.01,1,", ["'frame'"]),
                       (f"{T0},V,V1,99.999,0.01,0.5,f1", ["'flag'"])):
        msg = refusal(base.format(bad))
        assert "line 2" in msg, msg
        for w in words:
            assert w in msg, (w, msg)


def test_a_flagged_exposure_of_the_wide_form_may_hold_anything():
    t = parse(f"jd,band,flag,V1,V1_err,C1,C1_err\n{T0},V,3,nan,99.999,-9.26,0.002\n2461295.62,V,0,-7.40,0.005,-9.25,0.002\n")
    assert t["flag"].tolist() == [3, 3, 0, 0]
    v1 = t[(t["star"] == "V1") & (t["flag"] == 3)].iloc[0]
    assert math.isnan(v1["mag"]) and math.isnan(v1["mag_err"])


# --------------------------------------------------------------------------- 4. placeholders on good rows


@pytest.mark.parametrize("value", [str(v) for v in SENTINELS])
@pytest.mark.parametrize("col", ["mag", "mag_err"])
def test_a_placeholder_on_a_good_row_becomes_a_flagged_measurement(value, col):
    cells = {"mag": "-9.2605", "mag_err": "0.00203"}
    cells[col] = value
    t = parse(LONG.replace("-9.2605,0.00203", f"{cells['mag']},{cells['mag_err']}"))
    assert t["flag"].tolist() == [0, SENTINEL_FLAG, 0]
    assert SENTINEL_FLAG != 0
    assert math.isnan(t[col].iloc[1])  # the placeholder is not a magnitude: stored empty
    other = "mag_err" if col == "mag" else "mag"
    assert t[other].iloc[1] == float(cells[other])
    (w,) = t.attrs["warnings"]
    assert w.startswith("night.csv") and "line 3" in w and "placeholder" in w and f"flag {SENTINEL_FLAG}" in w, w


def test_placeholders_are_counted_across_pieces(monkeypatch):
    import varstar.measurements.stream as stream

    monkeypatch.setattr(stream, "CHUNK_BYTES", 64)  # several pieces of whole lines
    rows = [f"2461295.6{k:04d},V,{s},{'99.999' if (k, s) in ((1, 'C1'), (7, 'C2')) else '-8.1'},0.01,f{k}"
            for k in range(10) for s in ("V1", "C1", "C2")]
    t = parse("jd,band,star,mag,mag_err,frame\n" + "\n".join(rows) + "\n")
    assert int((t["flag"] == SENTINEL_FLAG).sum()) == 2
    (w,) = t.attrs["warnings"]
    assert "2 measurement(s)" in w and "line 6" in w and "line 25" in w, w  # rows 1*3+1 and 7*3+2, after the header


def test_a_nan_magnitude_on_a_good_row_is_still_refused():
    # The README: a good measurement needs a magnitude; NaN is not a placeholder anyone should rely on.
    msg = refusal(LONG.replace("-9.2605", "nan"))
    assert "line 3" in msg and "'mag'" in msg and "not a finite number" in msg
    # An implausible value that is no known placeholder is still refused, with what to do.
    msg = refusal(LONG.replace("-9.2605", "99.5"))
    assert "line 3" in msg and "plausible" in msg and "flag" in msg


def test_read_measurement_file_carries_the_warnings(tmp_path):
    p = tmp_path / "night.csv"
    p.write_text(LONG.replace("-9.2605", "-99").replace(",", ";"), encoding="utf-8")
    t, digest = read_measurement_file(p, IDS)
    assert len(digest) == 64
    assert t["flag"].tolist() == [0, SENTINEL_FLAG, 0]
    assert len(t.attrs["warnings"]) == 2 and all(w.startswith(str(p)) for w in t.attrs["warnings"])


# --------------------------------------------------------------------------- end to end


def test_ingest_stores_a_night_with_a_flagged_placeholder_and_a_placeholder_row(capsys, tmp_path):
    lines = (DEMO / "night-2026-09-11.csv").read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    assert header == ["jd", "band", "star", "mag", "mag_err", "airmass", "exptime", "flag", "frame"]
    FLAG, STAR = header.index("flag"), header.index("star")

    def change(k: int, **cells) -> None:
        parts = lines[k].split(",")
        for name, value in cells.items():
            parts[header.index(name)] = value
        lines[k] = ",".join(parts)

    c1 = [k for k in range(1, len(lines)) if lines[k].split(",")[STAR] == "C1"]
    flagged_line, sentinel_line = c1[3] + 1, c1[5] + 1  # 1-based line numbers in the file
    change(c1[3], mag="99.999", flag="8")  # marked bad upstream, with a placeholder
    change(c1[5], mag="99.999")  # a good row holding a placeholder
    lines[0] = lines[0].upper()  # and the header in capitals
    night = tmp_path / "night.csv"
    night.write_text("\n".join(lines) + "\n", encoding="utf-8")

    arch = tmp_path / "a.h5"
    rc, out, err = run(capsys, "init", arch, DEMO / "target.toml")
    assert rc == 0, err
    rc, out, err = run(capsys, "ingest", arch, night)
    assert rc == 0, err
    assert err == "", err

    a = varstar.open_archive(arch)
    raw = a.raw()
    assert len(raw) == len(lines) - 1  # every row stored
    by_line = raw.set_index("line")
    assert by_line.loc[flagged_line, "flag"] == 8 and math.isnan(by_line.loc[flagged_line, "mag"])
    assert by_line.loc[sentinel_line, "flag"] == SENTINEL_FLAG and math.isnan(by_line.loc[sentinel_line, "mag"])
    given = {k + 1: int(lines[k].split(",")[FLAG]) for k in range(1, len(lines))}  # the file's own flags
    others = raw[~raw["line"].isin([flagged_line, sentinel_line])]
    assert [int(f) for f in others["flag"]] == [given[int(k)] for k in others["line"]]
    (label,) = a.nights()["night"].tolist()
    warnings = a.night_report(label)["warnings"]
    said = [w for w in warnings if "placeholder" in w]
    assert len(said) == 1 and f"line {sentinel_line}" in said[0] and f"line {flagged_line}" not in said[0], warnings
    assert str(night) in said[0]
    assert "placeholder" in out  # the user sees the reason


def test_the_warnings_of_each_file_reach_the_report_when_several_files_are_ingested(tmp_path):
    # One night in two files (its B and its V exposures), a placeholder in the second one only.
    lines = (DEMO / "night-2026-09-11.csv").read_text(encoding="utf-8").splitlines()
    band = lines[0].split(",").index("band")
    mag = lines[0].split(",").index("mag")
    parts = {b: [lines[0]] + [ln for ln in lines[1:] if ln.split(",")[band] == b] for b in ("B", "V")}
    row = parts["V"][4].split(",")
    row[mag] = "-99"
    parts["V"][4] = ",".join(row)
    files = []
    for b, rows in parts.items():
        files.append(tmp_path / f"night-{b}.csv")
        files[-1].write_text("\n".join(rows) + "\n", encoding="utf-8")
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, varstar.read_target(DEMO / "target.toml"))
    res = varstar.ingest(arch, files)
    (rep,) = res.nights
    said = [w for w in rep["warnings"] if "placeholder" in w]
    assert len(said) == 1 and "night-V.csv" in said[0], rep["warnings"]


def test_diagnostic_columns_of_measured_frames_are_read_past():
    # What 'varstar measure' writes beside each measurement (why it is flagged, FWHM, sky, peak, position)
    # does not change what is read; an unknown column is still refused, and in any case the names fold.
    plain = f"jd,band,star,mag,mag_err,flag\n{T0},V,V1,-7.1,0.01,0\n{T0},V,C1,-9.2,0.01,0\n{T0},V,C2,-8.0,0.01,2\n"
    rich = ("jd,band,star,mag,mag_err,flag,flag_reason,FWHM_px,sky,peak,x,y\n"
            f"{T0},V,V1,-7.1,0.01,0,,3.1,120.5,5000,10.5,20.25\n"
            f"{T0},V,C1,-9.2,0.01,0,,3.1,121.0,9000,40.0,60.0\n"
            f"{T0},V,C2,-8.0,0.01,2,\"saturated: peak 65535 ADU\",3.1,119.0,65535,80.0,10.0\n")
    assert parse(rich).equals(parse(plain))
    with pytest.raises(InputError, match="unknown column 'seeing'.*read past: flag_reason"):
        parse(plain.replace("flag\n", "flag,seeing\n", 1).replace(",0\n", ",0,1\n").replace(",2\n", ",2,1\n"))
