"""Model images kept between calls, and the channel response applied to a separable model cube."""

import astropy.units as u
import numpy as np
import pytest

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.image import _molecules_image, aperture_count_on_grid, coma_molecules_image, line_cube_from_map
from pipeline.coma.line_profile import channel_fractions
from pipeline.coma.response import ComaModel


def test_kept_image_is_read_only_and_the_same_as_a_fresh_one():
    args = ((24, 20), 10.3, 11.7, 150.0, 0.8 * u.km / u.s, 1.2e5 * u.km)
    kept = coma_molecules_image(*args)
    with pytest.raises(ValueError):
        kept[0, 0] = 1.0                      # shared between callers: never changed in place
    _molecules_image.cache_clear()
    fresh = coma_molecules_image(*args)
    assert fresh is not kept
    np.testing.assert_array_equal(fresh, kept)
    # the same coma asked for in other units is the same image (keyed by value, not by unit)
    np.testing.assert_array_equal(coma_molecules_image((24, 20), 10.3, 11.7, 150.0, 800 * u.m / u.s,
                                                       1.2e8 * u.m), kept)


def test_aperture_counts_are_a_copy():
    counts = aperture_count_on_grid((30, 30), 15.0, 15.0, [3.0, 6.0], 200.0, (3.0, 2.0, 30.0), 0.8 * u.km / u.s,
                                    1e5 * u.km)
    counts[0] = -1.0
    again = aperture_count_on_grid((30, 30), 15.0, 15.0, [3.0, 6.0], 200.0, (3.0, 2.0, 30.0), 0.8 * u.km / u.s,
                                   1e5 * u.km)
    assert again[0] > 0 and again[1] > again[0]


def test_channel_response_on_the_profile_equals_it_on_the_cube():
    # the Hanning response [1/4, 1/2, 1/4] along the spectral axis, applied by numpy's convolution to every pixel
    # of the full cube (edges reflected), is what the separable model gets by smoothing its profile alone
    species = load_catalogue().get_species("HCN")
    vel = np.linspace(-6, 6, 121)
    line_map = np.random.default_rng(3).random((5, 4))
    model = ComaModel()
    raw = line_cube_from_map(line_map, vel, species, 40 * u.K, 1.2 * u.au, model, v_centre=0.7,
                             spectral_response=None)
    padded = np.concatenate([raw[:1], raw, raw[-1:]], axis=0)
    reference = np.apply_along_axis(lambda s: np.convolve(s, [0.25, 0.5, 0.25], mode="valid"), 0, padded)
    smoothed = line_cube_from_map(line_map, vel, species, 40 * u.K, 1.2 * u.au, model, v_centre=0.7,
                                  spectral_response="hanning")
    np.testing.assert_allclose(smoothed, reference, rtol=1e-13, atol=1e-18)


def test_channels_far_from_the_line_hold_nothing_and_the_rest_hold_it_all():
    # arcsine law convolved with a Gaussian: the channel fractions of a band wide enough sum to 1 (closed form),
    # and a channel beyond v + 8 sigma holds < Phi(-8) ~ 6e-16 of the line, given as exactly 0
    vel = np.arange(-20, 20.001, 0.05)
    frac = channel_fractions(vel, 0.8, 0.12)
    assert np.sum(frac) == pytest.approx(1.0, abs=1e-12)
    assert np.all(frac[np.abs(vel) > 0.8 + 8 * 0.12 + 0.05] == 0.0)
    assert np.all(frac[np.abs(vel) < 0.8] > 0)


@pytest.mark.parametrize("shape,beam", [((40, 50), (3.0, 2.0, 30.0)), ((7, 9), (12.0, 5.0, -10.0)),
                                        ((33, 65), (4.0, 4.0, 0.0))])
def test_beam_convolution_matches_scipy(shape, beam):
    # reference library: scipy.signal.fftconvolve(mode='same'), also when the kernel is larger than the image
    from scipy.signal import fftconvolve

    from pipeline.coma.image import _convolved, beam_kernel

    image = np.random.default_rng(5).random(shape)
    kernel = beam_kernel(*beam)
    np.testing.assert_allclose(_convolved(image, kernel), fftconvolve(image, kernel, mode="same"), rtol=0,
                               atol=1e-14 * image.sum())
