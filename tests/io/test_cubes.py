"""Tests of pipeline.io.cubes on tiny FITS cubes, against astropy.wcs, spectral_cube and radio_beam."""

import hashlib
import warnings

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.constants import c
from astropy.io import fits
from astropy.tests.helper import assert_quantity_allclose
from astropy.time import Time
from astropy.utils.exceptions import AstropyPendingDeprecationWarning
from astropy.wcs import WCS, FITSFixedWarning
from cubes import SHAPE, write_cube
from numpy.testing import assert_allclose, assert_array_equal

from pipeline.io.cubes import linear_axis, open_data, read_cube_info
from pipeline.io.times import observation_times
from pipeline.errors import CubeError

with warnings.catch_warnings():
    # spectral_cube 0.7 imports a name astropy 8 marks as pending deprecation
    warnings.simplefilter("ignore", AstropyPendingDeprecationWarning)
    from spectral_cube import SpectralCube


def _wcs_frequencies(path, restfrq=None):
    """Channel frequencies from astropy.wcs (the reference reader of the FITS WCS standard)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)  # 'datfix' notes about MJD-OBS
        spec = WCS(fits.getheader(path)).spectral
    coord = spec.pixel_to_world(np.arange(fits.getheader(path)["NAXIS3"]))
    if restfrq is not None:
        return coord.to(u.Hz, doppler_convention="radio", doppler_rest=restfrq)
    return coord.to(u.Hz)


@pytest.mark.parametrize("cards", [
    {},
    {"CUNIT3": "GHz", "CRVAL3": 345.79599, "CDELT3": 0.000122, "CRPIX3": 8.5},
    {"CDELT3": 488.0e3, "CRPIX3": -2.0},
    {"CDELT3": -122.0e3, "PC3_3": 2.0},                       # step = CDELT3 x PC3_3 (FITS WCS paper I)
    {"CDELT1": None, "CDELT2": None, "CDELT3": None,          # a CD matrix instead of CDELTi
     "CD1_1": -0.5 / 3600, "CD2_2": 0.5 / 3600, "CD3_3": -244.0e3},
])
def test_frequencies_match_astropy_wcs_and_spectral_cube(tmp_path, cards):
    path = write_cube(tmp_path / "c.fits", **cards)
    info = read_cube_info(path)
    assert info.shape == SHAPE
    assert_quantity_allclose(info.frequencies, _wcs_frequencies(path), rtol=1e-14)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        cube = SpectralCube.read(path)
    assert_quantity_allclose(info.frequencies, cube.spectral_axis.to(u.Hz), rtol=1e-14)
    assert_quantity_allclose(info.channel_width, np.abs(np.diff(cube.spectral_axis.to(u.Hz)))[0], rtol=1e-10)
    assert info.specsys == "TOPOCENT"
    assert info.bunit == u.Jy / u.beam


def test_velocity_axis_converted_with_radio_convention(tmp_path):
    rest = 230.538e9 * u.Hz
    path = write_cube(tmp_path / "v.fits", CTYPE3="VRAD", CRVAL3=1500.0, CDELT3=-317.5, CUNIT3="m/s",
                      RESTFRQ=rest.value)
    info = read_cube_info(path)
    # astropy.wcs SpectralCoord converted with the radio Doppler convention nu = nu0 (1 - v / c)
    assert_quantity_allclose(info.frequencies, _wcs_frequencies(path, restfrq=rest), rtol=1e-14)
    v = (1500.0 + (np.arange(SHAPE[0]) + 1 - 3.0) * -317.5) * u.m / u.s
    assert_quantity_allclose(info.frequencies, rest * (1 - v / c), rtol=1e-14)


def test_beam_and_pixel_solid_angle(tmp_path):
    path = write_cube(tmp_path / "b.fits", BMAJ=2.2 / 3600, BMIN=1.1 / 3600, BPA=-40.0)
    info = read_cube_info(path)
    beam = radio_beam.Beam(2.2 * u.arcsec, 1.1 * u.arcsec, -40 * u.deg)
    # radio_beam's Gaussian solid angle
    assert_quantity_allclose(info.beam_solid_angle(), beam.sr, rtol=1e-12)
    # radio_beam reads the same header cards
    assert_quantity_allclose(info.beam_solid_angle(), radio_beam.Beam.from_fits_header(fits.getheader(path)).sr,
                             rtol=1e-12)
    assert_quantity_allclose(info.beam_pa, -40 * u.deg)
    # pixel: 0.5 arcsec square (CDELT1/2), a solid angle of 0.25 arcsec^2 (unit conversion by astropy)
    assert_quantity_allclose(info.pixel_scale, 0.5 * u.arcsec, rtol=1e-9)
    assert_quantity_allclose(info.pixel_solid_angle(), (0.25 * u.arcsec**2).to(u.sr), rtol=1e-9)


def test_degenerate_stokes_axis_accepted(tmp_path):
    path = write_cube(tmp_path / "s.fits", stokes=True, seed=5)
    info = read_cube_info(path)
    assert info.shape == SHAPE
    assert_quantity_allclose(info.frequencies, _wcs_frequencies(path), rtol=1e-14)
    with open_data(path) as data:
        assert data.shape == SHAPE
        ref = np.random.default_rng(5).normal(size=SHAPE).astype(np.float32)
        assert_array_equal(data[2:4, 1:3, 0:5], ref[2:4, 1:3, 0:5])


def test_stokes_axis_longer_than_one_rejected(tmp_path):
    path = tmp_path / "s2.fits"
    write_cube(path, stokes=True)
    with fits.open(path) as hdul:
        data = np.concatenate([hdul[0].data, hdul[0].data])
        header = hdul[0].header.copy()
    fits.PrimaryHDU(data=data, header=header).writeto(path, overwrite=True)
    with pytest.raises(CubeError, match=r"4th \(Stokes\) axis of length 1"):
        read_cube_info(path)


def test_open_data_never_writes_the_file(tmp_path):
    # astropy memory-maps read-only files copy-on-write: even a stray assignment stays in memory
    path = write_cube(tmp_path / "r.fits", seed=7)
    before = path.read_bytes()
    with open_data(path) as data:
        data[0, 0, 0] = 1.0e6
    assert path.read_bytes() == before
    with open_data(path) as data:
        assert data[0, 0, 0] == np.random.default_rng(7).normal(size=SHAPE).astype(np.float32)[0, 0, 0]

def test_not_a_fits_file(tmp_path):
    path = tmp_path / "notes.fits"
    path.write_text("this is not FITS\n" * 10)
    with pytest.raises(CubeError, match="notes.fits: not a readable FITS file"):
        read_cube_info(path)
    with pytest.raises(CubeError, match="cube file does not exist"):
        read_cube_info(tmp_path / "missing.fits")


def test_two_dimensional_image(tmp_path):
    path = tmp_path / "img.fits"
    fits.PrimaryHDU(data=np.zeros((5, 6), dtype=np.float32)).writeto(path)
    with pytest.raises(CubeError, match=r"NAXIS = 2 .*expected a cube with two sky axes and one spectral"):
        read_cube_info(path)


@pytest.mark.parametrize("cards, match", [
    ({"CTYPE3": "STOKES", "CUNIT3": None}, "header card CTYPE3 = 'STOKES'; expected a spectral axis"),
    ({"SPECSYS": "HELIOCEN"}, "header card SPECSYS = 'HELIOCEN'; expected one of TOPOCENT"),
    ({"SPECSYS": None}, "header card SPECSYS is missing"),
    ({"CTYPE3": "VRAD", "CUNIT3": "m/s", "CRVAL3": 0.0, "CDELT3": 300.0, "RESTFRQ": None},
     "velocity axis but header card RESTFRQ is missing"),
    ({"BUNIT": None}, "header card BUNIT is missing"),
    ({"BUNIT": "erg/s/cm2"}, "header card BUNIT = 'erg/s/cm2'; expected one of Jy/beam"),
    ({"BMAJ": None, "BMIN": None}, "BUNIT = 'Jy/beam' needs a beam but header cards BMAJ/BMIN are missing"),
    ({"BUNIT": "K", "BMAJ": None}, "BUNIT = 'K' needs a beam"),
    ({"BMAJ": -1.0}, "expected positive sizes"),
    ({"CRVAL3": None}, "header card CRVAL3 is missing"),
    ({"CDELT3": 0.0}, "header card CDELT3 is missing or zero"),
    ({"CUNIT3": "furlong"}, "header card CUNIT3 = 'furlong' is not a unit"),
    ({"CTYPE1": "LINEAR", "CTYPE2": "LINEAR", "CUNIT1": None, "CUNIT2": None},
     "CTYPE1/CTYPE2 do not describe sky coordinates"),
])
def test_header_errors_name_the_card(tmp_path, cards, match):
    path = write_cube(tmp_path / "bad.fits", **cards)
    with pytest.raises(CubeError, match=match):
        read_cube_info(path)


@pytest.mark.parametrize("bunit, unit", [("JY/BEAM", u.Jy / u.beam), ("Jy beam-1", u.Jy / u.beam),
                                         ("Jy/pixel", u.Jy / u.pix), ("MJy/sr", u.MJy / u.sr), ("K", u.K)])
def test_bunit_spellings(tmp_path, bunit, unit):
    info = read_cube_info(write_cube(tmp_path / "u.fits", BUNIT=bunit))
    assert info.bunit == unit


def test_no_beam_needed_for_mjy_per_sr(tmp_path):
    info = read_cube_info(write_cube(tmp_path / "m.fits", BUNIT="MJy/sr", BMAJ=None, BMIN=None, BPA=None))
    assert info.beam_major is None
    with pytest.raises(CubeError, match="no beam"):
        info.beam_solid_angle()


def test_observation_times_of_a_cube_file(tmp_path):
    # the header as read_cube_info gives it (primary cards inherited) goes to pipeline.io.times; its own cases are
    # tested in tests/io/test_times.py. A single exposure: DATE-OBS + EXPTIME 3600 s -> mid = start + 30 min
    info = read_cube_info(write_cube(tmp_path / "t1.fits", EXPTIME=3600.0))
    start, mid, end = observation_times(info.header, info.path)
    assert start.isot == "2024-03-01T10:00:00.000"
    assert_quantity_allclose((mid - start).to(u.s), 1800 * u.s, atol=1e-6 * u.s)
    assert_quantity_allclose((end - start).to(u.s), 3600 * u.s, atol=1e-6 * u.s)

    info = read_cube_info(write_cube(tmp_path / "t2.fits", **{"DATE-END": "2024-03-01T12:30:00", "EXPTIME": None}))
    start, mid, end = observation_times(info.header, info.path)
    assert abs((mid - Time("2024-03-01T11:15:00", scale="utc")).to_value(u.s)) < 1e-6
    assert end.isot == "2024-03-01T12:30:00.000"

    # MJD-OBS with only XPOSURE (on-source time): refused, the mid-time is never guessed
    info = read_cube_info(write_cube(tmp_path / "t3.fits", **{"DATE-OBS": None, "MJD-OBS": 60370.5,
                                                               "EXPTIME": None, "XPOSURE": 600.0}))
    with pytest.raises(CubeError, match=r"t3\.fits: the header gives only MJD-OBS and XPOSURE"):
        observation_times(info.header, info.path)

    start, mid, end = observation_times(info.header, info.path, override="2024-03-02T00:00:00")
    assert start == mid == end
    assert mid.isot == "2024-03-02T00:00:00.000"


@pytest.mark.parametrize("cards, match", [
    ({"DATE-OBS": "first of March"}, "header card DATE-OBS = 'first of March' is not an ISO time"),
    ({"DATE-OBS": None}, "no observation time in the header"),
    ({"DATE-END": "2024-03-01T09:00:00"}, "DATE-END .* precedes DATE-OBS"),
    ({"DATE-END": "later"}, "header card DATE-END = 'later' is not an ISO time"),
])
def test_observation_time_errors(tmp_path, cards, match):
    info = read_cube_info(write_cube(tmp_path / "bad_t.fits", **cards))
    with pytest.raises(CubeError, match=match):
        observation_times(info.header, info.path)


def test_override_time_error(tmp_path):
    info = read_cube_info(write_cube(tmp_path / "o.fits"))
    with pytest.raises(CubeError, match="config 'time' = 'noon' is not a valid ISO time"):
        observation_times(info.header, info.path, override="noon")


def test_input_file_is_not_modified(tmp_path):
    path = write_cube(tmp_path / "ro.fits")
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    info = read_cube_info(path)
    observation_times(info.header, info.path)
    with open_data(path) as data:
        float(np.nansum(data[:, :2, :2]))
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


# --- optical-velocity and wavelength axes (issue 3): against astropy's WCS spectral transformation -------------


@pytest.mark.parametrize("cards", [
    {"CTYPE3": "VOPT", "CRVAL3": -3000.0, "CDELT3": 350.0, "CUNIT3": "m/s"},
    {"CTYPE3": "WAVE", "CRVAL3": 1.3004e-3, "CDELT3": 1.1e-9, "CUNIT3": "m"},
    {"CTYPE3": "VRAD", "CRVAL3": -3.0, "CDELT3": 0.35, "CUNIT3": "km/s"},
])
def test_velocity_and_wavelength_axes_match_astropy(tmp_path, cards):
    path = write_cube(tmp_path / "c.fits", **cards)
    info = read_cube_info(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        spec = WCS(fits.getheader(path)).spectral
    ref = spec.pixel_to_world(np.arange(SHAPE[0]))  # astropy SpectralCoord, converted by astropy
    assert_quantity_allclose(info.frequencies, ref.to(u.Hz, doppler_rest=230.538e9 * u.Hz,
                                                      doppler_convention="optical" if cards["CTYPE3"] == "VOPT"
                                                      else "radio"), rtol=1e-12)


def test_contradictory_unit_card(tmp_path):
    path = write_cube(tmp_path / "c.fits", CTYPE3="FREQ", CUNIT3="km/s")
    with pytest.raises(CubeError, match=r"CTYPE3 = 'FREQ' and CUNIT3 = 'km/s' contradict"):
        read_cube_info(path)


def test_contradictory_rest_frequencies(tmp_path):
    path = write_cube(tmp_path / "c.fits", RESTFREQ=230.0e9)
    with pytest.raises(CubeError, match=r"RESTFRQ = .* and RESTFREQ = .* contradict"):
        read_cube_info(path)


# ----------------------------------------------------------------------------- linear axes
@pytest.mark.parametrize("cards", [
    {"CRVAL1": -3.5, "CDELT1": 0.25, "CRPIX1": 1.0},
    {"CRVAL1": 2.6, "CDELT1": 0.002, "CRPIX1": 17.5, "PC1_1": -1.5},   # step = CDELT1 x PC1_1
    {"CRVAL1": 100, "CD1_1": -3, "CRPIX1": 4},                        # integer cards, a CD matrix
])
def test_linear_axis_matches_astropy_wcs(cards):
    header = fits.Header({"NAXIS": 1, "NAXIS1": 40, **cards})  # a plain linear axis (no CTYPE, no unit)
    expected = WCS(header).pixel_to_world_values(np.arange(40))  # astropy.wcs: FITS WCS paper I
    assert_allclose(linear_axis(header, 1), expected, rtol=1e-14, atol=1e-12)
    assert linear_axis(header, 1, 5).shape == (5,)


def test_linear_axis_is_the_hand_written_formula():
    # what the stages wrote out by hand, bit for bit
    h = fits.Header({"NAXIS1": 33, "CRVAL1": -4.8, "CDELT1": 0.3, "CRPIX1": 1.0})
    n = h["NAXIS1"]
    assert_array_equal(linear_axis(h, 1), h["CRVAL1"] + (np.arange(n) + 1 - h["CRPIX1"]) * h["CDELT1"])


@pytest.mark.parametrize("cards, match", [
    ({"CDELT2": 1.0}, "x.fits: header card CRVAL2 is missing; expected the coordinate of the reference pixel of axis 2"),
    ({"CRVAL2": 1.0, "CDELT2": 0.0}, "header card CDELT2 is missing or zero; expected the pixel step of axis 2"),
    ({"CRVAL2": 1.0}, "header card CDELT2 is missing or zero"),
    ({"CRVAL2": "one", "CDELT2": 1.0}, "header card CRVAL2 = 'one' is not a number"),
    ({"CRVAL2": 1.0, "CDELT2": 1.0}, "header card NAXIS2 is missing; expected the length of axis 2"),
])
def test_linear_axis_errors_name_the_card(cards, match):
    with pytest.raises(CubeError, match=match):
        linear_axis(fits.Header(cards), 2, path="x.fits")


# ---- beams as products carry them


def _channel_beams(n: int) -> np.ndarray:
    """Beams growing across the band, as a wide-band cube's do (FWHM proportional to wavelength)."""
    major = np.linspace(2.0, 2.4, n)
    return np.column_stack([major, 0.75 * major, np.full(n, 30.0)])


def test_a_per_channel_beam_table_is_read(tmp_path):
    beams = _channel_beams(SHAPE[0])
    info = read_cube_info(write_cube(tmp_path / "b.fits", beams_arcsec=beams))
    assert info.beam_source == "BEAMS table (per channel)" and info.channel_beams is not None
    assert_allclose(info.channel_beams[0].to_value(u.arcsec), beams[:, 0], rtol=1e-6)    # float32 table column
    # the Gaussian beam solid angle pi/(4 ln 2) B_maj B_min per channel (closed form)
    expected = np.pi / (4 * np.log(2)) * (beams[:, 0] * beams[:, 1]) * (u.arcsec**2).to(u.sr)
    assert_allclose(info.channel_beam_solid_angles().to_value(u.sr), expected, rtol=1e-6)
    assert info.beam_major.to_value(u.arcsec) == pytest.approx(np.median(beams[:, 0]), rel=1e-6)


def test_a_cube_without_a_beam_takes_the_configured_one(tmp_path):
    path = write_cube(tmp_path / "nb.fits", BMAJ=None, BMIN=None, BPA=None)
    with pytest.raises(CubeError, match=r"needs a beam .* or set the cube's beam_arcsec"):
        read_cube_info(path)
    info = read_cube_info(path, beam_arcsec=(1.2, 0.9, 65.0))
    assert info.beam_source == "config beam_arcsec"
    assert info.beam_major.to_value(u.arcsec) == pytest.approx(1.2) and info.beam_pa.to_value(u.deg) == 65.0
    # a header that has a beam does not take a second one from the config
    with pytest.raises(CubeError, match="only one of them"):
        read_cube_info(write_cube(tmp_path / "wb.fits"), beam_arcsec=(1.2, 0.9, 65.0))


def test_flux_conversion_per_channel_beam():
    # Jy/beam -> Jy per pixel is pixel area / beam area, channel by channel (closed form)
    from pipeline.spectra.apertures import flux_conversion
    areas = np.array([1e-10, 2e-10, 4e-10]) * u.sr
    factor = flux_conversion(u.Jy / u.beam, 1e-12 * u.sr, areas, np.array([230e9, 230.1e9, 230.2e9]) * u.Hz)
    assert_allclose(factor, [1e-2, 5e-3, 2.5e-3], rtol=1e-12)


def test_the_comoving_cut_keeps_each_channels_beam(tmp_path):
    # a sub-cube keeps the beams of the channels it holds, and its file carries them to the extraction
    from astropy.table import QTable
    from pipeline.catalogue import load_catalogue
    from pipeline.geometry.comoving import cut_subcube
    from pipeline.io.products import SubCube

    shape = (120, 24, 24)
    beams = _channel_beams(shape[0])
    info = read_cube_info(write_cube(tmp_path / "c.fits", shape=shape, beams_arcsec=beams, SPECSYS="SOURCE",
                                     CRVAL3=230.538e9, CRPIX3=60.0, CDELT3=-244.0e3))
    geo = QTable({"x_pix": [11.5], "y_pix": [11.5], "delta": [1.0] * u.au, "r_h": [1.2] * u.au,
                  "delta_dot": [0.0] * u.km / u.s, "cube_id": ["c"], "epoch": ["e"]})[0]
    line = load_catalogue().get_line("CO_230538")
    sub = cut_subcube(info, geo, line, 30 * u.km / u.s, 1.5 * u.km / u.s, 8.0)
    assert sub.meta.covered and sub.beams is not None
    c0 = sub.meta.first_channel
    assert_allclose(sub.beams[0].to_value(u.arcsec), beams[c0:c0 + sub.data.shape[0], 0], rtol=1e-6)
    sub.to_fits().writeto(tmp_path / "sub.fits")
    back = SubCube.from_fits(tmp_path / "sub.fits")
    assert_allclose(back.info().channel_beam_solid_angles().to_value(u.sr),
                    sub.info().channel_beam_solid_angles().to_value(u.sr), rtol=1e-6)


def test_a_space_ifu_product_keeps_its_time_cards_in_the_primary(tmp_path):
    # empty primary with DATE-OBS (date only) + TIME-OBS, DATE-BEG/END, EXPSTART/EXPMID/EXPEND (MJD) and TIMESYS;
    # the cube in SCI: the extension inherits them, and the mid-time is EXPMID (MJD 60370.5 = 2024-03-01T12:00 UTC,
    # astropy's MJD definition)
    with fits.open(write_cube(tmp_path / "src.fits")) as hdul:
        header, data = hdul[0].header.copy(), hdul[0].data.copy()
    for key in ("DATE-OBS", "DATE-END", "EXPTIME", "MJD-OBS"):
        header.remove(key, ignore_missing=True)
    primary = fits.PrimaryHDU()
    primary.header.update({"DATE-OBS": "2024-03-01", "TIME-OBS": "11:30:00.000", "DATE-BEG": "2024-03-01T11:30:00.000",
                           "DATE-END": "2024-03-01T12:30:00.000", "EXPSTART": 60370.47916666667,
                           "EXPMID": 60370.5, "EXPEND": 60370.52083333333, "TIMESYS": "UTC"})
    fits.HDUList([primary, fits.ImageHDU(data, header=header, name="SCI")]).writeto(tmp_path / "ifu.fits")
    info = read_cube_info(tmp_path / "ifu.fits")
    times = observation_times(info.header, info.path)
    assert abs((times.mid - Time("2024-03-01T12:00:00", scale="utc")).to_value(u.s)) < 1e-3
    assert "EXPMID" in times.source
