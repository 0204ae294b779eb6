"""Frames as files: header times worked by hand, settings, bad input named by file and keyword,
mixed runs, calibration masters (ccdproc), parallel workers, the CSV form.

Frames are invented (tests/photometry/photometry_frames.py, fixed seeds).
"""

from __future__ import annotations

import gzip
import hashlib
import io
import math
import shutil

import numpy as np
import pandas as pd
import pytest
from astropy.io import fits
from photometry_frames import grid_field, header_cards, render, target_for, write_fits, write_series

from varstar.errors import InputError
from varstar.photometry import (MEASURE_COLUMNS, MeasureResult, PhotometrySettings, find_frames, measure_frames,
                                measurement_csv, photometry_settings)
from varstar.photometry.calibrate import calibrate_frame
from varstar.photometry.files import check_masters
from varstar.photometry.header import FrameRefused, frame_band, mid_exposure_jd, read_frame_info

PX_TOML = "[photometry]\naperture_px = 9.0\nannulus_px = [13.0, 20.0]\n"


def meeus_jd(year: int, month: int, day: float) -> float:
    """Julian Date of a Gregorian calendar date at 0h + fraction (Meeus, Astronomical Algorithms 1998, ch. 7)."""
    if month <= 2:
        year, month = year - 1, month + 12
    a = year // 100
    b = 2 - a + a // 4
    return math.floor(365.25 * (year + 4716)) + math.floor(30.6001 * (month + 1)) + day + b - 1524.5


@pytest.fixture(scope="module")
def field():
    return grid_field()


# ----------------------------------------------------------------------------- header times


def _jd(cards: dict, settings: PhotometrySettings | None = None, exptime: float = 120.0) -> float:
    return mid_exposure_jd([fits.Header(cards)], exptime, settings or PhotometrySettings(), "f.fits")


def test_mid_exposure_from_date_obs_and_exptime_by_hand():
    # FITS standard 4.0: DATE-OBS is the start of the exposure; mid = start + EXPTIME / 2.
    # By hand: 2023-11-14 0h UTC is JD 2460262.5 (Meeus 1998, ch. 7: A = 20, B = -13,
    # floor(365.25 x 6739) = 2461419, floor(30.6001 x 12) = 367; 2461419 + 367 + 14 - 13 - 1524.5);
    # 21:30:00 + 60 s = 21:31:00 = 0.896527778 d.
    assert meeus_jd(2023, 11, 14) == 2460262.5
    expected = 2460262.5 + (21 * 3600 + 31 * 60) / 86400.0
    assert _jd({"DATE-OBS": "2023-11-14T21:30:00"}) == pytest.approx(expected, abs=1e-8)
    # the same from a date without time and TIME-OBS
    assert _jd({"DATE-OBS": "2023-11-14", "TIME-OBS": "21:30:00"}) == pytest.approx(expected, abs=1e-8)
    # fractional seconds and an explicit UTC
    assert _jd({"DATE-OBS": "2023-11-14T21:30:00.500", "TIMESYS": "UTC"}) == pytest.approx(expected + 0.5 / 86400, abs=1e-8)
    # MJD-OBS = JD - 2400000.5 (FITS standard 4.0), also the start
    mjd_start = 60262.0 + (21 * 3600 + 30 * 60) / 86400.0
    assert _jd({"MJD-OBS": mjd_start}) == pytest.approx(expected, abs=1e-8)


def test_time_point_and_mean_time_check():
    # A header whose DATE-OBS marks the middle: time_point = "mid" adds nothing.
    mid = PhotometrySettings(time_point="mid")
    assert _jd({"DATE-OBS": "2023-11-14T21:31:00"}, mid) == pytest.approx(2460262.5 + (21 * 3600 + 31 * 60) / 86400, abs=1e-8)
    # DATE-AVG (FITS standard 4.0: the mean time) agreeing with start + exposure/2 passes ...
    assert _jd({"DATE-OBS": "2023-11-14T21:30:00", "DATE-AVG": "2023-11-14T21:31:00.4"}) > 0
    # ... and one showing that DATE-OBS was the middle is refused, naming both keywords
    with pytest.raises(FrameRefused, match=r"f\.fits.*DATE-OBS.*DATE-AVG.*time_point"):
        _jd({"DATE-OBS": "2023-11-14T21:31:00", "DATE-AVG": "2023-11-14T21:31:00"})


@pytest.mark.parametrize("cards, words", [
    ({"DATE-OBS": "2023-11-14T21:30:00", "TIMESYS": "TT"}, ["f.fits", "TIMESYS", "UTC"]),
    ({"DATE-OBS": "2023-11-14T21:30:00", "TIMESYS": 3}, ["f.fits", "TIMESYS"]),
    ({"DATE-OBS": "14/11/23"}, ["f.fits", "DATE-OBS", "YYYY-MM-DD"]),
    ({"DATE-OBS": "2023-13-14T21:30:00"}, ["f.fits", "DATE-OBS", "not a valid date"]),
    ({"DATE-OBS": "2023-11-14"}, ["f.fits", "TIME-OBS", "[photometry.keywords].time_of_day"]),
    ({"DATE-OBS": "2023-11-14", "TIME-OBS": "9pm"}, ["f.fits", "TIME-OBS"]),
    ({"OBJECT": "x"}, ["f.fits", "DATE-OBS", "[photometry.keywords].time"]),
    ({"JD": 60262.9}, ["f.fits", "JD"]),
])
def test_unreadable_or_missing_time_refused_naming_file_and_keyword(cards, words):
    with pytest.raises(FrameRefused) as info:
        _jd(cards)
    for w in words:
        assert w in str(info.value)


def test_exposure_gain_read_noise_and_filter_from_the_header():
    s = PhotometrySettings(filters=(("Johnson V", "V"),), gain_e_per_adu=2.0, read_noise_e=5.0, source="t.toml")
    h = fits.Header({"DATE-OBS": "2023-11-14T21:30:00", "EXPOSURE": 30, "FILTER": "Johnson V", "AIRMASS": 1.5,
                     "BITPIX": 16, "BZERO": 32768})
    info = read_frame_info([h], s, ["B", "V"], "f.fits")
    assert (info.band, info.exptime_s, info.airmass, info.gain_e_per_adu, info.read_noise_e) == ("V", 30.0, 1.5, 2.0, 5.0)
    # unsigned 16-bit data (BZERO 32768) saturate at 65535 when nothing else is said (common practice)
    assert info.saturation_adu == 65535.0
    # without a mapping, a filter named like a catalogue band (any case) is that band
    assert frame_band([fits.Header({"FILTER": " b "})], PhotometrySettings(), ["B", "V"], "f.fits") == "B"
    with pytest.raises(FrameRefused, match=r"f\.fits: FILTER = 'Halpha' is neither in \[photometry.filters\]"):
        frame_band([fits.Header({"FILTER": "Halpha"})], PhotometrySettings(), ["B", "V"], "f.fits")
    # the header's GAIN wins over the setting; an empty keyword ignores the header
    h["GAIN"] = 1.3
    assert read_frame_info([h], s, ["V"], "f.fits").gain_e_per_adu == 1.3
    s2 = PhotometrySettings(filters=s.filters, gain_e_per_adu=2.0, read_noise_e=5.0, gain_keyword="")
    assert read_frame_info([h], s2, ["V"], "f.fits").gain_e_per_adu == 2.0


# ----------------------------------------------------------------------------- settings


def test_settings_defaults_and_keys(field, tmp_path, monkeypatch):
    assert photometry_settings(target_for(field)) == PhotometrySettings(source="field.toml")
    monkeypatch.chdir(tmp_path)
    text = """[photometry]
aperture_fwhm = 2.0
annulus_px = [15, 25]
centroid_box_px = 15
max_shift_px = 2.5
gain_e_per_adu = 1.25
read_noise_e = 0
saturation_adu = 60000
nonlinear_adu = 45000
time_point = "mid"
bias = "masters/bias.fits"
[photometry.keywords]
filter = "filt"
gain = ""
[photometry.filters]
"Johnson V" = "V"
"""
    s = photometry_settings(target_for(field, photometry=text))
    assert (s.aperture_fwhm, s.aperture_px, s.annulus_fwhm, s.annulus_px) == (2.0, None, None, (15.0, 25.0))
    assert (s.centroid_box_px, s.max_shift_px, s.gain_e_per_adu, s.read_noise_e) == (15, 2.5, 1.25, 0.0)
    assert (s.saturation_adu, s.nonlinear_adu, s.time_point) == (60000.0, 45000.0, "mid")
    assert s.filter_keyword == "FILT" and s.gain_keyword == "" and s.filters == (("Johnson V", "V"),)
    assert s.bias == tmp_path / "masters" / "bias.fits"  # relative to the current directory
    assert s.radii(4.0) == (8.0, 15.0, 25.0)


@pytest.mark.parametrize("text, words", [
    ("gain_e_per_adu = 0", ["field.toml", "[photometry].gain_e_per_adu", "positive"]),
    ("read_noise_e = -1", ["[photometry].read_noise_e"]),
    ("apperture_px = 5", ["[photometry].apperture_px", "not a key"]),
    ("aperture_px = 5\naperture_fwhm = 2", ["aperture_fwhm or aperture_px"]),
    ("annulus_px = [20, 10]", ["[photometry].annulus_px", "inner"]),
    ("annulus_fwhm = [1.0, 5.0]", ["[photometry].annulus_fwhm", "inside the aperture"]),
    ("centroid_box_px = 10", ["[photometry].centroid_box_px", "odd"]),
    ("max_shift_px = \"3\"", ["[photometry].max_shift_px"]),
    ("time_point = \"begin\"", ["[photometry].time_point"]),
    ("saturation_adu = 1000\nnonlinear_adu = 2000", ["[photometry].nonlinear_adu"]),
    ("flat = 3", ["[photometry].flat"]),
    ("[photometry.keywords]\ndate = \"X\"", ["[photometry.keywords].date"]),
    ("[photometry.keywords]\nfilter = \"\"", ["[photometry.keywords].filter"]),
    ("[photometry.filters]\n\"Johnson V\" = 5", ["[photometry.filters]", "Johnson V"]),
])
def test_bad_settings_name_the_key(field, text, words):
    body = "[photometry]\n" + text
    with pytest.raises(InputError) as info:
        photometry_settings(target_for(field, photometry=body + "\n"))
    for w in words:
        assert w in str(info.value)


# ----------------------------------------------------------------------------- finding frames


def test_find_frames_folders_and_files(tmp_path):
    for name in ("b.fits", "a.FIT", "c.fts.gz", "d.Fits.GZ", "notes.txt", ".hidden.fits"):
        (tmp_path / name).write_bytes(b"x")
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "e.fits").write_bytes(b"x")
    found = find_frames([tmp_path, tmp_path / "sub" / "e.fits", tmp_path / "b.fits"])
    assert [p.name for p in found] == ["a.FIT", "b.fits", "c.fts.gz", "d.Fits.GZ", "e.fits"]
    with pytest.raises(InputError, match="nowhere.fits: no such file or folder"):
        find_frames([tmp_path / "nowhere.fits"])
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="empty: no FITS frames in this folder"):
        find_frames([tmp_path / "empty"])


# ----------------------------------------------------------------------------- bad frames, mixed runs


BAD_FRAMES = {
    # name: (header changes, words the reason must hold)
    "nowcs.fits": ({"wcs": False}, ["WCS", "plate-solve"]),
    "baddate.fits": ({"date_obs": "14/11/2023"}, ["DATE-OBS"]),
    "notime.fits": ({"date_obs": None}, ["DATE-OBS", "MJD-OBS", "[photometry.keywords].time"]),
    "tt.fits": ({"TIMESYS": "TT"}, ["TIMESYS"]),
    "halpha.fits": ({"filt": "Halpha"}, ["FILTER", "Halpha", "[photometry.filters]"]),
    "nofilter.fits": ({"filt": None}, ["FILTER", "[photometry.keywords].filter"]),
    "noexp.fits": ({"exptime": None}, ["EXPTIME", "EXPOSURE"]),
    "gainzero.fits": ({"gain": 0.0}, ["GAIN", "positive"]),
    "nogain.fits": ({"gain": None}, ["GAIN", "[photometry].gain_e_per_adu"]),
    "norn.fits": ({"read_noise": None}, ["RDNOISE", "[photometry].read_noise_e"]),
    "other.fits": ({"CRVAL1": 100.0, "CRVAL2": -40.0}, ["none of the stars", "field.toml"]),
}


@pytest.fixture(scope="module")
def mixed_run(field, tmp_path_factory):
    folder = tmp_path_factory.mktemp("mixed")
    good = []
    for k in range(2):
        good.append(write_fits(folder / f"good{k}.fits", render(field, seed=900 + k), header_cards(field.shape)))
    bad = {}
    for name, (changes, _) in BAD_FRAMES.items():
        cards = header_cards(field.shape, **changes)
        bad[name] = write_fits(folder / name, render(field, seed=950), cards)
    ok_bytes = good[0].read_bytes()
    (folder / "corrupt.fits").write_bytes(b"this is not a FITS file " * 200)
    (folder / "truncated.fits").write_bytes(ok_bytes[: len(ok_bytes) // 2])
    with gzip.open(folder / "cut.fits.gz", "wb") as fh:
        fh.write(ok_bytes)
    data = (folder / "cut.fits.gz").read_bytes()
    (folder / "cut.fits.gz").write_bytes(data[: len(data) // 2])
    frames = find_frames([folder])
    result = measure_frames(target_for(field, photometry=PX_TOML), frames, workers=1)
    return folder, result, frames


@pytest.mark.parametrize("name", sorted(BAD_FRAMES) + ["corrupt.fits", "truncated.fits", "cut.fits.gz"])
def test_each_bad_frame_is_refused_naming_file_and_keyword(mixed_run, name):
    folder, result, _ = mixed_run
    reasons = {r["frame"]: r["reason"] for r in result.refused}
    assert name in reasons, reasons
    why = reasons[name]
    assert str(folder / name) in why  # the message names the file ...
    words = BAD_FRAMES[name][1] if name in BAD_FRAMES else ["cannot be read"]
    for w in words:  # ... and the keyword or what is wrong
        assert w in why, why


def test_mixed_run_measures_the_good_frames(mixed_run, field):
    _, result, frames = mixed_run
    assert isinstance(result, MeasureResult)
    assert result.n_frames == len(frames) == 16 and result.n_measured == 2 and len(result.refused) == 14
    tab = result.table
    assert tuple(tab.columns) == MEASURE_COLUMNS
    assert list(tab["frame"].unique()) == ["good0.fits", "good1.fits"]
    assert len(tab) == 2 * len(field.ids) and (tab["flag"] == 0).all()
    assert list(tab["star"][: len(field.ids)]) == field.ids
    d = result.to_dict()
    assert d["n_rows"] == len(tab) and "table" not in d and len(d["refused"]) == 14


def test_a_run_with_no_measurable_frame_lists_the_first_reasons(mixed_run, field):
    folder, _, _ = mixed_run
    paths = [folder / "nowcs.fits", folder / "tt.fits", folder / "corrupt.fits", folder / "other.fits"]
    with pytest.raises(InputError) as info:
        measure_frames(target_for(field, photometry=PX_TOML), paths, workers=1)
    text = str(info.value)
    assert "no frame could be measured (4 given)" in text and "nowcs.fits" in text and "TIMESYS" in text
    assert "(and 1 more)" in text


def test_star_without_position_is_an_input_error(field, tmp_path):
    path = write_fits(tmp_path / "a.fits", render(field, seed=1), header_cards(field.shape))
    with pytest.raises(InputError, match=r"field.toml: star 'C3' has no position.*add ra and dec to its \[\[stars\]\] table"):
        measure_frames(target_for(field, drop_position="C3"), [path], workers=1)


def test_gain_zero_in_settings_refused_naming_the_key(field, tmp_path):
    path = write_fits(tmp_path / "a.fits", render(field, seed=1), header_cards(field.shape, gain=None))
    with pytest.raises(InputError, match=r"field.toml: \[photometry\].gain_e_per_adu must be positive, got 0"):
        measure_frames(target_for(field, photometry="[photometry]\ngain_e_per_adu = 0\n"), [path], workers=1)


def test_two_frames_with_one_name_refused(field, tmp_path):
    (tmp_path / "n1").mkdir()
    (tmp_path / "n2").mkdir()
    a = write_fits(tmp_path / "n1" / "same.fits", render(field, seed=1), header_cards(field.shape))
    b = shutil.copy(a, tmp_path / "n2" / "same.fits")
    with pytest.raises(InputError, match="two frames are named 'same.fits'"):
        measure_frames(target_for(field), [a, b], workers=1)


def test_filter_mapping_and_gzip_frames(field, tmp_path):
    img = render(field, seed=3)
    path = write_fits(tmp_path / "m.fits", img, header_cards(field.shape, filt="Johnson V"))
    with open(path, "rb") as src, gzip.open(tmp_path / "m2.fits.gz", "wb") as dst:
        dst.write(src.read().replace(b"Johnson V", b"johnson v"))
    tgt = target_for(field, photometry=PX_TOML + "[photometry.filters]\n\"Johnson V\" = \"V\"\n")
    tab = measure_frames(tgt, [path, tmp_path / "m2.fits.gz"], workers=1).table
    assert set(tab["band"]) == {"V"}
    first, second = tab.iloc[: len(field.ids)], tab.iloc[len(field.ids):]
    np.testing.assert_array_equal(first["mag"].to_numpy(), second["mag"].to_numpy())  # same pixels, same numbers


# ----------------------------------------------------------------------------- parallel workers, CSV


def test_two_workers_give_the_same_table_as_one(field, tmp_path):
    paths = write_series(tmp_path, field, 6, seed=300)
    paths.append(write_fits(tmp_path / "zz_nowcs.fits", render(field, seed=1), header_cards(field.shape, wcs=False)))
    tgt = target_for(field)
    seen = []
    one = measure_frames(tgt, paths, workers=1)
    two = measure_frames(tgt, paths, workers=2, progress=lambda done, total: seen.append((done, total)))
    pd.testing.assert_frame_equal(one.table, two.table, check_exact=True)
    assert one.refused == two.refused and len(two.refused) == 1
    assert seen == [(k, 7) for k in range(1, 8)]
    with pytest.raises(InputError, match="workers"):
        measure_frames(tgt, paths, workers=0)


def test_measurement_csv_is_the_table(field, tmp_path):
    path = write_fits(tmp_path / "c.fits", render(field, seed=5), header_cards(field.shape, airmass=None))
    tab = measure_frames(target_for(field, photometry=PX_TOML), [path], workers=1).table
    tab.loc[0, ["mag", "mag_err"]] = np.nan  # as a flagged row may have
    tab.loc[0, ["flag", "flag_reason"]] = (1, "off_frame")
    data = measurement_csv(tab)
    text = data.decode("utf-8")
    assert "\r" not in text and text.endswith("\n")
    lines = text.split("\n")
    assert lines[0] == ",".join(MEASURE_COLUMNS)
    assert len(lines) == len(tab) + 2
    assert lines[1].split(",")[1] == f"{tab['jd'].iloc[0]:.8f}"  # times with 8 decimals
    assert lines[1].split(",")[4:6] == ["", ""] and lines[1].split(",")[7] == ""  # NaN -> empty (mag, mag_err, airmass)
    back = pd.read_csv(io.BytesIO(data), keep_default_na=True)
    for col in ("mag", "mag_err", "sky", "peak", "x", "y", "fwhm_px", "exptime"):
        np.testing.assert_array_equal(back[col].to_numpy(), tab[col].to_numpy())  # full precision round trip
    assert np.abs(back["jd"].to_numpy() - tab["jd"].to_numpy()).max() < 5e-9


# ----------------------------------------------------------------------------- calibration masters


def _sha(p):
    return hashlib.sha256(p.read_bytes()).hexdigest()


@pytest.fixture()
def masters(field, tmp_path):
    """A raw frame and its masters: raw = sky-and-stars x normalised flat + dark x t/t_dark + bias."""
    ny, nx = field.shape
    yy, xx = np.mgrid[:ny, :nx]
    bias = 300.0 + 0.05 * xx
    dark_120 = 6.0 + 0.01 * yy  # ADU in 120 s, bias-subtracted
    flat = 20000.0 * (1.0 + 0.05 * np.sin(xx / 17.0) * np.cos(yy / 23.0))
    scene = render(field, seed=17).astype(float)
    raw = scene * flat / flat.mean() + dark_120 * 60.0 / 120.0 + bias
    paths = {
        "bias": write_fits(tmp_path / "bias.fits", bias.astype(np.float32), {}),
        "dark": write_fits(tmp_path / "dark.fits", dark_120.astype(np.float32), {"EXPTIME": 120.0}),
        "flat": write_fits(tmp_path / "flat.fits", flat.astype(np.float32), {}),
        "raw": write_fits(tmp_path / "raw.fits", raw, header_cards(field.shape)),
        "scene": write_fits(tmp_path / "scene.fits", scene.astype(np.float32), header_cards(field.shape)),
    }
    return paths


def test_masters_applied_as_by_hand(field, masters, tmp_path, monkeypatch):
    # ccdproc's order, written out: (raw - bias - dark x t/t_dark) / (flat / mean(flat)).
    monkeypatch.chdir(tmp_path)
    tgt = target_for(field, photometry=PX_TOML + 'bias = "bias.fits"\ndark = "dark.fits"\nflat = "flat.fits"\n')
    s = photometry_settings(tgt)
    m = check_masters(s)
    raw = fits.getdata(masters["raw"]).astype(float)
    bias, dark, flat = (fits.getdata(masters[k]).astype(float) for k in ("bias", "dark", "flat"))
    by_hand = (raw - bias - dark * 60.0 / 120.0) / (flat / flat.mean())
    np.testing.assert_allclose(calibrate_frame(raw, 60.0, m, s, "raw.fits"), by_hand, rtol=1e-10, atol=1e-9)
    before = {k: _sha(p) for k, p in masters.items()}
    tab = measure_frames(tgt, [masters["raw"]], workers=1).table
    assert {k: _sha(p) for k, p in masters.items()} == before  # the user's files are never written
    # the calibrated raw frame measures as the scene it was made from (float32 rounding aside)
    ref = measure_frames(target_for(field, photometry=PX_TOML), [masters["scene"]], workers=1).table
    assert np.abs(tab["mag"].to_numpy() - ref["mag"].to_numpy()).max() < 0.2 * tab["mag_err"].min()
    assert (tab["flag"] == 0).all()
    assert (tab["peak"] > ref["peak"]).all()  # the peak is the raw pixel, bias included


def test_mismatched_masters_refused_naming_both_files(field, masters, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    write_fits(tmp_path / "small_flat.fits", np.ones((100, 120), np.float32), {})
    tgt = target_for(field, photometry=PX_TOML + 'bias = "bias.fits"\nflat = "small_flat.fits"\n')
    with pytest.raises(InputError) as info:
        measure_frames(tgt, [masters["raw"]], workers=1)
    text = str(info.value)
    assert "[photometry].flat" in text and "small_flat.fits" in text and "bias.fits" in text


def test_frame_of_another_size_than_the_masters_refused(field, masters, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    big = grid_field(shape=(200, 200))
    other = write_fits(tmp_path / "big.fits", render(big, seed=3), header_cards(big.shape))
    tgt = target_for(field, photometry=PX_TOML + 'bias = "bias.fits"\n')
    result = measure_frames(tgt, [masters["raw"], other], workers=1)
    assert result.n_measured == 1
    (why,) = [r["reason"] for r in result.refused]
    assert str(other) in why and "bias.fits" in why and "200 x 200" in why


def test_missing_or_unreadable_master_refused(field, masters, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(InputError, match=r"\[photometry\].dark: .*nodark.fits does not exist"):
        measure_frames(target_for(field, photometry=PX_TOML + 'dark = "nodark.fits"\n'), [masters["raw"]], workers=1)
    write_fits(tmp_path / "dark0.fits", np.ones(field.shape, np.float32), {})
    with pytest.raises(InputError, match=r"\[photometry\].dark: .*dark0.fits has no usable exposure time"):
        measure_frames(target_for(field, photometry=PX_TOML + 'dark = "dark0.fits"\n'), [masters["raw"]], workers=1)


# ----------------------------------------------------------------------------- integer, compressed frames; the reader


def test_raw_16_bit_frame_saturates_at_the_integer_limit(field, tmp_path):
    # An unsigned 16-bit raw frame (BITPIX 16, BZERO 32768) cannot hold more than 65535 ADU; with no
    # SATURATE keyword and no setting, that limit is the saturation level (common practice).
    img = render(field, seed=8, extra=[(field.x[4], field.y[4], 3e6)])
    raw = np.clip(np.round(img), 0, 65535).astype(np.uint16)
    path = tmp_path / "raw16.fits"
    hdu = fits.PrimaryHDU(raw)
    hdu.header.update(header_cards(field.shape))
    hdu.writeto(path)
    assert fits.getheader(path)["BZERO"] == 32768
    tab = measure_frames(target_for(field, photometry=PX_TOML), [path], workers=1).table
    assert tab["flag"].iloc[4] == 6 and tab["flag_reason"].iloc[4].startswith("saturated")
    assert tab["peak"].iloc[4] == 65535.0
    assert (tab["flag"].drop(index=4) == 0).all()


def test_compressed_image_in_an_extension_inherits_primary_keywords(field, tmp_path):
    # A tile-compressed image (FITS standard 4.0, section 10) in the first extension, its time and
    # filter in the primary header (the INHERIT convention): measured as the same pixels uncompressed.
    img = np.round(render(field, seed=9)).astype(np.int32)
    cards = header_cards(field.shape)
    plain = tmp_path / "plain.fits"
    write_fits(plain, img, cards)
    primary = fits.PrimaryHDU()
    for key in ("DATE-OBS", "EXPTIME", "FILTER", "GAIN", "RDNOISE"):
        primary.header[key] = cards[key]
    primary.header["INHERIT"] = True
    comp = fits.CompImageHDU(img, compression_type="RICE_1")
    for key, value in cards.items():
        if key not in primary.header:
            comp.header[key] = value
    packed = tmp_path / "packed.fits"
    fits.HDUList([primary, comp]).writeto(packed)
    tab = measure_frames(target_for(field, photometry=PX_TOML), [plain, packed], workers=1).table
    n = len(field.ids)
    np.testing.assert_array_equal(tab["mag"].to_numpy()[:n], tab["mag"].to_numpy()[n:])
    assert tab["jd"].nunique() == 1 and (tab["flag"] == 0).all()


def test_the_csv_reads_back_through_varstars_measurement_reader(field, tmp_path):
    # varstar's own reader of measurement tables (varstar.measurements.parse_measurements) as the
    # consumer: the same frames, stars, times (to the 8 decimals written), magnitudes and flags.
    from varstar.measurements import parse_measurements

    paths = write_series(tmp_path, field, 2, seed=40)
    tgt = target_for(field)
    tab = measure_frames(tgt, paths, workers=1).table
    tab.loc[3, ["mag", "mag_err"]] = np.nan
    tab.loc[3, ["flag", "flag_reason"]] = (1, "off_frame")
    back = parse_measurements(measurement_csv(tab), "m.csv", tgt.star_ids)
    assert list(back["frame"]) == list(tab["frame"]) and list(back["star"]) == list(tab["star"])
    np.testing.assert_allclose(back["jd"].to_numpy(), tab["jd"].to_numpy(), atol=5e-9, rtol=0)
    np.testing.assert_array_equal(back["mag"].to_numpy(), tab["mag"].to_numpy())
    np.testing.assert_array_equal(back["flag"].to_numpy(), tab["flag"].to_numpy())
    np.testing.assert_array_equal(back["exptime_s"].to_numpy(), tab["exptime"].to_numpy())
