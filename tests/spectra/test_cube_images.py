"""The images of a cube around the target: integrated line, band, continuum, and the geometry drawn on them."""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.wcs import WCS
from scipy.special import erf, ndtr

from cubes import cube_header
from pipeline.catalogue import load_catalogue
from pipeline.errors import CoverageError
from pipeline.io.cubes import read_cube_info
from pipeline.spectra.cube_images import (_runs, beam_ellipse, band_image, continuum_image, image_frame,
                                          image_statistics, integrated_line_image, line_free_channels,
                                          line_window_weights, sky_directions)

CAT = load_catalogue()
LINE = CAT.get_line("CO_230538")
PIX_ARCSEC = 0.5


def _pixel_gaussian(n: int, centre: float, sigma: float) -> np.ndarray:
    """Exact integrals of a unit 1-D Gaussian over unit pixels centred on 0..n-1."""
    k = np.arange(n)
    return ndtr((k + 0.5 - centre) / sigma) - ndtr((k - 0.5 - centre) / sigma)


def _line_cube(tmp_path, amplitude: float, sigma_v: float, x0: float, y0: float, sigma_pix: float,
               continuum: float = 0.0, shape=(81, 41, 45), **cards):
    """A Jy/pixel cube in the target's frame (SPECSYS SOURCE): a Gaussian line centred on CO's rest frequency on a
    Gaussian source, exact channel and pixel integrals, so the line integral over the whole sky is ``amplitude``."""
    nchan, ny, nx = shape
    dnu = -244.0e3
    header = cube_header(shape, CRVAL3=LINE.freq.to_value(u.Hz), CDELT3=dnu, CRPIX3=(nchan + 1) / 2,
                         SPECSYS="SOURCE", BUNIT="Jy/pixel", CDELT1=-PIX_ARCSEC / 3600, CDELT2=PIX_ARCSEC / 3600,
                         **cards)
    dv = const.c.to_value(u.km / u.s) * abs(dnu) / LINE.freq.to_value(u.Hz)    # radio convention: exact
    v = (np.arange(nchan) - (nchan - 1) / 2) * dv                                # channel 0 is the lowest velocity
    g = (ndtr((v + dv / 2) / sigma_v) - ndtr((v - dv / 2) / sigma_v)) / dv       # km/s^-1, exact channel means
    sky = np.outer(_pixel_gaussian(ny, y0, sigma_pix), _pixel_gaussian(nx, x0, sigma_pix))
    data = (amplitude * g[:, None, None] * sky[None] + continuum).astype(np.float64)
    path = tmp_path / "line.fits"
    hdu = fits.PrimaryHDU(data)
    for key, value in header.items():
        if key not in ("NAXIS", "NAXIS1", "NAXIS2", "NAXIS3"):
            hdu.header[key] = value
    hdu.writeto(path)
    return read_cube_info(path), dv, sky


GEOMETRY = {"frame_factor": 1.0, "delta_dot": 0.0 * u.km / u.s}


def test_integrated_image_sum_is_the_line_integral_in_the_window(tmp_path):
    amplitude, sigma_v = 2.5, 1.3                      # Jy km/s in total, km/s
    info, dv, sky = _line_cube(tmp_path, amplitude, sigma_v, x0=22.0, y0=20.0, sigma_pix=1.8)
    half = 4.5 * dv                                    # the window's edges on channel edges (the line is centred)
    weights, widths, left_out = line_window_weights(info, GEOMETRY, [LINE], half * u.km / u.s)
    assert left_out == []
    assert weights.sum() == pytest.approx(9.0)         # nine whole channels
    frame = image_frame(info, 22.0, 20.0, [3.0 * u.arcsec], ["3 arcsec"], 1 * u.au)
    image = integrated_line_image(info, frame, weights, widths, chunk=4)
    assert image.unit == u.Jy / u.pix * u.km / u.s
    # closed form: the window holds erf(W / (sqrt(2) sigma_v)) of the line; the box the pixel integrals it spans
    expected = amplitude * erf(half / (np.sqrt(2) * sigma_v)) * sky[frame.ys, frame.xs].sum()
    assert np.nansum(image.value) == pytest.approx(expected, rel=1e-6)
    # the predicted position lands on the source's pixel, and the peak is found there
    peak = np.unravel_index(np.nanargmax(image.value), image.shape)
    assert (peak[1], peak[0]) == (round(frame.target[0]), round(frame.target[1]))
    stats = image_statistics(image, frame)
    assert stats["offset_arcsec"] == 0.0


def test_window_the_band_does_not_cover_is_left_out(tmp_path):
    info, dv, _ = _line_cube(tmp_path, 1.0, 1.0, 22.0, 20.0, 1.5, shape=(11, 41, 45))
    weights, _, left_out = line_window_weights(info, GEOMETRY, [LINE], 10 * dv * u.km / u.s)
    assert left_out == ["CO_230538"] and not weights.any()


def test_blank_voxels_are_made_up_by_the_pixel_mean_or_blank_the_pixel(tmp_path):
    info, dv, _ = _line_cube(tmp_path, 0.0, 1.0, 22.0, 20.0, 1.5, continuum=2.0)   # a flat 2 Jy/pixel everywhere
    data = fits.getdata(info.path).copy()
    centre = data.shape[0] // 2
    data[centre, 20, 22] = np.nan                      # one of nine window channels blank: made up for
    data[centre - 4:centre + 5, 5, 5] = np.nan         # every window channel blank: the pixel is blank
    fits.update(info.path, data, fits.getheader(info.path))
    weights, widths, _ = line_window_weights(info, GEOMETRY, [LINE], 4.5 * dv * u.km / u.s)
    frame = image_frame(info, 22.0, 20.0, [6.0 * u.arcsec], ["6 arcsec"], 1 * u.au)
    image = integrated_line_image(info, frame, weights, widths).value
    # a flat spectrum: the window integral is 2 Jy/pixel x 9 channels x dv, blank channel or not (closed form)
    assert image[20 - frame.ys.start, 22 - frame.xs.start] == pytest.approx(2.0 * 9 * dv, rel=1e-9)
    assert np.isnan(image[5 - frame.ys.start, 5 - frame.xs.start])


def test_continuum_image_is_the_mean_of_line_free_channels(tmp_path):
    info, dv, _ = _line_cube(tmp_path, 5.0, 0.25, 22.0, 20.0, 1.5, continuum=0.3)
    free = line_free_channels(info, GEOMETRY, CAT, 6 * dv * u.km / u.s)
    # the CO line at the centre channel: channels more than 6 dv from it are free (those
    # on the edge count as on it, noise.line_free_mask): a 12 dv wide hole of 13 channels
    assert int((~free).sum()) == 13
    frame = image_frame(info, 22.0, 20.0, [3.0 * u.arcsec], ["3 arcsec"], 1 * u.au)
    image = continuum_image(info, frame, free, chunk=7)
    # beyond 6 dv (7.6 line sigmas) the line's wings hold below 1e-13 of it (normal tail, closed form): the mean is the 0.3 Jy/pixel continuum
    np.testing.assert_allclose(image.to_value(u.Jy / u.pix), 0.3, rtol=1e-7)


def test_beam_ellipse_on_a_north_up_east_left_grid(tmp_path):
    info, _, _ = _line_cube(tmp_path, 1.0, 1.0, 22.0, 20.0, 1.5, BMAJ=2.0 / 3600, BMIN=1.0 / 3600, BPA=30.0)
    ellipse = beam_ellipse(2.0 * u.arcsec, 1.0 * u.arcsec, 30 * u.deg, info.celestial_wcs, 22.0, 20.0)
    # closed form on a TAN grid at its reference point, north up and east left: the major axis is turned from
    # +y (north) towards -x (east) by PA, i.e. 90 + PA degrees counter-clockwise from +x; FWHM / pixel size
    assert ellipse.angle_deg == pytest.approx(120.0, abs=1e-3)
    assert ellipse.width_pix == pytest.approx(2.0 / PIX_ARCSEC, rel=1e-4)
    assert ellipse.height_pix == pytest.approx(1.0 / PIX_ARCSEC, rel=1e-4)


@pytest.mark.parametrize("rho", [30.0, -50.0])
def test_beam_ellipse_and_compass_on_a_rotated_grid(rho):
    wcs = WCS(naxis=2)
    wcs.wcs.ctype = ["RA---TAN", "DEC--TAN"]
    wcs.wcs.crval = [150.0, -20.0]
    wcs.wcs.crpix = [20.0, 20.0]
    wcs.wcs.cdelt = [-0.2 / 3600, 0.2 / 3600]
    r = np.radians(rho)
    wcs.wcs.pc = [[np.cos(r), -np.sin(r)], [np.sin(r), np.cos(r)]]     # FITS paper II, CROTA2 = rho
    north, east = sky_directions(wcs, 19.0, 19.0)
    # closed form: the pixel grid turned by rho puts north at 90 - rho degrees and east 90 degrees further on
    assert np.degrees(np.arctan2(north[1], north[0])) == pytest.approx(90.0 - rho, abs=1e-3)
    assert np.degrees(np.arctan2(east[1], east[0])) % 360 == pytest.approx((180.0 - rho) % 360, abs=1e-3)
    ellipse = beam_ellipse(1.2 * u.arcsec, 0.9 * u.arcsec, 65 * u.deg, wcs, 19.0, 19.0)
    assert ellipse.angle_deg % 180 == pytest.approx((90.0 + 65.0 - rho) % 180, abs=1e-3)
    assert (ellipse.width_pix, ellipse.height_pix) == pytest.approx((6.0, 4.5), rel=1e-4)


def test_predicted_position_outside_the_field_is_refused(tmp_path):
    info, _, _ = _line_cube(tmp_path, 1.0, 1.0, 22.0, 20.0, 1.5)
    with pytest.raises(CoverageError, match="outside"):
        image_frame(info, 80.0, 20.0, [1.0 * u.arcsec], ["1 arcsec"], 1 * u.au)


def test_band_image_removes_the_continuum_and_integrates_the_band(tmp_path):
    """A linear continuum plus a Gaussian band on a Gaussian source: the image is the band's integral alone."""
    band = CAT.get_band("H2O_nu3")
    nchan, ny, nx = 200, 25, 27
    lam = np.linspace(2.40, 2.95, nchan)                                        # um
    step = lam[1] - lam[0]
    lo, hi = 2.62, 2.72                                                         # the window (on bin edges below)
    wlo, whi = lam[40] - step / 2, lam[160] - step / 2
    windows = {"H2O_nu3": (lo * u.um, hi * u.um, wlo * u.um, whi * u.um)}
    centre, width, total = 2.67, 0.01, 3.0e-7                                   # um, um, W m-2 sr-1
    g = (ndtr((lam + step / 2 - centre) / width) - ndtr((lam - step / 2 - centre) / width)) / step
    sky = np.outer(_pixel_gaussian(ny, 12.0, 1.5), _pixel_gaussian(nx, 13.0, 1.5))
    cont = 1e-6 * (1.0 + 3.0 * (lam - 2.6))                                      # W m-2 um-1 sr-1
    data = cont[:, None, None] * (1 + sky[None]) + total * g[:, None, None] * sky[None] / sky.max()
    header = cube_header((nchan, ny, nx), CTYPE3="WAVE", CRVAL3=lam[0] * 1e-6, CDELT3=step * 1e-6, CRPIX3=1.0,
                         CUNIT3="m", RESTFRQ=None, SPECSYS="SOURCE", BUNIT="W/m2/um/sr", BMAJ=None, BMIN=None,
                         BPA=None, CDELT1=-0.1 / 3600, CDELT2=0.1 / 3600)
    hdu = fits.PrimaryHDU(data)
    for key, value in header.items():
        if key not in ("NAXIS", "NAXIS1", "NAXIS2", "NAXIS3"):
            hdu.header[key] = value
    hdu.writeto(tmp_path / "ir.fits")
    info = read_cube_info(tmp_path / "ir.fits", (0.2, 0.2, 0.0))
    frame = image_frame(info, 13.0, 12.0, [0.5 * u.arcsec], ["0.5 arcsec"], 1 * u.au)
    image, n_win, n_cont = band_image(info, frame, band, windows, 1.0, "flat", 1)
    assert image.unit == u.W / u.m**2 / u.sr
    assert n_win == 120 and n_cont > 50
    # closed form: the continuum is linear (fitted exactly), the band lies wholly inside the window, so each
    # pixel holds total x sky / max(sky)
    expected = total * sky[frame.ys, frame.xs] / sky.max()
    np.testing.assert_allclose(image.value, expected, rtol=1e-6, atol=1e-6 * total)


def test_channel_runs_are_contiguous_and_bounded():
    runs = _runs(np.array([0, 1, 2, 3, 7, 8, 20]), chunk=3)
    assert runs == [(0, 3), (3, 4), (7, 9), (20, 21)]
