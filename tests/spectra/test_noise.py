"""Tests of pipeline.spectra.noise against closed forms for white and Hanning-smoothed noise and numpy.polyfit."""

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from pipeline.errors import CoverageError, NoiseWarning
from pipeline.spectra.noise import (channel_sigma, fit_baseline, line_free_mask, window_sum_noise,
                            window_weights)

HANNING = np.array([0.25, 0.5, 0.25])
N_CHAN = 200_000


def _window_variance(kernel: np.ndarray, weights: np.ndarray, sigma_w: float) -> float:
    """Variance of sum(w_i y_i) for y = kernel * white(sigma_w).

    Var = sigma_w^2 * sum_{i,j} w_i w_j rho(i - j), with the autocovariance of the
    filtered noise rho(k) = sum_m h_m h_{m+k} (Wiener-Khinchin for an FIR filter;
    any time-series textbook, e.g. Box & Jenkins, moving-average processes).
    """
    acov = np.correlate(kernel, kernel, mode="full")            # lags -(K-1) .. K-1
    lag0 = len(kernel) - 1
    n = len(weights)
    var = 0.0
    for i in range(n):
        for j in range(n):
            k = i - j
            if abs(k) <= lag0:
                var += weights[i] * weights[j] * acov[lag0 + k]
    return sigma_w**2 * var


def test_white_noise_window_sum_is_sigma_sqrt_n():
    rng = np.random.default_rng(11)
    sigma = 0.7
    spec = rng.normal(0.0, sigma, N_CHAN)
    free = np.ones(N_CHAN, dtype=bool)
    n = 12
    res = window_sum_noise(spec, free, np.ones(n))
    # closed form sigma * sqrt(N); sampling error of a standard deviation from M independent
    # windows is ~ 1/sqrt(2M) = 0.5 % here, so 3 % is > 5 sampling sigmas
    assert_allclose(res.sigma, sigma * np.sqrt(n), rtol=0.03)
    assert_allclose(res.sigma_naive, sigma * np.sqrt(n), rtol=0.03)
    # greedy non-overlapping placements on a fully free spectrum: floor(L / N)
    assert res.n_independent == N_CHAN // n
    assert res.n_windows == N_CHAN - n + 1


def test_hanning_smoothed_noise_matches_correlated_sum_variance():
    rng = np.random.default_rng(12)
    sigma_w = 1.3
    white = rng.normal(0.0, sigma_w, N_CHAN + 2)
    spec = np.convolve(white, HANNING, mode="valid")            # Hanning-smoothed channels
    free = np.ones(spec.size, dtype=bool)
    n = 10
    res = window_sum_noise(spec, free, np.ones(n))
    expected = np.sqrt(_window_variance(HANNING, np.ones(n), sigma_w))
    # per-channel sigma of Hanning noise: sigma_w sqrt(sum h^2) = sigma_w sqrt(3/8) (closed form)
    assert_allclose(channel_sigma(spec, free), sigma_w * np.sqrt(3 / 8), rtol=0.01)
    assert_allclose(res.sigma, expected, rtol=0.03)
    # the naive sigma_chan sqrt(N) is measurably too small: analytic ratio
    # sqrt((N g0 + 2 sum (N-k) g_k) / (N g0)) = sqrt(9.25 / 3.75) = 1.57 for N = 10
    assert_allclose(expected / (sigma_w * np.sqrt(3 / 8) * np.sqrt(n)), np.sqrt(9.25 / 3.75), rtol=1e-12)
    assert res.sigma_naive < 0.7 * res.sigma
    assert_allclose(res.sigma_naive, sigma_w * np.sqrt(3 / 8) * np.sqrt(n), rtol=0.03)


def test_hanning_noise_with_fractional_window_weights():
    rng = np.random.default_rng(13)
    sigma_w = 1.0
    spec = np.convolve(rng.normal(0.0, sigma_w, N_CHAN + 2), HANNING, mode="valid")
    velocity = np.arange(spec.size) * 0.5 - 1000.0
    weights = window_weights(velocity, half_width=2.3, centre=0.1)
    res = window_sum_noise(spec, np.ones(spec.size, dtype=bool), weights)
    nz = np.flatnonzero(weights)
    kernel = weights[nz.min():nz.max() + 1]
    assert_allclose(res.sigma, np.sqrt(_window_variance(HANNING, kernel, sigma_w)), rtol=0.03)


@pytest.mark.parametrize("half_width, centre, step", [(2.3, 0.1, 0.5), (5.0, -3.7, 0.37), (0.2, 1.05, 1.0)])
@pytest.mark.parametrize("reverse", [False, True])
def test_window_weights_integrate_constant_density_exactly(half_width, centre, step, reverse):
    velocity = np.arange(-60, 61) * step + 0.013
    if reverse:
        velocity = velocity[::-1]
    w = window_weights(velocity, half_width, centre)
    density = 4.2  # constant flux density per km/s
    # closed form: integral of a constant over [c - h, c + h] = 2 h * density
    assert_allclose(np.sum(w * density) * step, 2 * half_width * density, rtol=1e-12)
    assert np.all((w >= 0) & (w <= 1 + 1e-12))
    # channels wholly inside the window have weight 1, wholly outside 0
    inside = (np.abs(velocity - centre) + step / 2) <= half_width
    outside = (np.abs(velocity - centre) - step / 2) >= half_width
    assert_allclose(w[inside], 1.0)
    assert_allclose(w[outside], 0.0)


def test_line_free_mask_excludes_the_right_channels():
    velocity = np.arange(-20.0, 20.5, 0.5)
    valid = np.ones(velocity.size, dtype=bool)
    valid[:4] = False
    free = line_free_mask(velocity, np.array([0.0, 10.0]), 3.0, valid=valid)
    # explicit enumeration of the definition |v - v_line| > half-width for every line
    expected = [(abs(v) > 3.0 and abs(v - 10.0) > 3.0 and ok) for v, ok in zip(velocity, valid)]
    assert_array_equal(free, expected)
    assert not free[velocity == 3.0].any()        # boundary excluded (strict inequality)
    assert free[velocity == 3.5].all()
    assert not free[(velocity > 7.0) & (velocity < 13.0)].any()
    assert_array_equal(line_free_mask(velocity, 0.0, 1.0), np.abs(velocity) > 1.0)  # scalar line


@pytest.mark.parametrize("order", [1, 2])
def test_fit_baseline_matches_numpy_polyfit(order):
    rng = np.random.default_rng(14)
    velocity = np.linspace(-30, 30, 241)
    coef = [0.003, -0.02, 1.5][-(order + 1):]
    baseline = np.polyval(coef, velocity)
    line = 5.0 * np.exp(-0.5 * (velocity / 1.2) ** 2)
    free = line_free_mask(velocity, 0.0, 12.0)   # 10 line widths: the tail there is < 1e-20
    # exact polynomial: removed to round-off even with a strong line in the masked channels
    assert_allclose(fit_baseline(velocity, baseline + line, free, order), baseline, atol=1e-10)
    # with noise and a blank channel: numpy.polyfit on the raw line-free channels is the reference
    spec = baseline + line + rng.normal(0, 0.1, velocity.size)
    spec[5] = np.nan
    ok = free & np.isfinite(spec)
    ref = np.polyval(np.polyfit(velocity[ok], spec[ok], order), velocity)
    assert_allclose(fit_baseline(velocity, spec, free, order), ref, atol=1e-9)


def test_fit_baseline_too_few_channels():
    velocity = np.arange(10.0)
    free = np.zeros(10, dtype=bool)
    free[:2] = True
    with pytest.raises(CoverageError, match="only 2 line-free channels; expected more than 2"):
        fit_baseline(velocity, np.ones(10), free, order=1)


def test_noise_warning_when_too_few_windows():
    rng = np.random.default_rng(15)
    spec = rng.normal(size=60)
    free = np.ones(60, dtype=bool)
    free[20:40] = False
    # 20 + 20 free channels, window of 8: 2 + 2 = 4 independent placements (< 10)
    with pytest.warns(NoiseWarning, match="rests on 4 independent line-free windows"):
        res = window_sum_noise(spec, free, np.ones(8))
    assert res.n_independent == 4
    # placements straddling the excluded band are not used: 13 + 13 valid starts
    assert res.n_windows == 26


def test_window_noise_coverage_errors():
    spec = np.zeros(30)
    free = np.zeros(30, dtype=bool)
    free[:5] = True
    with pytest.raises(CoverageError, match="only 5 line-free channels for a window of 8 channels"):
        window_sum_noise(spec, free, np.ones(8))
    free[:] = False
    free[:8] = True
    free[20:28] = True       # 15 free channels, but only channels 0-7 hold a whole window
    free[21] = False
    with pytest.raises(CoverageError, match="no two line-free placements"):
        window_sum_noise(spec, free, np.ones(8))
    with pytest.raises(CoverageError, match="at least 3"):
        channel_sigma(np.ones(5), np.array([True, True, False, False, False]))
