"""Tests of pipeline.spectra.apertures against photutils, radio_beam and astropy unit conversions."""

import itertools

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.constants import c, k_B
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from photutils.aperture import CircularAperture, aperture_photometry

from pipeline.spectra.apertures import (aperture_spectra, aperture_weights, flux_conversion, offsource_positions,
                                radius_in_pixels)
from pipeline.errors import CoverageError, CubeError

SHAPE = (40, 48)  # (n_y, n_x)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_single_channel_sums_match_photutils_exact(seed):
    # External reference: photutils' own aperture_photometry(method='exact') on the same image.
    rng = np.random.default_rng(seed)
    n_chan = 5
    cube = rng.normal(size=(n_chan, *SHAPE))
    centres = [(rng.uniform(12, 35), rng.uniform(12, 27), rng.uniform(1.3, 9.0)) for _ in range(3)]
    weights = [aperture_weights(SHAPE, x, y, r) for x, y, r in centres]
    # chunk=2 forces several channel chunks, including a short last one
    sums, n_blank = aperture_spectra(cube, weights, chunk=2)
    assert sums.shape == (3, n_chan)
    assert np.all(n_blank == 0)
    for (i, (x, y, r)), ch in itertools.product(enumerate(centres), range(n_chan)):
        ref = aperture_photometry(cube[ch], CircularAperture((x, y), r=r), method="exact")["aperture_sum"][0]
        assert_allclose(sums[i, ch], ref, rtol=0, atol=1e-10)
    # area = pi r^2 exactly for an aperture fully inside (closed form)
    for w, (_, _, r) in zip(weights, centres):
        assert_allclose(w.area, np.pi * r**2, rtol=1e-12)


def test_nan_inside_aperture_blanks_the_channel_and_is_counted():
    rng = np.random.default_rng(3)
    cube = rng.normal(size=(4, *SHAPE))
    x, y, r = 20.2, 18.7, 5.5
    cube[1, 19, 20] = np.nan          # inside the circle
    cube[2, 18, 21] = np.nan
    cube[2, 20, 19] = np.nan
    w = aperture_weights(SHAPE, x, y, r)
    sums, n_blank = aperture_spectra(cube, [w])
    # photutils itself returns NaN for the same channel (the external behaviour mirrored)
    ref = aperture_photometry(cube[1], CircularAperture((x, y), r=r), method="exact")["aperture_sum"][0]
    assert np.isnan(ref)
    assert np.isnan(sums[0, 1]) and np.isnan(sums[0, 2])
    assert_allclose(n_blank[0], [0, 1, 2, 0])
    for ch in (0, 3):
        ref = aperture_photometry(cube[ch], CircularAperture((x, y), r=r), method="exact")["aperture_sum"][0]
        assert_allclose(sums[0, ch], ref, atol=1e-10)


def test_nan_in_bounding_box_but_outside_circle_is_ignored():
    # A blank pixel of zero weight (a corner of the bounding box outside the circle) must not
    # blank the channel; photutils' exact sum over the same image with that pixel set to 0 is the
    # reference (its weight is zero, so the value cannot matter).
    rng = np.random.default_rng(4)
    cube = rng.normal(size=(2, *SHAPE))
    x, y, r = 20.0, 18.0, 4.0
    w = aperture_weights(SHAPE, x, y, r)
    assert w.weights[0, 0] == 0.0
    cube[0, w.ys.start, w.xs.start] = np.nan
    sums, n_blank = aperture_spectra(cube, [w])
    ref_img = np.where(np.isnan(cube[0]), 0.0, cube[0])
    ref = aperture_photometry(ref_img, CircularAperture((x, y), r=r), method="exact")["aperture_sum"][0]
    assert n_blank[0, 0] == 0
    assert_allclose(sums[0, 0], ref, atol=1e-10)


@pytest.mark.parametrize("x, y, r", [(3.0, 20.0, 4.0), (20.0, 37.0, 3.5), (46.0, 20.0, 2.0), (20.0, 20.0, 30.0)])
def test_aperture_outside_image_raises(x, y, r):
    with pytest.raises(CoverageError, match=r"test aperture: a circle of radius .* does not fit inside the 48 x 40"):
        aperture_weights(SHAPE, x, y, r, what="test aperture")


def test_nonpositive_radius_raises():
    with pytest.raises(CoverageError, match="radius must be positive"):
        aperture_weights(SHAPE, 20.0, 20.0, 0.0)


def test_aperture_fits_is_what_aperture_weights_accepts():
    # the cheap test (injection ring positions) decides as the weights do: the circle inside the pixels' outer
    # edges (photutils' exact overlap then covers the whole circle: weights sum to pi r^2, a closed form)
    from pipeline.spectra.apertures import aperture_fits

    rng = np.random.default_rng(5)
    for x, y, r in zip(rng.uniform(-3, 50, 300), rng.uniform(-3, 43, 300), rng.uniform(-1, 12, 300)):
        try:
            weights = aperture_weights(SHAPE, x, y, r)
        except CoverageError:
            assert not aperture_fits(SHAPE, x, y, r)
        else:
            assert aperture_fits(SHAPE, x, y, r)
            assert weights.area == pytest.approx(np.pi * r**2, rel=1e-9)
    assert aperture_fits(SHAPE, 23.5, 19.5, 20.0) and not aperture_fits(SHAPE, 23.5, 19.5, 20.0001)


FREQS = np.array([230.0, 230.5, 345.8]) * u.GHz
PIXEL = (0.3 * u.arcsec) ** 2
BMAJ, BMIN, BPA = 2.0 * u.arcsec, 1.5 * u.arcsec, 30 * u.deg


def test_flux_conversion_jy_per_beam_against_radio_beam():
    # radio_beam's Gaussian beam solid angle pi/(4 ln 2) BMAJ BMIN
    beam = radio_beam.Beam(BMAJ, BMIN, BPA)
    f = flux_conversion(u.Jy / u.beam, PIXEL, beam.sr, FREQS)
    assert_allclose(f, np.full(3, (PIXEL / beam.sr).to_value(u.dimensionless_unscaled)), rtol=1e-12)


def test_flux_conversion_kelvin_against_astropy_and_radio_beam():
    beam = radio_beam.Beam(BMAJ, BMIN, BPA)
    f = flux_conversion(u.K, PIXEL, beam.sr, FREQS)
    ratio = (PIXEL / beam.sr).to_value(u.dimensionless_unscaled)
    # astropy's brightness_temperature equivalency (Rayleigh-Jeans) with the beam area
    ref = [(1 * u.K).to_value(u.Jy / u.beam, equivalencies=u.brightness_temperature(nu, beam_area=beam.sr))
           for nu in FREQS]
    assert_allclose(f, np.array(ref) * ratio, rtol=1e-10)
    # radio_beam's own Jy/beam <-> K equivalency
    ref_rb = [(1 * u.K).to_value(u.Jy / u.beam, equivalencies=beam.jtok_equiv(nu)) for nu in FREQS]
    assert_allclose(f, np.array(ref_rb) * ratio, rtol=1e-10)
    # closed form (Rayleigh-Jeans): S = 2 k nu^2 T Omega / c^2 (astropy constants)
    rj = (2 * k_B * FREQS**2 * (1 * u.K) * beam.sr / (c**2 * u.sr)).to_value(u.Jy)
    assert_allclose(f, rj * ratio, rtol=1e-10)


def test_flux_conversion_mjy_per_sr_and_jy_per_pixel():
    f = flux_conversion(u.MJy / u.sr, PIXEL, None, FREQS)
    # astropy unit conversion: 1 MJy/sr times the pixel solid angle, in Jy
    assert_allclose(f, (1 * u.MJy / u.sr * PIXEL.to(u.sr)).to_value(u.Jy), rtol=1e-12)
    assert_allclose(f, 1e6 * PIXEL.to_value(u.sr), rtol=1e-12)  # closed form
    assert_allclose(flux_conversion(u.Jy / u.pix, PIXEL, None, FREQS), np.ones(3))


def test_flux_conversion_errors():
    with pytest.raises(CubeError, match="needs a beam"):
        flux_conversion(u.Jy / u.beam, PIXEL, None, FREQS)
    with pytest.raises(CubeError, match="is not one of Jy/beam"):
        flux_conversion(u.W / u.m**2, PIXEL, 1e-10 * u.sr, FREQS)


def test_radius_in_pixels_km_and_arcsec():
    delta = 0.8 * u.au
    scale = 0.25 * u.arcsec
    # small angle theta = R / Delta (astropy units), then divided by the pixel scale
    expected = ((3000 * u.km / delta.to(u.km)) * u.rad).to_value(u.arcsec) / 0.25
    assert_allclose(radius_in_pixels(3000 * u.km, delta, scale), expected, rtol=1e-12)
    # Cross-check with the exact arctan at this tiny angle (agrees to ~1e-11)
    exact = np.degrees(np.arctan((3000 * u.km / delta).to_value(u.dimensionless_unscaled))) * 3600 / 0.25
    assert_allclose(radius_in_pixels(3000 * u.km, delta, scale), exact, rtol=1e-9)
    assert_allclose(radius_in_pixels(2 * u.arcsec, delta, scale), 8.0, rtol=1e-12)
    assert_allclose(radius_in_pixels(1 * u.arcmin, delta, scale), 240.0, rtol=1e-12)
    with pytest.raises(CoverageError, match="neither a length nor an angle"):
        radius_in_pixels(3 * u.s, delta, scale)


@pytest.mark.parametrize("r, d", [(3.0, 10.0), (4.5, 9.0), (2.0, 25.0)])
def test_offsource_positions_inside_and_disjoint(r, d):
    shape = (60, 64)
    x, y = 30.0, 28.0
    pos = offsource_positions(shape, x, y, r, d)
    assert len(pos) >= 2                             # at least one pair for the disjointness check below
    # kissing bound: n equal circles of radius r with centres on a circle of radius d are disjoint
    # iff 2 d sin(pi/n) >= 2 r, so at most floor(pi / arcsin(r/d)) fit (elementary geometry)
    assert len(pos) <= int(np.floor(np.pi / np.arcsin(r / d)))
    for px, py in pos:
        assert_allclose(np.hypot(px - x, py - y), d, rtol=1e-12)
        aperture_weights(shape, px, py, r)  # raises if not inside the image
    for (ax, ay), (bx, by) in itertools.combinations(pos, 2):
        assert np.hypot(ax - bx, ay - by) >= 2 * r - 1e-9
    if d >= 2 * r:  # none overlaps the on-source aperture either
        assert all(np.hypot(px - x, py - y) >= 2 * r - 1e-9 for px, py in pos)
    # overlap weights of the union never exceed 1 (independent check with photutils masks)
    total = np.zeros(shape)
    for px, py in pos:
        total += CircularAperture((px, py), r=r).to_mask(method="exact").to_image(shape)
    assert total.max() <= 1 + 1e-9


def test_offsource_positions_drops_apertures_off_the_image():
    shape = (30, 30)
    pos = offsource_positions(shape, 5.0, 15.0, 3.0, 10.0)   # the western half falls off the image
    full = offsource_positions((100, 100), 50.0, 50.0, 3.0, 10.0)
    assert 0 < len(pos) < len(full)
    for px, py in pos:
        assert px - 3.0 >= -0.5 and px + 3.0 <= 29.5 and py - 3.0 >= -0.5 and py + 3.0 <= 29.5
    assert offsource_positions(shape, 15.0, 15.0, 3.0, 2.0) == []   # distance inside the radius


def test_radius_in_pixels_returns_float_for_quantity_input():
    value = radius_in_pixels(1000 * u.km, 1.0 * u.au, 0.5 * u.arcsec)
    assert isinstance(value, float)
    assert_quantity_allclose(value * 0.5 * u.arcsec, (1000 * u.km / (1 * u.au)).decompose() * u.rad, rtol=1e-12)
