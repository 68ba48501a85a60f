"""Aperture spectra of a sub-cube: flux in Jy and the measured window noise."""

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table

from pipeline.io.products import SubCube
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra
from synthetic_cubes.generate import hanning


def _subcube(tmp_path, data, bunit="Jy/beam", pix_arcsec=0.3, beam_arcsec=1.0):
    nchan, ny, nx = data.shape
    h = fits.Header()
    h["CTYPE1"], h["CRVAL1"], h["CDELT1"], h["CRPIX1"], h["CUNIT1"] = "RA---SIN", 10.0, -pix_arcsec / 3600, nx / 2 + .5, "deg"
    h["CTYPE2"], h["CRVAL2"], h["CDELT2"], h["CRPIX2"], h["CUNIT2"] = "DEC--SIN", 5.0, pix_arcsec / 3600, ny / 2 + .5, "deg"
    h["CTYPE3"], h["CUNIT3"], h["CRVAL3"], h["CDELT3"], h["CRPIX3"] = "VRAD", "km/s", -0.3 * (nchan // 2), 0.3, 1.0
    h["SPECSYS"], h["RESTFRQ"], h["BUNIT"] = "SOURCE", 265.886434e9, bunit
    h["BMAJ"] = h["BMIN"] = beam_arcsec / 3600
    h["BPA"] = 0.0
    h["GLXPIX"], h["GLYPIX"], h["GLDELTA"], h["GLRH"] = (nx - 1) / 2, (ny - 1) / 2, 1.0, 1.0
    h["GLLINE"], h["GLCUBE"], h["GLEPOCH"], h["GLCOVER"] = "HCN_265886", "c1", "e1", True
    path = tmp_path / "sub.fits"
    fits.PrimaryHDU(data.astype(np.float32), header=h).writeto(path)
    return path


def test_flux_of_uniform_surface_brightness(tmp_path):
    # a uniform 1 Jy/beam map: an aperture of radius r holds (pi r^2 / beam area) Jy (beam area pi/(4 ln2) B^2)
    # (plus a little noise: perfectly constant data carry no noise to measure and are refused)
    data = np.ones((200, 64, 64)) + 1e-3 * np.random.default_rng(2).standard_normal((200, 64, 64))
    path = _subcube(tmp_path, data)
    settings = ExtractionSettings(radii=[2.0 * u.arcsec], window=1.0 * u.km / u.s, other_lines=[] * u.km / u.s,
                                  baseline_order=0)
    hdul = extract_spectra(SubCube.from_fits(path), settings).to_fits()
    raw = np.pi * 2.0**2 / (np.pi / (4 * np.log(2)) * 1.0**2)
    # the baseline (order 0) takes the constant out; the APERTURES table keeps the geometry
    assert abs(np.mean(hdul[0].data)) < 1e-3 * raw
    aps = Table.read(hdul["APERTURES"])
    assert aps["area_pix"][0] == pytest.approx(np.pi * (2.0 / 0.3) ** 2, rel=1e-9)   # exact overlap area


def test_line_flux_and_correlated_noise(tmp_path):
    rng = np.random.default_rng(11)
    nchan = 600
    noise = hanning(rng.standard_normal((nchan, 48, 48))) * 0.01
    vel = -0.3 * (nchan // 2) + 0.3 * np.arange(nchan)
    line = np.where(np.abs(vel) < 0.6, 1.0, 0.0)                 # 1 Jy/pixel box, 5 channels of 0.3 km/s
    img = np.zeros((48, 48))
    img[23:25, 23:25] = 0.25                                     # 1 Jy in total, well inside the aperture
    data = noise + line[:, None, None] * img[None]
    path = _subcube(tmp_path, data, bunit="Jy/pixel")
    settings = ExtractionSettings(radii=[2.0 * u.arcsec], window=1.0 * u.km / u.s, other_lines=[] * u.km / u.s)
    hdul = extract_spectra(SubCube.from_fits(path), settings).to_fits()
    v = SubCube.from_fits(path).velocity
    ch = Table.read(hdul["CHANNELS"])
    flux = np.sum(hdul[0].data[0] * ch["window_weight"]) * 0.3
    aps = Table.read(hdul["APERTURES"])
    # integral of the box: 1 Jy x 1.5 km/s (5 channels of 0.3 km/s, the box channel centres within 0.6 km/s)
    assert flux == pytest.approx(1.5, abs=4 * aps["sigma_window"][0])
    # Hanning-correlated channels: sum of N correlated channels has more noise than sigma*sqrt(N)
    assert aps["sigma_window"][0] > 1.2 * aps["sigma_window_naive"][0]
    assert np.all(ch["line_free"][np.abs(v) < 1.0] == False)  # noqa: E712
