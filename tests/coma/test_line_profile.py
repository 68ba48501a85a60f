"""Tests of pipeline.coma.line_profile: the arcsine outflow profile broadened by thermal motion.

Every check compares with something outside the module: scipy.stats' arcsine and
normal distributions (the two limits) and scipy.integrate.quad of the arcsine density
convolved with a Gaussian (the general case).  The thermal width is tested in test_thermal.py.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, stats

from pipeline.coma.line_profile import channel_fractions, interval_probability, window_fraction


# ----------------------------------------------------------------------------- independent references
def arcsine_probability(lo, hi, v):
    """P(lo < u < hi) for u = v sin(theta), theta uniform: scipy.stats.arcsine on (-v, v)."""
    dist = stats.arcsine(loc=-v, scale=2 * v)
    return dist.cdf(hi) - dist.cdf(lo)


def convolved_probability_u(lo, hi, v, sigma):
    """int_{-v}^{v} p(u) [Phi((hi-u)/sigma) - Phi((lo-u)/sigma)] du with p = 1/(pi sqrt(v^2-u^2)).

    scipy.integrate.quad with the algebraic weight (u+v)^-1/2 (v-u)^-1/2 (QAWS), which
    takes the arcsine end singularities exactly.
    """
    f = lambda w: (stats.norm.cdf((hi - w) / sigma) - stats.norm.cdf((lo - w) / sigma)) / np.pi  # noqa: E731
    val, _ = integrate.quad(f, -v, v, weight="alg", wvar=(-0.5, -0.5), epsabs=1e-13, epsrel=1e-11,
                            limit=400)
    return val


def convolved_probability_theta(lo, hi, v, sigma):
    """The same integral over theta (u = v sin theta), adaptive quad with break points where the
    Gaussian steps (u = edge, edge +- 2, 8 sigma), for sigma << v."""
    f = lambda t: (stats.norm.cdf((hi - v * np.sin(t)) / sigma)  # noqa: E731
                   - stats.norm.cdf((lo - v * np.sin(t)) / sigma)) / np.pi
    pts = {-np.pi / 2, np.pi / 2}
    for edge in (lo, hi):
        for k in (-8, -2, 0, 2, 8):
            pts.add(float(np.arcsin(np.clip((edge + k * sigma) / v, -1, 1))))
    pts = sorted(pts)
    return sum(integrate.quad(f, a, b, epsabs=1e-15, epsrel=1e-12, limit=200)[0]
               for a, b in zip(pts[:-1], pts[1:]))


# ----------------------------------------------------------------------------- limits
@pytest.mark.parametrize("v", [0.4, 0.85, 1.3])
def test_zero_sigma_is_arcsine_law(v):
    # scipy.stats.arcsine (scaled to (-v, v))
    lo = np.linspace(-1.5, 1.4, 30) * v
    hi = lo + 0.13
    assert_allclose(interval_probability(lo, hi, v, 0.0), arcsine_probability(lo, hi, v), atol=1e-14)
    # half the flux inside |u| < v / sqrt(2) (arcsine quartiles)
    assert_allclose(window_fraction(v / np.sqrt(2), v, 0.0), 0.5, rtol=1e-14)


@pytest.mark.parametrize("sigma", [0.05, 0.3])
def test_vanishing_outflow_is_gaussian(sigma):
    # scipy.stats.norm
    lo = np.linspace(-1.0, 1.0, 21)
    hi = lo + 0.07
    expected = stats.norm.cdf(hi, scale=sigma) - stats.norm.cdf(lo, scale=sigma)
    assert_allclose(interval_probability(lo, hi, 1e-9, sigma), expected, atol=1e-12)
    assert_allclose(interval_probability(lo, hi, 0.0, sigma), expected, atol=1e-15)


@pytest.mark.parametrize("v, sigma", [(0.8, 0.3), (0.8, 0.077), (0.55, 0.04), (1.2, 1.5)])
def test_general_case_against_quad(v, sigma):
    # quad of the arcsine density convolved with a Gaussian (QAWS weight for the end singularities)
    edges = [(-0.05, 0.05), (0.1, 0.2), (-0.3, 0.1), (0.75, 0.85), (v - 0.02, v + 0.02),
             (-2.5, 2.5), (v + 0.1, v + 0.3)]
    lo, hi = np.array(edges).T
    expected = [convolved_probability_u(a, b, v, sigma) for a, b in edges]
    assert_allclose(interval_probability(lo, hi, v, sigma), expected, rtol=1e-8, atol=1e-13)


@pytest.mark.parametrize("v_over_sigma", [40.0, 200.0, 1e4])
def test_narrow_thermal_width_against_quad(v_over_sigma):
    # sigma << v (a cold, heavy molecule in a fast outflow; at v/sigma = 40 a fixed 96-point rule
    # in theta was off by ~1 %): adaptive quad over theta with break points
    v = 1.0
    sigma = v / v_over_sigma
    edges = [(-0.05, 0.05), (0.1, 0.12), (0.95, 1.0), (0.999, 1.002), (-1.1, -0.98), (0.3, 0.3 + 4 * sigma)]
    lo, hi = np.array(edges).T
    expected = [convolved_probability_theta(a, b, v, sigma) for a, b in edges]
    assert_allclose(interval_probability(lo, hi, v, sigma), expected, rtol=1e-8, atol=1e-13)


def test_small_sigma_tends_to_arcsine():
    # sigma -> 0 joins the sigma = 0 closed form (scipy.stats.arcsine) away from the edges +-v
    v = 0.9
    lo = np.linspace(-0.8, 0.7, 16)
    hi = lo + 0.05
    assert_allclose(interval_probability(lo, hi, v, 1e-7), arcsine_probability(lo, hi, v), rtol=1e-9)


def test_broadcasting():
    lo = np.array([[-0.2], [0.0]])
    hi = np.array([0.1, 0.2, 0.3])
    got = interval_probability(lo, hi, 0.8, 0.1)
    assert got.shape == (2, 3)
    assert_allclose(got[1, 2], convolved_probability_u(0.0, 0.3, 0.8, 0.1), rtol=1e-8)


# ----------------------------------------------------------------------------- channels and windows
@pytest.mark.parametrize("v, sigma", [(0.8, 0.077), (0.5, 0.3), (1.4, 0.01), (0.8, 0.0)])
def test_channel_fractions_sum_to_one(v, sigma):
    # total probability over a grid that covers the whole line
    velocity = np.arange(-6.0, 6.0, 0.0437)
    frac = channel_fractions(velocity, v, sigma)
    assert frac.shape == velocity.shape
    assert np.all(frac >= -1e-15)
    assert_allclose(frac.sum(), 1.0, atol=1e-10)


def test_channel_fractions_descending_axis():
    # a spectral axis that runs downwards gives the same fraction per channel centre
    velocity = np.arange(-3.0, 3.0, 0.1)
    up = channel_fractions(velocity, 0.8, 0.07)
    down = channel_fractions(velocity[::-1], 0.8, 0.07)
    assert_allclose(down[::-1], up, atol=1e-15)
    # the profile is symmetric about zero (the arcsine and Gaussian both are)
    assert_allclose(up[1:], up[1:][::-1], atol=1e-13)


def test_window_fraction():
    # wide window: all the flux; and a finite window against the quad reference
    assert_allclose(window_fraction(50.0, 0.8, 0.077), 1.0, atol=1e-13)
    assert_allclose(window_fraction(0.6, 0.8, 0.077), convolved_probability_u(-0.6, 0.6, 0.8, 0.077), rtol=1e-9)
    assert isinstance(window_fraction(0.6, 0.8, 0.077), float)
