"""Tests of pipeline.coma.response: flux per unit production rate and the window's capture.

Checks: the response is the product of the flux per molecule and the Haser
aperture count (pipeline.coma.haser is tested in test_haser.py); its scaling with the
observer distance, from the inverse-square law and the small-aperture Haser limit
N = pi Q rho / (2 v) (Haser 1957); the captured fraction against the total
probability, and the Hanning response against the algebraic identity
sum (p * k) w = sum p (w * k) for a symmetric kernel k.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy import stats

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.haser import convolved_aperture_count, outflow_speed_law, scale_length
from pipeline.coma.line_profile import channel_fractions, thermal_dispersion
from pipeline.coma.response import (SPECTRAL_RESPONSES, ComaModel, line_response, outflow_speed, scale_lengths,
                                    window_capture)
from pipeline.errors import CatalogueError, ConfigError

CAT = load_catalogue()
CO = CAT.get_species("CO")
CO21 = CAT.get_line("CO_230538")
HCN = CAT.get_species("HCN")
HCN32 = CAT.get_line("HCN_265886")
RESPONSE_UNIT = u.Jy * u.km / u.s * u.s


# ----------------------------------------------------------------------------- outflow
def test_outflow_speed():
    # the law 0.85 (r_h / au)^-0.5 km/s (as documented in pipeline.coma.haser) or a fixed speed
    assert_quantity_allclose(outflow_speed(ComaModel(), 4.0 * u.au), 0.425 * u.km / u.s, rtol=1e-12)
    assert_quantity_allclose(outflow_speed(ComaModel(outflow=0.6), 4.0 * u.au), 0.6 * u.km / u.s)
    assert_quantity_allclose(outflow_speed(ComaModel(outflow="0.6"), 1 * u.au), 0.6 * u.km / u.s)


# ----------------------------------------------------------------------------- scale lengths
def test_scale_lengths_of_a_parent_and_a_daughter():
    # the closed form L = v (r_h / 1 au)^2 / beta_1au (Haser 1957), with each species' own rate
    v, r_h = 0.7 * u.km / u.s, 1.3 * u.au
    model = ComaModel(solar_activity="active")

    def closed_form(species):
        return 0.7 * 1.3**2 / species.photo_active.to_value(1 / u.s) * u.km

    length, daughter = scale_lengths(HCN, None, model, r_h, v)
    assert daughter is None
    assert_quantity_allclose(length, closed_form(HCN), rtol=1e-14)
    cs, cs2 = CAT.get_species("CS"), CAT.get_species("CS2")
    length, daughter = scale_lengths(cs, cs2, model, r_h, v)  # (the parent's, the daughter's own)
    assert_quantity_allclose(length, closed_form(cs2), rtol=1e-14)
    assert_quantity_allclose(daughter, closed_form(cs), rtol=1e-14)


def test_scale_lengths_need_the_right_parent():
    model, r_h, v = ComaModel(), 1.3 * u.au, 0.7 * u.km / u.s
    with pytest.raises(CatalogueError, match="'CS' is a daughter of 'CS2'; 'parent' must be that species, found None"):
        scale_lengths(CAT.get_species("CS"), None, model, r_h, v)
    with pytest.raises(CatalogueError, match="found 'HCN'"):
        scale_lengths(CAT.get_species("CS"), HCN, model, r_h, v)
    with pytest.raises(CatalogueError, match="'CO' is a parent molecule in the catalogue; 'parent' must be None"):
        scale_lengths(CO, HCN, model, r_h, v)


# ----------------------------------------------------------------------------- line response
def test_line_response_is_flux_times_count():
    # R = [int S dv per molecule] x N_ap(Q = 1/s): each factor from its own module
    t_kin = [10.0, 40.0, 80.0] * u.K
    radii = [300.0, 1000.0, 3000.0] * u.km
    r_h, delta, beam = 1.3 * u.au, 0.9 * u.au, 800 * u.km
    model = ComaModel(outflow="law", solar_activity="active")
    got = line_response(HCN32, HCN, t_kin, radii, r_h, delta, beam, model)
    assert got.shape == (3, 3)
    assert got.unit == RESPONSE_UNIT
    v = outflow_speed_law(r_h)
    length = scale_length(v, HCN.photo_active, r_h)
    count = convolved_aperture_count(radii, beam, 1 / u.s, v, length)
    per_molecule = flux_per_molecule(HCN32, HCN, t_kin, delta)
    expected = per_molecule[:, None] * count[None, :] * u.s
    assert_quantity_allclose(got, expected, rtol=1e-12)


def test_line_response_scalar_inputs():
    got = line_response(CO21, CO, 20 * u.K, 1000 * u.km, 1.5 * u.au, 1.0 * u.au, 0 * u.km,
                        ComaModel(outflow=0.7))
    assert got.shape == (1, 1)
    assert np.all(got > 0 * RESPONSE_UNIT)


def test_response_fixed_physical_aperture_scales_as_inverse_square():
    # fixed aperture and beam in km: the molecule count does not depend on delta, the flux per
    # molecule goes as delta^-2 (inverse-square law), so R ~ delta^-2 exactly
    t_kin, radii, beam = [20.0, 40.0] * u.K, [200.0, 1000.0] * u.km, 500 * u.km
    model, r_h = ComaModel(outflow=0.8), 1.0 * u.au
    deltas = [0.25, 0.5, 1.0, 2.0] * u.au
    resp = [line_response(CO21, CO, t_kin, radii, r_h, d, beam, model) for d in deltas]
    for d, r in zip(deltas, resp):
        assert_allclose((r / resp[0]).decompose().value, (deltas[0] / d).decompose().value ** 2, rtol=1e-12)


def test_response_fixed_angular_aperture_scales_as_inverse_delta():
    # fixed angular aperture and beam (radius in km ~ delta) with L >> aperture: the Haser
    # small-aperture count N = pi Q rho / (2 v) (Haser 1957) grows as delta, the flux per molecule
    # falls as delta^-2, so R ~ delta^-1.  The count's next term is of relative size
    # ~ (rho/L) ln(L/rho) ~ 1e-3 here, hence the tolerance.
    model, r_h = ComaModel(outflow=0.8), 1.0 * u.au
    v = 0.8 * u.km / u.s
    length = scale_length(v, CO.photo_quiet, r_h)  # ~1e6 km for CO
    theta_ap, theta_beam = 1.0 * u.arcsec, 0.5 * u.arcsec
    deltas = [0.1, 0.2, 0.4] * u.au
    resp = []
    for d in deltas:
        rho = (theta_ap.to_value(u.rad) * d).to(u.km)
        beam = (theta_beam.to_value(u.rad) * d).to(u.km)
        assert rho / length < 3e-4
        resp.append(line_response(CO21, CO, 30 * u.K, rho, r_h, d, beam, model)[0, 0])
    for d, r in zip(deltas, resp):
        assert_allclose((r / resp[0]).decompose().value, (deltas[0] / d).decompose().value, rtol=2e-3)
    # and the unconvolved small-aperture limit itself: R = F_1 pi rho / (2 v)
    d = deltas[0]
    rho = (theta_ap.to_value(u.rad) * d).to(u.km)
    r0 = line_response(CO21, CO, 30 * u.K, rho, r_h, d, 0 * u.km, model)[0, 0]
    haser_limit = flux_per_molecule(CO21, CO, 30 * u.K, d) * (np.pi * rho / (2 * v))  # per unit Q
    assert_quantity_allclose(r0, haser_limit, rtol=2e-3)


# ----------------------------------------------------------------------------- window capture
VELOCITY = np.arange(-20.0, 20.0, 0.05)


@pytest.mark.parametrize("response", ["none", "hanning"])
def test_wide_window_captures_everything(response):
    # the profile integrates to 1 (total probability); a symmetric unit-sum kernel keeps it
    weights = np.ones_like(VELOCITY)
    got = window_capture(CO, [10.0, 40.0, 80.0] * u.K, VELOCITY, weights, 0.8 * u.km / u.s, response)
    assert got.shape == (3,)
    assert_allclose(got, 1.0, atol=1e-10)


@pytest.mark.parametrize("half_width, direction", [(0.68, -1), (0.3, +1)])
def test_hanning_against_narrow_window(half_width, direction):
    # Hanning smoothing [1/4, 1/2, 1/4] adds a quarter of the discrete second difference, so for a
    # window of channels a..b: sum_window (p * k) - sum_window p = [(p_(a-1) - p_a) + (p_(b+1) - p_b)] / 4.
    # A window just containing the line (edges past the horns at +-v) loses flux to the smoothing;
    # one inside the arcsine's central dip (profile rising outwards) gains flux.
    weights = (np.abs(VELOCITY) < half_width).astype(float)
    t_kin, v_out = [10.0, 40.0] * u.K, 0.6 * u.km / u.s
    plain = window_capture(HCN, t_kin, VELOCITY, weights, v_out, "none")
    smooth = window_capture(HCN, t_kin, VELOCITY, weights, v_out, "hanning")
    assert np.all(np.sign(smooth - plain) == direction)
    inside = np.flatnonzero(weights)
    a, b = inside[0], inside[-1]
    for i, sig in enumerate(thermal_dispersion(t_kin, HCN.mass).to_value(u.km / u.s)):
        p = channel_fractions(VELOCITY, 0.6, sig)
        assert_allclose(smooth[i] - plain[i], 0.25 * ((p[a - 1] - p[a]) + (p[b + 1] - p[b])),
                        rtol=1e-9, atol=1e-15)
    # symmetric kernel k: sum_i (p * k)_i w_i = sum_i p_i (w * k)_i (adjointness of convolution)
    kernel = SPECTRAL_RESPONSES["hanning"]
    w_smoothed = np.convolve(weights, kernel, mode="same")
    same = window_capture(HCN, t_kin, VELOCITY, w_smoothed, v_out, "none")
    assert_allclose(smooth, same, rtol=1e-12)


def test_hanning_narrow_window_on_peaked_line():
    # a line dominated by thermal motion (v_out -> 0: a Gaussian, peaked at the centre): a window of
    # three channels captures less after smoothing; Gaussian channel sums from scipy.stats.norm
    weights = (np.abs(VELOCITY) < 0.06).astype(float)
    t_kin = 40 * u.K
    sig = thermal_dispersion(t_kin, CO.mass).to_value(u.km / u.s)
    plain = window_capture(CO, t_kin, VELOCITY, weights, 1e-9 * u.km / u.s, "none")
    smooth = window_capture(CO, t_kin, VELOCITY, weights, 1e-9 * u.km / u.s, "hanning")
    assert smooth[0] < plain[0]
    edges = np.array([-0.075, 0.075])  # channels centred on -0.05, 0, 0.05
    assert_allclose(plain, stats.norm.cdf(edges[1], scale=sig) - stats.norm.cdf(edges[0], scale=sig),
                    rtol=1e-9)


def test_window_capture_none_matches_channel_sum():
    # with no spectral response the capture is the weighted sum of the channel probabilities
    # (closed-form arcsine law when the thermal width is negligible is tested in test_line_profile)
    weights = np.where(np.abs(VELOCITY) < 1.0, 1.0, 0.0)
    t_kin, v_out = 25 * u.K, 0.8 * u.km / u.s
    sig = thermal_dispersion(t_kin, CO.mass).to_value(u.km / u.s)
    expected = np.sum(channel_fractions(VELOCITY, 0.8, sig) * weights)
    assert_allclose(window_capture(CO, t_kin, VELOCITY, weights, v_out, "none"), [expected], rtol=1e-12)


def test_window_capture_unknown_response():
    with pytest.raises(ConfigError, match="spectral_response must be one of none, hanning, found 'boxcar'"):
        window_capture(CO, 20 * u.K, VELOCITY, np.ones_like(VELOCITY), 0.8 * u.km / u.s, "boxcar")
