"""Tests of pipeline.rates.statistics against closed forms, scipy, numpy.average and Feldman & Cousins (1998)."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy import integrate, optimize, stats

from pipeline.errors import GasledgerError, LimitError
from pipeline.rates.statistics import (
    bayesian_upper_limit,
    classical_upper_limit,
    detection_significance,
    feldman_cousins_acceptance_interval,
    feldman_cousins_interval,
    feldman_cousins_upper_limit,
    inverse_variance_mean,
    nsigma_to_confidence,
)

QUNIT = u.Unit("1 / s")


# --------------------------------------------------------------------------- #
# simple quantities
# --------------------------------------------------------------------------- #
def test_nsigma_to_confidence_textbook_values():
    # Standard normal table (any statistics textbook): Phi(1) = 0.841345, Phi(2) = 0.977250,
    # Phi(3) = 0.998650
    assert_allclose(nsigma_to_confidence(np.array([1.0, 2.0, 3.0])), [0.841345, 0.977250, 0.998650], atol=1e-6)
    # closed form Phi(n) = (1 + erf(n / sqrt 2)) / 2 (math.erf, independent of scipy)
    assert math.isclose(nsigma_to_confidence(3.0), 0.5 * (1 + math.erf(3 / math.sqrt(2))), rel_tol=1e-12)


def test_classical_limit_floats_arrays_quantities():
    # closed form estimate + n sigma: 2 + 3 * 0.5 = 3.5
    assert classical_upper_limit(2.0, 0.5) == pytest.approx(3.5)
    assert_allclose(classical_upper_limit(np.array([0.0, -1.0]), 1.0, nsigma=2.0), [2.0, 1.0])
    # same result with sigma given in another unit of the same physical type (astropy units)
    lim = classical_upper_limit(2e26 * QUNIT, 5e25 * QUNIT)
    assert_quantity_allclose(lim, 3.5e26 * QUNIT)
    lim_min = classical_upper_limit(2e26 * QUNIT, 5e25 * 60 / u.min)
    assert_quantity_allclose(lim_min, 3.5e26 * QUNIT)
    assert lim_min.unit == QUNIT


def test_detection_significance():
    # snr = estimate / sigma: 6 / 2 = 3
    assert detection_significance(6.0, 2.0) == pytest.approx(3.0)
    snr = detection_significance(6.0 * u.Jy * u.km / u.s, 2000.0 * u.Jy * u.m / u.s)
    assert_quantity_allclose(snr, 3.0 * u.dimensionless_unscaled)


# --------------------------------------------------------------------------- #
# Bayesian limit
# --------------------------------------------------------------------------- #
def _bayes_limit_by_quadrature(x: float, s: float, cl: float) -> float:
    """Upper limit of the truncated Gaussian posterior by numerical integration (scipy).

    The integrand is the likelihood divided by its value at mu = 0, exp(x mu/s^2 - mu^2/(2 s^2)),
    so strongly negative x stays finite.
    """

    def dens(mu):
        return math.exp((x * mu - 0.5 * mu * mu) / (s * s))

    hi = max(x, 0.0) + 40.0 * s  # the posterior beyond this is below exp(-800)
    peak = [x] if x > 0 else None
    total = integrate.quad(dens, 0.0, hi, points=peak, epsabs=0.0, epsrel=1e-12, limit=200)[0]

    def cdf_excess(upper):
        pts = [x] if 0 < x < upper else None
        return integrate.quad(dens, 0.0, upper, points=pts, epsabs=0.0, epsrel=1e-12, limit=200)[0] / total - cl

    return optimize.brentq(cdf_excess, 1e-12 * s, hi, xtol=1e-12 * s)


@pytest.mark.parametrize("x", [-40.0, -5.0, -1.0, 0.0, 0.7, 2.0, 4.0])
@pytest.mark.parametrize("cl", [0.9, 0.95, 0.99865])
def test_bayesian_limit_matches_quadrature(x, cl):
    # independent numerical integration of the flat-prior posterior (scipy.integrate.quad)
    s = 1.3
    expected = _bayes_limit_by_quadrature(x * s, s, cl)
    got = bayesian_upper_limit(x * s, s, cl)
    assert got > 0
    assert got == pytest.approx(expected, rel=1e-6)


def test_bayesian_limit_asymptotes():
    cl = 0.95
    # estimate >> sigma: the boundary is irrelevant, U = x + sigma Phi^-1(cl) (closed form)
    assert bayesian_upper_limit(30.0, 1.0, cl) == pytest.approx(30.0 + stats.norm.ppf(cl), rel=1e-12)
    # estimate = 0: half-normal posterior, U = sigma Phi^-1((1 + cl) / 2) (closed form)
    assert bayesian_upper_limit(0.0, 2.0, cl) == pytest.approx(2.0 * stats.norm.ppf(0.5 * (1 + cl)), rel=1e-12)
    # estimate << -sigma: the posterior tends to an exponential of rate |x|/sigma^2,
    # so U -> -sigma^2 ln(1 - cl) / |x| (closed form of the limit); finite and positive
    for x in (-40.0, -1e3, -1e6):
        got = bayesian_upper_limit(x, 1.0, cl)
        assert np.isfinite(got) and got > 0
        # the next term of the Mills-ratio expansion is -(L/2 + 1)/x^2 relative, L = -ln(1 - cl)
        big_l = -math.log1p(-cl)
        assert got == pytest.approx(big_l / abs(x), rel=(1.0 + big_l) / x**2)
        assert got < big_l / abs(x)


def test_bayesian_limit_broadcasts_and_keeps_units():
    x = np.array([[-2.0], [0.0], [3.0]]) * 1e25 * QUNIT
    s = np.array([1.0, 2.0]) * 1e25 * QUNIT
    got = bayesian_upper_limit(x, s, 0.9)
    assert got.shape == (3, 2)
    assert got.unit == QUNIT
    # element-wise against the independent quadrature
    for i, j in np.ndindex(got.shape):
        expected = _bayes_limit_by_quadrature(x[i, 0].value / 1e25, s[j].value / 1e25, 0.9) * 1e25
        assert got[i, j].value == pytest.approx(expected, rel=1e-6)
    # equivalent unit for sigma gives the same limit
    got_h = bayesian_upper_limit(x, s.to(1 / u.h), 0.9)
    assert_quantity_allclose(got_h, got, rtol=1e-12)


# --------------------------------------------------------------------------- #
# Feldman-Cousins
# --------------------------------------------------------------------------- #
# Feldman & Cousins 1998, Phys. Rev. D 57, 3873, Table X (Gaussian with a boundary at
# zero, sigma = 1): rows (x0, mu_lower, mu_upper), quoted from memory, to the table's 0.01.
FC_TABLE_X_90 = [
    (-3.0, 0.00, 0.26),
    (-2.0, 0.00, 0.40),
    (-1.0, 0.00, 0.81),
    (0.0, 0.00, 1.64),
    (0.5, 0.00, 2.14),
    (1.0, 0.00, 2.64),
    (2.0, 0.58, 3.64),
    (3.0, 1.37, 4.64),
]
FC_TABLE_X_95 = [
    (-3.0, 0.00, 0.42),
    (-2.0, 0.00, 0.62),
    (-1.0, 0.00, 1.10),
    (0.0, 0.00, 1.96),
    (0.5, 0.00, 2.46),
    (1.0, 0.00, 2.96),
    (2.0, 0.35, 3.96),
    (3.0, 1.14, 4.96),
]


@pytest.mark.parametrize(
    ("cl", "row"),
    [(0.90, r) for r in FC_TABLE_X_90] + [(0.95, r) for r in FC_TABLE_X_95],
)
def test_feldman_cousins_table_x(cl, row):
    # Feldman & Cousins 1998 Table X (from memory), tolerance 0.01 = the table's precision
    x0, lo_pub, hi_pub = row
    lo, hi = feldman_cousins_interval(x0, 1.0, cl)
    assert lo == pytest.approx(lo_pub, abs=0.01)
    assert hi == pytest.approx(hi_pub, abs=0.01)


def test_feldman_cousins_matches_brute_force_neyman_construction():
    # Independent numerical Neyman construction on a grid: for each mu, sort x by
    # R = P(x|mu)/P(x|max(0, x)) and take the highest-R cells until their probability
    # reaches 90 % (Feldman & Cousins 1998, Sect. IV.B recipe); compare the band edges.
    cl = 0.9
    grid = np.linspace(-8.0, 12.0, 40001)
    dx = grid[1] - grid[0]
    for mu in (0.3, 1.0, 1.6, 2.5):
        p = stats.norm.pdf(grid, mu) * dx
        ratio = stats.norm.pdf(grid, mu) / stats.norm.pdf(grid, np.maximum(0.0, grid))
        order = np.argsort(-ratio, kind="stable")
        k = np.searchsorted(np.cumsum(p[order]), cl)
        accepted = grid[order[: k + 1]]
        x1, x2 = feldman_cousins_acceptance_interval(mu, 1.0, cl)
        assert x2 == pytest.approx(accepted.max(), abs=2e-3)
        if accepted.min() > grid[0]:
            assert x1 == pytest.approx(accepted.min(), abs=2e-3)


def test_feldman_cousins_inversion_lies_on_the_band():
    # the interval ends are where the acceptance band edges cross the observation
    # (definition of the Neyman inversion)
    cl = 0.9
    for x0 in (-2.5, -0.3, 1.7, 2.9):
        lo, hi = feldman_cousins_interval(x0, 1.0, cl)
        x1_hi, _ = feldman_cousins_acceptance_interval(hi, 1.0, cl)
        assert x1_hi == pytest.approx(x0, abs=1e-9)
        if lo > 0:
            _, x2_lo = feldman_cousins_acceptance_interval(lo, 1.0, cl)
            assert x2_lo == pytest.approx(x0, abs=1e-9)


@pytest.mark.parametrize("mu_true", [0.0, 0.4, 1.2, 3.0])
def test_feldman_cousins_coverage(mu_true):
    # Frequentist coverage (definition of a confidence interval, exact for the FC
    # construction of a continuous variable): the fraction of intervals containing the
    # truth equals CL within the binomial error; 4-sigma band.
    cl, n = 0.9, 20000
    rng = np.random.default_rng(12345 + int(10 * mu_true))
    sigma = 2.0
    x = rng.normal(mu_true * sigma, sigma, n)
    lo, hi = feldman_cousins_interval(x, sigma, cl)
    covered = np.mean((lo <= mu_true * sigma) & (mu_true * sigma <= hi))
    assert abs(covered - cl) < 4 * math.sqrt(cl * (1 - cl) / n)


def test_feldman_cousins_quantities_and_upper_limit():
    x = np.array([-1.0, 0.0, 2.0]) * 3e25 * QUNIT
    s = 3e25 * QUNIT
    lo, hi = feldman_cousins_interval(x, s, 0.9)
    assert lo.unit == QUNIT and hi.unit == QUNIT
    # Table X rows above (from memory), scaled by sigma
    assert_quantity_allclose(hi, [0.81, 1.64, 3.64] * s, atol=0.01 * s)
    assert_quantity_allclose(lo, [0.0, 0.0, 0.58] * s, atol=0.01 * s)
    assert_quantity_allclose(feldman_cousins_upper_limit(x, s.to(1 / u.min), 0.9), hi, rtol=1e-10)
    # strongly negative estimate stays finite and positive, and tends to the mu = 0+ limit
    # of the band, x1 ~ -z1^2 / (2 mu) -> mu_up ~ z1^2 / (2 |x|) (closed form of the limit)
    z1 = stats.norm.ppf(0.9)
    far = feldman_cousins_upper_limit(-1e4, 1.0, 0.9)
    assert far == pytest.approx(z1**2 / 2e4, rel=1e-3)


def test_nan_estimates_pass_through():
    # NaN in -> NaN out (numpy convention), the other entries unaffected
    got = bayesian_upper_limit(np.array([np.nan, 0.0]), 1.0, 0.95)
    assert np.isnan(got[0]) and got[1] == pytest.approx(stats.norm.ppf(0.975))
    lo, hi = feldman_cousins_interval(np.array([np.nan, 0.0]), 1.0, 0.95)
    assert np.isnan(hi[0]) and hi[1] == pytest.approx(1.96, abs=0.01)


# --------------------------------------------------------------------------- #
# invalid input
# --------------------------------------------------------------------------- #
@pytest.mark.parametrize("bad_sigma", [0.0, -1.0, np.inf, np.nan])
@pytest.mark.parametrize(
    "func",
    [
        lambda x, s: classical_upper_limit(x, s),
        lambda x, s: bayesian_upper_limit(x, s, 0.9),
        lambda x, s: feldman_cousins_interval(x, s, 0.9),
        lambda x, s: feldman_cousins_upper_limit(x, s, 0.9),
        detection_significance,
    ],
)
def test_bad_sigma_raises(func, bad_sigma):
    with pytest.raises(LimitError, match=r"'sigma' must be finite and > 0, found"):
        func(1.0, bad_sigma)


def test_bad_sigma_in_array_names_the_values():
    with pytest.raises(LimitError, match=r"'sigma'.*found array\(\[-2\.\]\)"):
        bayesian_upper_limit(np.zeros(3), np.array([1.0, -2.0, 1.0]), 0.9)


@pytest.mark.parametrize("bad_cl", [0.0, 1.0, -0.1, 1.5, np.nan])
def test_bad_confidence_raises(bad_cl):
    for func in (bayesian_upper_limit, feldman_cousins_interval, feldman_cousins_upper_limit):
        with pytest.raises(LimitError, match=r"'confidence' must lie in the open interval \(0, 1\)"):
            func(1.0, 1.0, bad_cl)


@pytest.mark.parametrize("low_cl", [0.5, 0.3])
def test_feldman_cousins_needs_confidence_above_half(low_cl):
    # the Bayesian limit is defined for any level, the FC band of this module for CL > 0.5
    assert bayesian_upper_limit(1.0, 1.0, low_cl) > 0
    with pytest.raises(LimitError, match=r"'confidence' of a Feldman-Cousins interval must be > 0\.5, found"):
        feldman_cousins_interval(1.0, 1.0, low_cl)


def test_feldman_cousins_extreme_confidence_stays_ordered():
    # near CL = 1 the tails are tiny; the interval must still contain the central
    # interval's lower part and grow with x (monotone band, Feldman & Cousins 1998 Fig. 10)
    x = np.linspace(-60.0, 60.0, 241)
    alpha = 2.0**-30  # 1 - alpha is exact in binary
    lo, hi = feldman_cousins_interval(x, 1.0, 1 - alpha)
    assert np.all(np.diff(hi) > 0) and np.all(np.diff(lo) >= 0) and np.all(hi > 0)
    # x far above the band: central interval x -/+ Phi^-1(1 - alpha/2) (closed form)
    zc = stats.norm.isf(0.5 * alpha)
    assert hi[-1] == pytest.approx(60.0 + zc, rel=1e-12) and lo[-1] == pytest.approx(60.0 - zc, rel=1e-12)


def test_errors_are_gasledger_value_errors():
    with pytest.raises(GasledgerError):
        bayesian_upper_limit(1.0, -1.0, 0.9)
    with pytest.raises(ValueError, match="'confidence'"):
        bayesian_upper_limit(1.0, 1.0, "high")


def test_incompatible_units_raise():
    with pytest.raises(u.UnitConversionError):
        bayesian_upper_limit(1.0 * QUNIT, 1.0 * u.Jy, 0.9)


# --------------------------------------------------------------------------- #
# combining estimates
# --------------------------------------------------------------------------- #
def test_inverse_variance_mean_against_numpy_average():
    # numpy.average with weights 1/sigma^2; the error (sum w)^-1/2 by hand for two equal errors: sigma / sqrt(2)
    rng = np.random.default_rng(7)
    x, s = rng.normal(size=(5, 3)), rng.uniform(0.5, 2.0, size=(5, 3))
    mean, err = inverse_variance_mean(x, s, axis=0)
    assert_allclose(mean, np.average(x, weights=1 / s**2, axis=0), rtol=1e-13)
    assert_allclose(err, 1 / np.sqrt(np.sum(1 / s**2, axis=0)), rtol=1e-13)
    mean, err = inverse_variance_mean([1.0, 3.0], [2.0, 2.0])
    assert mean == 2.0 and err == pytest.approx(2.0 / math.sqrt(2.0), rel=1e-15)
    mean, err = inverse_variance_mean(x, s, axis=None)
    assert_allclose(mean, np.average(x, weights=1 / s**2), rtol=1e-13)


def test_inverse_variance_mean_keeps_the_hand_written_bits():
    # the order of operations of the sums it replaced: same bits, not merely close
    rng = np.random.default_rng(3)
    q, s = rng.normal(size=(4, 2, 3)) * 1e27, rng.uniform(0.5, 2.0, size=(4, 2, 3)) * 1e26
    w = np.array([1.0 / si**2 for si in s])
    mean, err = inverse_variance_mean(q, s, axis=0)
    np.testing.assert_array_equal(mean, (w * q).sum(axis=0) / w.sum(axis=0))
    np.testing.assert_array_equal(err, 1.0 / np.sqrt(w.sum(axis=0)))


def test_inverse_variance_mean_quantities():
    mean, err = inverse_variance_mean([1.0, 3.0] * QUNIT, [2.0, 2.0] * QUNIT)
    assert_quantity_allclose(mean, 2.0 * QUNIT)
    assert_quantity_allclose(err, math.sqrt(2.0) * QUNIT)
    mean, err = inverse_variance_mean([1.0, 3.0] * u.km, [2000.0, 2000.0] * u.m)
    assert mean.unit == u.km and err.unit == u.km
    assert_quantity_allclose(err, math.sqrt(2.0) * u.km)
