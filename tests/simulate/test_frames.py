"""Tests of varstar.simulate.frames: synthetic FITS frames of the invented demo field.

Outside references: astropy (``astropy.wcs`` for the celestial WCS, ``astropy.time``
for the times, ``astropy.coordinates`` for separations), the shipped demo files
(``demo_series/``: the exposures' times, airmass and truth the frames must share),
Moffat (1969) for the star images, photon statistics (Poisson counts plus
Gaussian read noise) judged by pull distributions, and the FITS standard
(Pence et al. 2010) for the keywords.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from varstar.errors import InputError, OutputError
from varstar.simulate import demo_scenario, simulate
from varstar.simulate.frames import (
    FILTER_NAMES,
    MIN_SEPARATION_ARCSEC,
    MOFFAT_BETA,
    frame_star_positions,
    frame_target_toml,
    moffat_alpha,
    moffat_stamps,
    tan_deproject,
    tan_project,
    write_frames,
)
from varstar.target import parse_target

from helpers import DEMO as DEMO_DIR

NIGHT = "2026-09-11"


@pytest.fixture(scope="module")
def scenario():
    return demo_scenario()


@pytest.fixture(scope="module")
def series(scenario):
    return simulate(scenario)


@pytest.fixture(scope="module")
def frameset(series, tmp_path_factory):
    """The default set: 40 frames of 512 x 512 of the demo's first night."""
    return write_frames(tmp_path_factory.mktemp("frames") / "set", series=series)


@pytest.fixture(scope="module")
def frames(frameset):
    """(header, data) of every frame, read by astropy."""
    from astropy.io import fits

    out = []
    for p in frameset.paths:
        with fits.open(p) as hdul:
            out.append((hdul[0].header.copy(), np.array(hdul[0].data)))
    return out


@pytest.fixture(scope="module")
def shipped_night():
    return pd.read_csv(DEMO_DIR / f"night-{NIGHT}.csv")


def _wcs(header):
    import warnings

    from astropy.wcs import WCS

    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a header astropy has to repair is a fault of ours
        return WCS(header)


# --------------------------------------------------------------------------- geometry


def test_tan_projection_round_trip_and_astropy():
    # astropy.wcs as reference: a TAN WCS with unit CD (degrees) maps (ra, dec) to (xi, eta).
    from astropy.wcs import WCS

    ra0, dec0 = 341.7625, 18.6083
    rng = np.random.default_rng(3)
    ra = ra0 + rng.uniform(-0.3, 0.3, 50)
    dec = dec0 + rng.uniform(-0.3, 0.3, 50)
    xi, eta = tan_project(ra, dec, ra0, dec0)
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---TAN", "DEC--TAN"]
    w.wcs.crval = [ra0, dec0]
    w.wcs.crpix = [1.0, 1.0]  # FITS pixel 1 = 0-based pixel 0
    w.wcs.cd = np.eye(2)
    px, py = w.all_world2pix(ra, dec, 0)
    np.testing.assert_allclose(xi, px, atol=1e-12)
    np.testing.assert_allclose(eta, py, atol=1e-12)
    ra2, dec2 = tan_deproject(xi, eta, ra0, dec0)
    np.testing.assert_allclose(ra2, ra, atol=1e-11)
    np.testing.assert_allclose(dec2, dec, atol=1e-11)


def test_wcs_puts_stars_at_injected_positions(frameset, frames, scenario):
    # astropy.wcs as reference: each header's WCS maps each star's RA/Dec to its injected pixel.
    from astropy.wcs.utils import proj_plane_pixel_scales

    truth = frameset.truth
    size = frames[0][1].shape[0]
    for path, (header, _) in zip(frameset.paths, frames):
        w = _wcs(header)
        t = truth[truth["file"] == path.name]
        x, y = w.all_world2pix(t["ra_deg"].to_numpy(), t["dec_deg"].to_numpy(), 0)
        np.testing.assert_allclose(x, t["x_px"].to_numpy(), atol=1e-6)
        np.testing.assert_allclose(y, t["y_px"].to_numpy(), atol=1e-6)
        assert (x > 20).all() and (x < size - 21).all() and (y > 20).all() and (y < size - 21).all()
        # plate scale = the scenario's camera, 1.1"/px; the rotation is small (astropy's pixel scales)
        np.testing.assert_allclose(proj_plane_pixel_scales(w) * 3600.0, scenario.telescope.pixel_scale_arcsec, rtol=1e-9)
        rot = math.degrees(math.atan2(-header["CD2_1"], header["CD2_2"]))
        assert 0.1 < abs(rot) < 5.0
        # the pointing is near the field centre (astropy's separation)
        from astropy.coordinates import SkyCoord

        sep = SkyCoord(header["CRVAL1"], header["CRVAL2"], unit="deg").separation(
            SkyCoord(scenario.ra_deg, scenario.dec_deg, unit="deg")).arcsec
        assert sep < 15.0
    # the pointing moves a little from frame to frame, so the stars do too
    v1 = truth[truth["star"] == "V1"]
    assert 0.2 < v1["x_px"].std() < 10.0


def test_star_images_centred_at_injected_positions(frameset, frames):
    # The first moment of a symmetric image is its centre (common practice): the drawn
    # stars sit where the truth (and so the WCS) says, 0-based pixel convention included.
    truth = frameset.truth
    offsets = []
    for path, (header, data) in zip(frameset.paths, frames):
        t = truth[(truth["file"] == path.name) & truth["star"].isin(["V1", "C2", "C3"]) & ~truth["saturated"]]
        for _, r in t.iterrows():
            ix, iy = int(round(r["x_px"])), int(round(r["y_px"]))
            box = data[iy - 10:iy + 11, ix - 10:ix + 11].astype(float) * header["GAIN"] - r["background_e_px"]
            g = np.arange(-10, 11, dtype=float)
            s = box.sum()
            offsets.append(((box.sum(axis=0) * (ix + g)).sum() / s - r["x_px"],
                            (box.sum(axis=1) * (iy + g)).sum() / s - r["y_px"]))
    off = np.array(offsets)
    assert len(off) > 60
    assert np.abs(off).max() < 0.15
    assert np.abs(off.mean(axis=0)).max() < 0.02


# --------------------------------------------------------------------------- photometry of the frames


def test_box_flux_equals_injected_flux(frameset, frames):
    # Photon statistics: counts are Poisson (variance = expected electrons) plus Gaussian read
    # noise, so (box sum - sky - flux) / sqrt(flux + n (sky + RN^2)) is a unit normal; judged by
    # the pulls of every unsaturated star in every frame.
    truth = frameset.truth
    half = 25
    n_pix = (2 * half + 1) ** 2
    pulls = []
    for path, (header, data) in zip(frameset.paths, frames):
        gain, rn = header["GAIN"], header["RDNOISE"]
        for _, r in truth[(truth["file"] == path.name) & ~truth["saturated"]].iterrows():
            ix, iy = int(round(r["x_px"])), int(round(r["y_px"]))
            box_e = data[iy - half:iy + half + 1, ix - half:ix + half + 1].astype(float).sum() * gain
            signal = box_e - n_pix * r["background_e_px"]
            sigma = math.sqrt(r["flux_e"] + n_pix * (r["background_e_px"] + rn**2))
            pulls.append((signal - r["flux_e"]) / sigma)
            assert r["flux_adu"] == pytest.approx(r["flux_e"] / gain, rel=1e-12)
    pulls = np.array(pulls)
    assert pulls.size > 300
    assert abs(pulls.mean()) < 0.25
    assert 0.85 < pulls.std() < 1.15
    assert np.abs(pulls).max() < 5.0


def test_moffat_stamps_follow_moffat_1969():
    # Moffat (1969): I(r) = F (beta - 1) / (pi alpha^2) (1 + r^2 / alpha^2)^(-beta) (unit integral),
    # whose FWHM is 2 alpha sqrt(2^(1/beta) - 1); each pixel holds the integral over its area
    # (scipy's adaptive quadrature as the reference integrator).
    from scipy.integrate import dblquad

    fwhm = 3.0
    alpha = moffat_alpha(fwhm)
    assert 2 * alpha * math.sqrt(2 ** (1 / MOFFAT_BETA) - 1) == pytest.approx(fwhm, rel=1e-14)
    st, c0, r0 = moffat_stamps(np.array([30.0, 40.3]), np.array([30.0, 41.7]), fwhm, half=30, oversample=8)
    np.testing.assert_allclose(st.sum(axis=(1, 2)), 1.0, rtol=1e-12)
    assert (c0[0], r0[0]) == (0, 0)

    def moffat(y, x, x0, y0):
        return (MOFFAT_BETA - 1) / (math.pi * alpha**2) * (1 + ((x - x0) ** 2 + (y - y0) ** 2) / alpha**2) ** -MOFFAT_BETA

    for k, (x0, y0) in enumerate([(30.0, 30.0), (40.3, 41.7)]):
        for col, row in [(30, 30), (31, 30), (33, 32), (36, 30), (45, 38), (24, 50)]:
            ref, _ = dblquad(moffat, col - 0.5, col + 0.5, row - 0.5, row + 0.5, args=(x0, y0), epsabs=1e-13)
            assert st[k][row - r0[k], col - c0[k]] == pytest.approx(ref, rel=2e-3, abs=1e-9)
    # half maximum at r = FWHM / 2 along a row (fine sampling, interpolated)
    fine, _, _ = moffat_stamps(np.array([0.0]), np.array([0.0]), 30.0, half=60, oversample=2)
    row = fine[0, 60, 60:]
    r_half = np.interp(0.5, row[::-1] / row[0], np.arange(row.size)[::-1])
    assert 2 * r_half == pytest.approx(30.0, rel=0.01)
    # the second stamp is centred on its star (first moment, common practice)
    gx = c0[1] + np.arange(61)
    gy = r0[1] + np.arange(61)
    assert (st[1].sum(axis=0) * gx).sum() == pytest.approx(40.3, abs=1e-3)
    assert (st[1].sum(axis=1) * gy).sum() == pytest.approx(41.7, abs=1e-3)


def test_seeing_varies_and_matches_the_scenario(frameset, series):
    # The FWHM of each frame is the simulator's seeing of that exposure (shipped truth's model).
    t = frameset.truth.drop_duplicates("frame")
    fwhm = t["fwhm_arcsec"].to_numpy()
    assert 0.02 < fwhm.std() / fwhm.mean() < 0.3
    ref = series.truth.drop_duplicates("frame").set_index("frame").loc[t["frame"], "fwhm_arcsec"].to_numpy()
    np.testing.assert_allclose(fwhm, ref, rtol=1e-12)
    np.testing.assert_allclose(t["fwhm_px"], fwhm / 1.1, rtol=1e-12)


# --------------------------------------------------------------------------- times and headers


def test_frame_times_match_the_scenario(frameset, frames, shipped_night, scenario):
    # astropy.time as reference; the shipped demo table of the night holds each exposure's
    # mid-exposure JD(UTC), exposure time and airmass.
    import astropy.units as u
    from astropy.time import Time

    ref = shipped_night.drop_duplicates("frame").set_index("frame")
    ids = [h["FRAMEID"] for h, _ in frames]
    assert ids == list(ref.index[:40])  # the night's first 40 exposures, in order
    bands = ref.loc[ids, "band"].tolist()
    assert bands == ["V", "B"] * 20  # interleaved as the observer took them
    start = Time([h["DATE-OBS"] for h, _ in frames], format="isot", scale="utc")
    exptime = np.array([h["EXPTIME"] for h, _ in frames])
    mid = start + exptime / 2.0 * u.s
    dt = (mid - Time(ref.loc[ids, "jd"].to_numpy(), format="jd", scale="utc")).sec
    assert np.abs(dt).max() < 1e-3
    np.testing.assert_array_equal(exptime, ref.loc[ids, "exptime"].to_numpy())
    np.testing.assert_array_equal(exptime, [scenario.band(b).exptime_s for b in bands])
    np.testing.assert_array_equal([h["AIRMASS"] for h, _ in frames], ref.loc[ids, "airmass"].to_numpy())
    # MJD-OBS agrees with DATE-OBS (FITS WCS Paper III: both the start of the exposure)
    np.testing.assert_allclose([h["MJD-OBS"] for h, _ in frames], start.mjd, atol=1e-9)
    # the truth's mid-exposure JD is the table's
    t = frameset.truth.drop_duplicates("frame")
    np.testing.assert_allclose(t["jd_utc"], ref.loc[ids, "jd"].to_numpy(), atol=5e-7)


def test_headers_carry_the_keywords(frameset, frames, scenario):
    # FITS standard (Pence et al. 2010) types; the keyword set is the brief's.
    tel = scenario.telescope
    for path, (h, data) in zip(frameset.paths, frames):
        assert h["BITPIX"] == -32 and data.dtype == np.dtype(">f4") and data.shape == (512, 512)
        for key in ("DATE-OBS", "TIMESYS", "EXPTIME", "FILTER", "GAIN", "RDNOISE", "SATURATE", "AIRMASS",
                    "CTYPE1", "CTYPE2", "CRVAL1", "CRVAL2", "CRPIX1", "CRPIX2", "CD1_1", "CD2_2", "FRAMEID"):
            assert key in h, key
        assert h["TIMESYS"] == "UTC"
        assert h["CTYPE1"] == "RA---TAN" and h["CTYPE2"] == "DEC--TAN" and h["RADESYS"] == "ICRS"
        assert h["GAIN"] == tel.gain_e_per_adu and h["RDNOISE"] == tel.read_noise_e
        assert h["SATURATE"] == frameset.saturate_adu
        band = path.stem.rsplit("-", 1)[1]
        assert h["FILTER"] == FILTER_NAMES[band]
        assert 1.0 <= h["AIRMASS"] < 3.0 and h["EXPTIME"] > 0
    assert {h["FILTER"] for h, _ in frames} == {"V", "Johnson B"}


def test_truth_is_the_demo_truth(frameset, shipped_night):
    # The shipped truth.csv and measurement table as references: the frames carry the same
    # true magnitudes, and the tables' measured instrumental magnitudes scatter about the
    # frames' injected fluxes by their errors.
    shipped = pd.read_csv(DEMO_DIR / "truth.csv", dtype={"jd": float})
    t = frameset.truth
    m = t.merge(shipped, left_on=["jd_utc", "star", "band"], right_on=["jd", "star", "band"], how="left",
                validate="one_to_one")
    assert m["mag_true_y"].notna().all()
    np.testing.assert_allclose(m["mag_true_x"], m["mag_true_y"], atol=5.1e-5)
    np.testing.assert_allclose(t["mag_inst_true"], -2.5 * np.log10(t["flux_e"] / t["exptime_s"]), atol=1e-10)
    meas = t.merge(shipped_night[shipped_night["flag"] == 0], on=["frame", "star"], how="inner")
    pull = (meas["mag"] - meas["mag_inst_true"]) / meas["mag_err"]
    assert len(meas) > 300
    assert np.median(np.abs(pull)) < 1.5


def test_truth_csv_holds_the_truth(frameset):
    t = frameset.truth
    f = pd.read_csv(frameset.folder / "truth.csv")
    assert list(f.columns) == list(t.columns)
    np.testing.assert_array_equal(f["frame"].astype(str), t["frame"].astype(str))
    np.testing.assert_array_equal(f["star"], t["star"])
    np.testing.assert_array_equal(f["saturated"].astype(bool), t["saturated"])
    for c, tol in (("jd_utc", 6e-7), ("x_px", 6e-5), ("y_px", 6e-5), ("flux_e", 6e-3), ("mag_true", 6e-6)):
        np.testing.assert_allclose(f[c], t[c], atol=tol, rtol=0)
    assert [p.name for p in frameset.paths] == list(pd.unique(f["file"]))


# --------------------------------------------------------------------------- defects


def test_brightest_star_alone_is_clipped(frameset, frames):
    # Saturation (common practice): pixels above SATURATE read SATURATE.  The brightest star by
    # the shipped target.toml's catalogue is the one clipped, and no other star ever is.
    cat = parse_target((DEMO_DIR / "target.toml").read_text())
    brightest = min((s for s in cat.stars if "V" in s.catalog), key=lambda s: s.catalog["V"]).id
    truth = frameset.truth
    assert set(truth.loc[truth["saturated"], "star"]) == {brightest}
    n_sat = 0
    for path, (h, data) in zip(frameset.paths, frames):
        level = h["SATURATE"]
        assert data.max() <= level
        t = truth[truth["file"] == path.name].set_index("star")
        for star, r in t.iterrows():
            ix, iy = int(round(r["x_px"])), int(round(r["y_px"]))
            core = data[iy - 4:iy + 5, ix - 4:ix + 5]
            if r["saturated"]:
                n_sat += 1
                assert (core == np.float32(level)).sum() >= 1
                assert r["peak_adu"] > 0.95 * level
            else:
                assert core.max() < level
    assert n_sat >= 10  # most of the V frames


def test_hot_pixels_stand_out(frameset, frames):
    # Hot pixels (common practice: dark current concentrated in single pixels) at fixed places.
    hot = frameset.hot_pixels
    assert 3 <= len(hot) <= 20
    for h, data in frames:
        for _, r in hot.iterrows():
            x, y = int(r["x_px"]), int(r["y_px"])
            around = np.median(data[y - 2:y + 3, x - 2:x + 3])
            expected = r["rate_e_per_s"] * h["EXPTIME"] / h["GAIN"]
            assert data[y, x] - around == pytest.approx(expected, rel=0.1)
            assert data[y, x] < h["SATURATE"]


def test_sky_has_a_gentle_gradient(frameset, frames):
    # A plane fitted to star-free corners of the frame: a few per cent across the frame.
    h, data = frames[0]
    d = data.astype(float)
    n = d.shape[0]
    patches = [(r, c) for r in (10, n - 40) for c in (10, n - 40)]
    med = {(r, c): np.median(d[r:r + 30, c:c + 30]) for r, c in patches}
    levels = np.array(list(med.values()))
    spread = (levels.max() - levels.min()) / levels.mean()
    assert 0.005 < spread < 0.15


# --------------------------------------------------------------------------- determinism and files


def test_same_seed_same_bytes_other_seed_other_noise(series, tmp_path):
    a = write_frames(tmp_path / "a", n_frames=4, seed=11, series=series)
    b = write_frames(tmp_path / "b", n_frames=4, seed=11, series=series)
    c = write_frames(tmp_path / "c", n_frames=4, seed=12, series=series)
    names = sorted(p.name for p in (tmp_path / "a").iterdir())
    assert names == sorted(p.name for p in (tmp_path / "b").iterdir()) and "truth.csv" in names
    for n in names:
        assert (tmp_path / "a" / n).read_bytes() == (tmp_path / "b" / n).read_bytes(), n
    from astropy.io import fits

    for pa, pc in zip(a.paths, c.paths):
        da, dc = fits.getdata(pa), fits.getdata(pc)
        assert not np.array_equal(da, dc)
        # the noise differs but the light does not: same fluxes, same sky level
        assert abs(np.median(da) - np.median(dc)) < 0.05 * np.median(da)
    pd.testing.assert_frame_equal(a.truth, b.truth)
    np.testing.assert_array_equal(a.truth["flux_e"], c.truth["flux_e"])
    pd.testing.assert_frame_equal(a.stars, c.stars)


def test_existing_file_is_never_overwritten(series, tmp_path):
    folder = tmp_path / "set"
    folder.mkdir()
    keep = folder / "20260911-003-V.fits"
    keep.write_bytes(b"observer's own frame")
    with pytest.raises(OutputError, match="20260911-003-V.fits.*exists"):
        write_frames(folder, n_frames=4, series=series)
    assert keep.read_bytes() == b"observer's own frame"
    assert sorted(p.name for p in folder.iterdir()) == ["20260911-003-V.fits"]  # nothing else written
    truth_only = tmp_path / "t"
    truth_only.mkdir()
    (truth_only / "truth.csv").write_text("mine\n")
    with pytest.raises(OutputError):
        write_frames(truth_only, n_frames=2, series=series)
    assert (truth_only / "truth.csv").read_text() == "mine\n"
    assert len(list(truth_only.iterdir())) == 1
    a_file = tmp_path / "plain"
    a_file.write_text("x")
    with pytest.raises(OutputError, match="not a folder"):
        write_frames(a_file, n_frames=2, series=series)


def test_other_night_one_band_later_frames(series, tmp_path):
    # The shipped table of that night as reference for the exposures chosen.
    from astropy.io import fits

    fs = write_frames(tmp_path / "b", night="2026-09-19", bands=("B",), first=5, n_frames=3, size=384, series=series)
    ref = pd.read_csv(DEMO_DIR / "night-2026-09-19.csv").drop_duplicates("frame")
    ref_b = ref[ref["band"] == "B"].reset_index(drop=True)
    heads = [fits.getheader(p) for p in fs.paths]
    assert [h["FRAMEID"] for h in heads] == list(ref_b["frame"][5:8])
    assert all(h["FILTER"] == "Johnson B" and h["NAXIS1"] == 384 for h in heads)
    assert fs.night == "2026-09-19"


def test_refusals(series, tmp_path):
    with pytest.raises(InputError, match="not a night"):
        write_frames(tmp_path / "a", night="2026-09-13", series=series)
    with pytest.raises(InputError, match="bands"):
        write_frames(tmp_path / "b", bands=("R",), series=series)
    with pytest.raises(InputError, match="exposures"):
        write_frames(tmp_path / "c", n_frames=100_000, series=series)
    with pytest.raises(InputError, match="at least"):
        write_frames(tmp_path / "d", size=128, n_frames=2, series=series)
    with pytest.raises(InputError, match="seed"):
        write_frames(tmp_path / "f", seed=-1, n_frames=2, series=series)
    with pytest.raises(InputError, match="saturate_adu"):
        write_frames(tmp_path / "e", saturate_adu=1e9, n_frames=2, series=series)
    assert not any(tmp_path.iterdir())  # refused before any folder or file was made


# --------------------------------------------------------------------------- the target description


def test_frame_target_toml_parses_with_positions(frameset, scenario):
    # varstar.target.parse_target as the reader; the shipped demo_series/target.toml as reference
    # for everything but the positions; astropy.coordinates for the separations.
    from astropy.coordinates import SkyCoord

    text = frame_target_toml()
    tgt = parse_target(text)
    shipped = parse_target((DEMO_DIR / "target.toml").read_text())
    assert tgt.star_ids == shipped.star_ids
    pos = frameset.stars.set_index("star")
    for s, ref in zip(tgt.stars, shipped.stars):
        assert s.ra_deg is not None and s.dec_deg is not None
        assert (s.role, dict(s.catalog), dict(s.catalog_err)) == (ref.role, dict(ref.catalog), dict(ref.catalog_err))
        assert (s.ra_deg, s.dec_deg) == (pos.loc[s.id, "ra_deg"], pos.loc[s.id, "dec_deg"])
    assert (tgt.target_star.ra_deg, tgt.target_star.dec_deg) == (tgt.ra_deg, tgt.dec_deg)
    # the text is the shipped file plus the comment, the ra/dec lines and the B filter's name, nothing else changed
    assert text.endswith('\n[photometry.filters]\n"Johnson B" = "B"\n')
    assert tgt.extra["photometry"] == {"filters": {"Johnson B": "B"}}
    text = text[: -len('\n[photometry.filters]\n"Johnson B" = "B"\n')]
    lines = text.splitlines(keepends=True)
    stripped = [ln for i, ln in enumerate(lines)
                if not (ln.startswith("# Star positions")
                        or (ln.startswith("ra = ") and lines[i - 1].startswith("role = "))
                        or (ln.startswith("dec = ") and lines[i - 2].startswith("role = ")))]
    assert "".join(stripped) == (DEMO_DIR / "target.toml").read_text()
    c = SkyCoord(pos["ra_deg"].to_numpy(), pos["dec_deg"].to_numpy(), unit="deg")
    sep = c[:, None].separation(c[None, :]).arcsec
    np.fill_diagonal(sep, np.inf)
    assert sep.min() >= MIN_SEPARATION_ARCSEC - 0.01
    assert c.separation(SkyCoord(scenario.ra_deg, scenario.dec_deg, unit="deg")).arcsec.max() <= 150.01
    # fixed seed: the same positions every time; another seed, others
    pd.testing.assert_frame_equal(frame_star_positions(), frameset.stars)
    assert not frame_star_positions(seed=8)["ra_deg"].equals(frameset.stars["ra_deg"])
