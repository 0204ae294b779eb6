"""The photometry core against outside references: injected truth (pull distributions), the CCD
equation of Merline & Howell (1995) worked by hand, astropy.wcs, and photutils called directly.

Frames are invented (tests/photometry/photometry_frames.py, fixed seeds): Gaussian stars of known
flux and position, sky, photon and read noise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from astropy.io import fits
from astropy.stats import SigmaClip
from astropy.wcs import WCS
from photometry_frames import (crpix_of, grid_field, header_cards, render, tan_pixel, target_for, wcs_cards,
                               write_fits)
from photutils.aperture import ApertureStats, CircularAnnulus, CircularAperture, aperture_photometry

from varstar.errors import InputError
from varstar.photometry import FLAGS, PhotometrySettings, measure_frames
from varstar.photometry.measure import Detector, measure_stars
from varstar.photometry.noise import ccd_variance_e, instrumental_magnitude, magnitude_error
from varstar.photometry.positions import celestial_wcs, predict_pixels

PX = PhotometrySettings(aperture_fwhm=None, aperture_px=9.0, annulus_fwhm=None, annulus_px=(13.0, 20.0))
PX_TOML = "[photometry]\naperture_px = 9.0\nannulus_px = [13.0, 20.0]\n"
GAIN, READ_NOISE = 1.7, 8.0
MAG_PER_LN = 2.5 / math.log(10.0)


@pytest.fixture(scope="module")
def field():
    return grid_field()


def _comparisons(fld):
    return np.array([r == "comparison" for r in fld.roles])


def test_injected_fluxes_recovered_within_ccd_equation_errors(field):
    # Simulated truth judged by its pull distribution: (measured - injected) / error over 16 stars x 40
    # frames should have mean 0 and standard deviation 1; the bounds are 4 sampling sigmas
    # (1/sqrt(N) for the mean, 1/sqrt(2N) for the standard deviation; common practice).
    pulls = []
    for k in range(40):
        img = render(field, seed=5000 + k, gain=GAIN, read_noise_e=READ_NOISE)
        m = measure_stars(img, field.x, field.y, _comparisons(field), PX, Detector(GAIN, READ_NOISE), 60.0)
        assert (m.flag == 0).all(), m.flag_reason
        sigma_counts = m.mag_err * m.counts / MAG_PER_LN
        # the 9-px aperture holds all but exp(-r^2 / 2 sigma^2) ~ 1e-8 of each star's light (Gaussian)
        pulls.append((m.counts - field.flux) / sigma_counts)
    p = np.concatenate(pulls)
    n = p.size
    assert abs(p.mean()) < 4 / math.sqrt(n), p.mean()
    assert abs(p.std() - 1.0) < 4 / math.sqrt(2 * n), p.std()


def test_magnitudes_of_injected_stars_through_measure_frames(field, tmp_path):
    # The same truth through the whole path (files, header, WCS, table): the magnitude pulls against
    # -2.5 log10(flux / exptime) stay within 4 sampling sigmas over 16 stars x 8 frames.
    paths = []
    for k in range(8):
        img = render(field, seed=7000 + k)
        paths.append(write_fits(tmp_path / f"f{k}.fits", img, header_cards(field.shape)))
    tab = measure_frames(target_for(field, photometry=PX_TOML), paths, workers=1).table
    truth = np.tile(-2.5 * np.log10(field.flux / 60.0), 8)
    pull = (tab["mag"].to_numpy() - truth) / tab["mag_err"].to_numpy()
    assert abs(pull.mean()) < 4 / math.sqrt(pull.size)
    assert abs(pull.std() - 1.0) < 4 / math.sqrt(2 * pull.size)


def test_ccd_equation_worked_by_hand():
    # Merline & Howell (1995), sigma^2 = N* + n_pix (1 + n_pix/n_B)(N_S + N_D + N_R^2), worked by hand:
    # N* = 50000 e-, r = 5 px -> n_pix = 25 pi = 78.5398, n_B = 400, N_S = 300, N_D = 10, N_R = 8 e-.
    # per pixel 300 + 10 + 64 = 374; 78.5398 x (1 + 78.5398/400) = 78.5398 x 1.196350 = 93.9611;
    # x 374 = 35141.44; + 50000 = 85141.44; sigma = 291.790 e-; S/N = 171.356;
    # sigma_mag = 1.0857362 / 171.356 = 0.0063361 mag.
    var = ccd_variance_e(np.array([50000.0]), np.array([25 * math.pi]), np.array([400.0]), np.array([300.0]), 10.0, 8.0)
    assert var[0] == pytest.approx(85141.44, abs=0.01)
    assert magnitude_error(np.array([50000.0]), var)[0] == pytest.approx(0.0063361, abs=1e-7)
    # -2.5 log10(counts / exptime): 10000 ADU in 100 s -> -2.5 log10(100) = -5 (definition of magnitude)
    assert instrumental_magnitude(np.array([10000.0]), 100.0)[0] == pytest.approx(-5.0, abs=1e-12)


def test_measured_error_is_the_ccd_equation_of_that_star(field):
    # One measured star's mag_err against Merline & Howell (1995) written out here from its own numbers:
    # N* = counts x gain, N_S = sky x gain, n_pix = pi r^2, n_B = the annulus pixels used, N_D = dark e-.
    img = render(field, seed=11)
    det = Detector(GAIN, READ_NOISE, dark_e=25.0)
    m = measure_stars(img, field.x, field.y, _comparisons(field), PX, det, 60.0)
    k = 5
    n_star = m.counts[k] * GAIN
    n_pix = math.pi * 9.0**2
    n_b = m.n_sky[k]
    sigma = math.sqrt(n_star + n_pix * (1 + n_pix / n_b) * (m.sky[k] * GAIN + 25.0 + READ_NOISE**2))
    assert m.mag_err[k] == pytest.approx(2.5 / math.log(10) * sigma / n_star, rel=1e-12)
    assert 0.9 * math.pi * (20**2 - 13**2) < n_b <= math.pi * (20**2 - 13**2) + 10  # the annulus, a few pixels clipped


def test_centroid_recovers_the_injected_position_from_an_offset_wcs(field, tmp_path):
    # Known truth: the WCS is 1.4 px and -0.9 px off, so the predictions miss the stars; the centroid
    # must find each injected position: to 0.05 px for stars of S/N > 100, 0.3 px for all (a centroid's
    # error is about FWHM / (2.35 S/N); common practice).
    img = render(field, seed=21)
    path = write_fits(tmp_path / "offset.fits", img, header_cards(field.shape, wcs_shift=(1.4, -0.9)))
    tab = measure_frames(target_for(field, photometry=PX_TOML), [path], workers=1).table
    dx = tab["x"].to_numpy() - field.x
    dy = tab["y"].to_numpy() - field.y
    snr = MAG_PER_LN / tab["mag_err"].to_numpy()
    assert (np.hypot(dx, dy)[snr > 100] < 0.05).all(), np.c_[dx, dy, snr]
    assert (np.hypot(dx, dy) < 0.3).all()
    assert (tab["flag"] == 0).all()


@pytest.mark.filterwarnings("ignore:.*datfix.*")
def test_wcs_pixel_position_against_astropy_and_the_tan_equations(field):
    # astropy.wcs as the reference library: WCS.all_world2pix (origin 0) on the same header; and the
    # gnomonic projection of Calabretta & Greisen (2002) written out in the test helper.
    header = fits.Header(header_cards(field.shape))
    wcs = celestial_wcs(header, "h")
    x, y = predict_pixels(wcs, field.ra, field.dec)
    ax, ay = WCS(header).all_world2pix(field.ra, field.dec, 0)
    np.testing.assert_allclose(x, ax, atol=1e-8)
    np.testing.assert_allclose(y, ay, atol=1e-8)
    hx, hy = tan_pixel(field.ra, field.dec, crpix_of(field.shape))
    np.testing.assert_allclose(x, hx, atol=1e-6)
    np.testing.assert_allclose(y, hy, atol=1e-6)
    np.testing.assert_allclose(x, field.x, atol=1e-6)  # the helper placed the stars by the inverse projection


@pytest.mark.filterwarnings("ignore:.*datfix.*")
def test_rotated_wcs_position_against_astropy(field):
    # A rotated, non-square CD matrix: astropy.wcs (all_world2pix) as the reference.
    cards = wcs_cards(field.shape)
    c, s = math.cos(math.radians(30)), math.sin(math.radians(30))
    cards.update({"CD1_1": -1e-4 * c, "CD1_2": 1.1e-4 * s, "CD2_1": 1e-4 * s, "CD2_2": 1.1e-4 * c})
    header = fits.Header(cards)
    x, y = predict_pixels(celestial_wcs(header, "h"), field.ra, field.dec)
    ax, ay = WCS(header).all_world2pix(field.ra, field.dec, 0)
    np.testing.assert_allclose(np.c_[x, y], np.c_[ax, ay], atol=1e-8)


def test_counts_equal_photutils_called_directly(field, tmp_path):
    # photutils as the reference library: aperture_photometry of the same pixels at the table's
    # positions, minus the sigma-clipped mean of the annulus (ApertureStats) times the aperture's area.
    img = render(field, seed=31)
    path = write_fits(tmp_path / "direct.fits", img, header_cards(field.shape, exptime=45.0))
    tab = measure_frames(target_for(field, photometry=PX_TOML), [path], workers=1).table
    xy = np.c_[tab["x"].to_numpy(), tab["y"].to_numpy()]
    data = fits.getdata(path).astype(float)
    sky = ApertureStats(data, CircularAnnulus(xy, 13.0, 20.0), sigma_clip=SigmaClip(sigma=3.0, maxiters=10)).mean
    raw_sum = np.asarray(aperture_photometry(data, CircularAperture(xy, 9.0))["aperture_sum"], float)
    counts = raw_sum - sky * math.pi * 81.0
    np.testing.assert_allclose(tab["sky"].to_numpy(), sky, rtol=1e-12)
    np.testing.assert_allclose(tab["mag"].to_numpy(), -2.5 * np.log10(counts / 45.0), atol=1e-9)


def test_fwhm_measured_from_the_comparison_stars(field):
    # Known truth: the injected FWHM (3.5 px, then 5.0 px); second moments recover it to 5 %.
    for fwhm in (3.5, 5.0):
        img = render(field, seed=41, fwhm=fwhm, flux_scale=3.0)
        m = measure_stars(img, field.x, field.y, _comparisons(field), PhotometrySettings(), Detector(GAIN, READ_NOISE), 60.0)
        assert m.fwhm_px == pytest.approx(fwhm, rel=0.05)
        assert m.aperture_px == pytest.approx(1.5 * m.fwhm_px)  # the default: 1.5 x FWHM
        assert m.annulus_px == pytest.approx((3.0 * m.fwhm_px, 5.0 * m.fwhm_px))


def test_saturated_and_nonlinear_stars_flagged(field):
    # A star whose highest raw pixel reaches the saturation level is flagged, one in the non-linear
    # range too; the others stay good (common practice: saturated pixels do not measure the flux).
    flux = field.flux.copy()
    img = render(field, seed=51, extra=[(field.x[3], field.y[3], 4e5), (field.x[4], field.y[4], 1.2e5)])
    det = Detector(GAIN, READ_NOISE, saturation_adu=10000.0, nonlinear_adu=5000.0)
    m = measure_stars(img, field.x, field.y, _comparisons(field), PX, det, 60.0)
    assert m.peak[3] >= 10000 and m.flag[3] == FLAGS["saturated"]
    assert m.flag_reason[3] == "saturated;nonlinear"
    assert 5000 <= m.peak[4] < 10000 and m.flag[4] == FLAGS["nonlinear"] and m.flag_reason[4] == "nonlinear"
    assert np.isfinite(m.mag[3])  # measured, but not to be used
    others = np.ones(flux.size, bool)
    others[[3, 4]] = False
    assert (m.flag[others] == 0).all() and (m.peak[others] < 5000).all()


def test_bad_pixels_edge_and_wander_flagged_never_moved(field):
    # A NaN in one aperture, a star whose aperture crosses the edge, and a star predicted on empty sky
    # 4 px from a bright star: flagged with their reasons, magnitude empty; the centroid the last found
    # is not taken as the star (common practice: never measure a neighbour instead).
    x, y = field.x.copy(), field.y.copy()
    img = render(field, seed=61, flux_scale=3.0)
    img[int(round(y[1])), int(round(x[1])) + 2] = np.nan
    x[6] = 3.0  # predicted 3 px from the left edge: a 9-px aperture cannot fit
    x[2] -= 4.0  # predicted 4 px left of where star 2 lies
    m = measure_stars(img, x, y, _comparisons(field), PX, Detector(GAIN, READ_NOISE), 60.0)
    assert m.flag[1] == FLAGS["bad_pixels"] and np.isnan(m.mag[1])
    assert m.flag[6] == FLAGS["off_frame"] and np.isnan(m.mag[6])
    assert m.flag[2] == FLAGS["centroid_wander"] and np.isnan(m.mag[2])
    assert math.hypot(m.x[2] - x[2], m.y[2] - y[2]) > 3.0
    good = np.ones(x.size, bool)
    good[[1, 2, 6]] = False
    assert (m.flag[good] == 0).all()


def test_star_off_the_frame_flagged(field):
    x, y = field.x.copy(), field.y.copy()
    x[0] = -50.0
    img = render(field, seed=71)
    m = measure_stars(img, x, y, _comparisons(field), PX, Detector(GAIN, READ_NOISE), 60.0)
    assert m.flag[0] == FLAGS["off_frame"] and m.flag_reason[0] == "off_frame" and np.isnan(m.mag[0])
    assert (m.flag[1:] == 0).all()


def test_no_signal_flagged(field):
    # A star predicted on empty sky: nothing above the background in its box, or a centroid pulled
    # away by noise: flagged (no_centroid, centroid_wander or no_signal), never a good row.
    x, y = field.x.copy(), field.y.copy()
    img = render(field, seed=81)
    x[0], y[0] = 80.0, 80.0  # between the grid's stars
    m = measure_stars(img, x, y, _comparisons(field), PX, Detector(GAIN, READ_NOISE), 60.0)
    assert m.flag[0] in (FLAGS["no_centroid"], FLAGS["centroid_wander"], FLAGS["no_signal"])


def test_annulus_inside_the_aperture_refused(field):
    # An aperture in pixels and an annulus in FWHM multiples that lands inside it on this frame.
    s = PhotometrySettings(aperture_fwhm=None, aperture_px=9.0, annulus_fwhm=(2.0, 4.0))
    img = render(field, seed=91)
    with pytest.raises(InputError, match=r"frame\.fits: .*annulus starts at .* inside the 9\.0-px aperture"):
        measure_stars(img, field.x, field.y, _comparisons(field), s, Detector(GAIN, READ_NOISE), 60.0, frame="frame.fits")
