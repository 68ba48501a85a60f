"""Infrared cubes: SCI/ERR extensions, surface-brightness units, pixel solid angle, aperture spectra."""

from __future__ import annotations

import math
import warnings

import astropy.units as u
import numpy as np
import pytest
import scipy.constants as sc
from astropy.io import fits
from astropy.wcs import WCS, FITSFixedWarning
from astropy.wcs.utils import proj_plane_pixel_area
from numpy.testing import assert_allclose

from pipeline.io.cubes import read_cube_info
from pipeline.errors import CubeError
from pipeline.spectra.ir_spectra import extract_ir_spectra, flux_density_factor, pixel_solid_angle

from cubes import cube_header

SHAPE = (40, 21, 21)
ARCSEC_SR = (math.pi / 180 / 3600) ** 2          # closed form: one square arcsecond in steradians


def ir_header(**cards) -> fits.Header:
    base = {"CTYPE3": "WAVE", "CRVAL3": 2.6e-6, "CDELT3": 2.0e-9, "CRPIX3": 1.0, "CUNIT3": "m", "RESTFRQ": None,
            "BUNIT": "MJy/sr", "BMAJ": None, "BMIN": None, "BPA": None, "CDELT1": -0.1 / 3600,
            "CDELT2": 0.1 / 3600}
    base.update(cards)
    return cube_header(SHAPE, **base)


def write_ir(path, data, err=None, in_extension=True, **cards):
    """An IFU-style file: empty primary with the times, SCI (and ERR) image extensions."""
    header = ir_header(**cards)
    if not in_extension:
        hdus = [fits.PrimaryHDU(data.astype(np.float32), header=header)]
    else:
        prim = fits.PrimaryHDU()
        for key in ("DATE-OBS", "EXPTIME"):
            prim.header[key] = header.pop(key)
        sci = fits.ImageHDU(data.astype(np.float32), header=header, name="SCI")
        hdus = [prim, sci]
    if err is not None:
        hdus.append(fits.ImageHDU(err.astype(np.float32), header=ir_header(**cards), name="ERR"))
    fits.HDUList(hdus).writeto(path)
    return path


def test_cube_in_sci_extension_with_primary_times(tmp_path):
    path = write_ir(tmp_path / "ifu.fits", np.ones(SHAPE), np.full(SHAPE, 0.1))
    info = read_cube_info(path)
    assert info.hdu == 1 and info.error_hdu == 2
    assert info.regime == "infrared"
    assert info.header["DATE-OBS"] == "2024-03-01T10:00:00"      # inherited from the primary header
    # WAVE axis in metres: channel k at 2.6 um + k * 2 nm
    assert_allclose(info.wavelengths.to_value(u.um), 2.6 + 0.002 * np.arange(SHAPE[0]), rtol=1e-12)


def test_wave_axis_in_micrometres_in_the_primary(tmp_path):
    path = write_ir(tmp_path / "ifu.fits", np.ones(SHAPE), in_extension=False, CRVAL3=2.6, CDELT3=0.002,
                    CUNIT3="um")
    info = read_cube_info(path)
    assert info.hdu == 0 and info.error_hdu is None
    assert_allclose(info.wavelengths.to_value(u.um), 2.6 + 0.002 * np.arange(SHAPE[0]), rtol=1e-12)


def test_err_extension_of_another_shape_is_refused(tmp_path):
    path = tmp_path / "bad_err.fits"
    prim = fits.PrimaryHDU(np.ones(SHAPE, np.float32), header=ir_header())
    err = fits.ImageHDU(np.ones((SHAPE[0], 5, 5), np.float32), name="ERR")
    fits.HDUList([prim, err]).writeto(path)
    with pytest.raises(CubeError, match=r"bad_err\.fits: the ERR extension has axis lengths \[5, 5, 40\] but the "
                                        r"cube \[21, 21, 40\]"):
        read_cube_info(path)


def test_file_without_any_cube_is_refused(tmp_path):
    path = tmp_path / "empty.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.ImageHDU(np.ones((4, 4), np.float32), name="SCI")]).writeto(path)
    with pytest.raises(CubeError, match=r"empty\.fits: no HDU holds a 3-D image .*expected the cube in the primary "
                                        "HDU or in an image extension named SCI"):
        read_cube_info(path)


def test_pixel_solid_angle_against_astropy_wcs_utils_and_closed_form():
    header = ir_header(**{"DATE-OBS": None})
    wcs = WCS(header).celestial
    # reference: astropy.wcs.utils.proj_plane_pixel_area (deg^2), and the closed form (0.1 arcsec)^2
    assert_allclose(pixel_solid_angle(wcs).to_value(u.sr), proj_plane_pixel_area(wcs) * (math.pi / 180) ** 2,
                    rtol=1e-12)
    assert_allclose(pixel_solid_angle(wcs).to_value(u.sr), 0.01 * ARCSEC_SR, rtol=1e-12)
    # a rotated, rectangular pixel (CD matrix): area = |det CD| (FITS WCS paper II), 0.1" x 0.2"
    theta = math.radians(30)
    cd = np.array([[-0.1 * math.cos(theta), 0.2 * math.sin(theta)], [0.1 * math.sin(theta), 0.2 * math.cos(theta)]])
    h = ir_header(CDELT1=None, CDELT2=None, **{"DATE-OBS": None})
    for (i, j), v in np.ndenumerate(cd / 3600):
        h[f"CD{i + 1}_{j + 1}"] = v
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)    # astropy reports its own CD-matrix fix-up
        rotated = WCS(h).celestial
    assert_allclose(pixel_solid_angle(rotated).to_value(u.sr), 0.02 * ARCSEC_SR, rtol=1e-9)
    assert_allclose(pixel_solid_angle(rotated).to_value(u.sr), proj_plane_pixel_area(rotated) * (math.pi / 180) ** 2,
                    rtol=1e-12)


@pytest.mark.parametrize("bunit, per_unit_si", [
    # hand conversions to W m^-2 um^-1 sr^-1 (SI prefixes; 1 erg = 1e-7 J, 1 cm^2 = 1e-4 m^2, 1 A = 1e-4 um)
    ("W/m2/um/sr", 1.0),
    ("erg/s/cm2/Angstrom/sr", 1e-7 / 1e-4 / 1e-4),
    ("erg s-1 cm-2 Angstrom-1 sr-1", 10.0),
])
def test_per_wavelength_units(bunit, per_unit_si):
    lam = np.array([2.5, 4.5]) * u.um
    omega = 0.01 * ARCSEC_SR * u.sr
    factor = flux_density_factor(u.Unit(bunit, format="fits"), omega, lam)
    assert_allclose(factor.to_value(u.W / u.m**2 / u.um / u.Unit(bunit, format="fits")), per_unit_si * omega.value,
                    rtol=1e-12)


def test_mjy_per_sr_against_spectral_density_and_hand_formula():
    lam = np.array([2.0, 3.0, 4.7]) * u.um
    omega = 0.01 * ARCSEC_SR * u.sr
    factor = flux_density_factor(u.MJy / u.sr, omega, lam)
    # hand: F_lambda = F_nu c / lambda^2 (F_nu = 1 MJy/sr x Omega) with scipy.constants
    f_nu = 1e6 * 1e-26 * omega.value                      # W m^-2 Hz^-1
    hand = f_nu * sc.c / (lam.to_value(u.m)) ** 2 * 1e-6  # W m^-2 m^-1 -> W m^-2 um^-1
    assert_allclose(factor.to_value(u.W / u.m**2 / u.um / (u.MJy / u.sr)), hand, rtol=1e-12)
    # astropy's spectral_density equivalency, called directly
    ref = (1 * u.MJy / u.sr * omega).to(u.W / u.m**2 / u.um, equivalencies=u.spectral_density(lam))
    assert_allclose(factor.value, ref.value, rtol=1e-12)


def test_beam_units_are_not_infrared_surface_brightness():
    with pytest.raises(CubeError, match=r"BUNIT = 'Jy / beam' is not a surface brightness"):
        flux_density_factor(u.Jy / u.beam, 1e-12 * u.sr, [3.0] * u.um)


def test_erg_per_angstrom_spelled_with_a(tmp_path):
    # 'A' parses as ampere in the FITS grammar; the upper-case spelling is looked up as angstrom
    path = write_ir(tmp_path / "ergs.fits", np.ones(SHAPE), BUNIT="erg/s/cm2/A/sr")
    assert read_cube_info(path).bunit == u.erg / u.s / u.cm**2 / u.AA / u.sr


def test_uniform_cube_aperture_sums_and_errors(tmp_path):
    value, sigma = 3.0, 0.5
    path = write_ir(tmp_path / "flat.fits", np.full(SHAPE, value), np.full(SHAPE, sigma), BUNIT="W/m2/um/sr")
    info = read_cube_info(path)
    spectra = extract_ir_spectra(info, 10.0, 10.0, [3.0, 6.0])
    omega = 0.01 * ARCSEC_SR
    # closed form: a uniform surface brightness times the circle's area (pi r^2 pixels) times the pixel solid angle
    assert_allclose(spectra.flux.to_value(u.W / u.m**2 / u.um), value * omega * np.pi * np.array([[9.0], [36.0]])
                    * np.ones(SHAPE[0]), rtol=1e-6)
    # sigma = ERR x sqrt(sum w^2): between sqrt(n_full) and sqrt(area) (w in [0, 1])
    s = spectra.sigma.to_value(u.W / u.m**2 / u.um)[:, 0] / (sigma * omega)
    assert np.all(s <= np.sqrt(np.pi * np.array([9.0, 36.0])) + 1e-6)
    assert np.all(s >= np.sqrt(np.pi * np.array([9.0, 36.0])) * 0.9)


def test_monte_carlo_error_matches_the_err_propagation(tmp_path):
    rng = np.random.default_rng(5)
    err = rng.uniform(0.5, 2.0, SHAPE)
    draws = []
    for k in range(3):   # three realisations in three files; pooled over channels for the scatter
        data = rng.normal(0.0, err)
        path = write_ir(tmp_path / f"n{k}.fits", data, err, BUNIT="W/m2/um/sr")
        spectra = extract_ir_spectra(read_cube_info(path), 10.2, 9.7, [4.5])
        draws.append((spectra.flux / spectra.sigma).decompose().value[0])
    z = np.concatenate(draws)                      # 120 standard normal deviates if the propagation is right
    # chi-square: var of N(0,1) estimated from 120 samples has a relative 1-sigma of sqrt(2/119) = 0.13
    assert abs(np.var(z) - 1.0) < 3 * math.sqrt(2 / 119)


def test_negative_errors_are_refused(tmp_path):
    err = np.full(SHAPE, 0.1)
    err[3, 4, 5] = -1.0
    path = write_ir(tmp_path / "negerr.fits", np.ones(SHAPE), err)
    with pytest.raises(CubeError, match=r"negerr\.fits: the ERR extension holds negative values"):
        extract_ir_spectra(read_cube_info(path), 10.0, 10.0, [3.0])


def test_dq_flagged_voxels_are_made_up_for_not_summed(tmp_path):
    # an IFU product with SCI/ERR/DQ: a few interior voxels hold garbage and are flagged DO_NOT_USE (bit 0).
    # Reference: the same cube without the garbage, summed plainly (numpy sums through pipeline's weights).
    from pipeline.coma.image import projected_coma_image
    from pipeline.spectra.ir_spectra import extract_ir_spectra

    coma = projected_coma_image(SHAPE[1:], 10.0, 10.0)
    clean = np.broadcast_to(coma, SHAPE).astype(float)
    dirty = clean.copy()
    dirty[5:9, 9, 11] = 1e6                                  # hot voxels in 4 channels, inside the aperture
    path = write_ir(tmp_path / "dq.fits", dirty, np.full(SHAPE, 0.01))
    dq = np.zeros(SHAPE, dtype=np.int32)
    dq[5:9, 9, 11] = 1
    with fits.open(path, mode="append") as hdul:
        hdul.append(fits.ImageHDU(dq, name="DQ"))
    ref = extract_ir_spectra(read_cube_info(write_ir(tmp_path / "clean.fits", clean, np.full(SHAPE, 0.01))),
                             10.0, 10.0, [4.0])
    info = read_cube_info(path)
    flagged_sum = extract_ir_spectra(info, 10.0, 10.0, [4.0], dq_bad_bits=1, max_masked_share=0.25)
    # the flagged voxels followed the coma: made up to the clean sum (float32 storage: 1e-6)
    assert_allclose(flagged_sum.flux.value, ref.flux.value, rtol=1e-6)
    assert flagged_sum.n_blank[0, 5] == 1 and flagged_sum.masked_share[0, 5] > 0
    assert np.all(np.isfinite(flagged_sum.sigma.value))
    # the error of a channel with a lost voxel grows with 1 / (1 - share) (fewer valid pixels, scaled up)
    assert flagged_sum.sigma.value[0, 5] > ref.sigma.value[0, 5] * 0.99
    # without the DQ bits the garbage enters the sum
    raw = extract_ir_spectra(info, 10.0, 10.0, [4.0])
    assert raw.flux.value[0, 5] > 100 * ref.flux.value[0, 5]
