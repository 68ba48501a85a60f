"""Tests of pipeline.rates.line_fit: the profile model and the fit of Q and the line-centre offset v0.

References outside the module:

- the arcsine law (scipy.stats.arcsine): through a small aperture, a uniform-speed isotropic outflow gives
  line-of-sight velocities u = v sin(theta) with theta uniform, density 1 / (pi sqrt(v^2 - u^2)) on (-v, v)
  (the law :mod:`pipeline.coma.line_profile` states; not the flat-topped "boxcar" of the whole, optically thin
  coma, whose profile is rectangular);
- Hanning smoothing weights [1/4, 1/2, 1/4] (common practice for correlator output), written out here;
- the autocovariance of a moving average of white noise, gamma(k) = sum_i h_i h_{i+k} (closed form, any time-series
  textbook), which gives the true noise of a window sum over Hanning-correlated channels;
- for an unbiased estimator with correct errors the pulls (estimate - truth) / error are standard normal: their
  mean has standard error 1/sqrt(N), their sample standard deviation 1/sqrt(2 (N - 1)) (normal theory, from
  memory), and the fraction with |pull| < 1 is Phi(1) - Phi(-1) = 0.6827 (scipy.stats.norm) with binomial error
  sqrt(p (1 - p) / N);
- least squares that treats correlated noise as white: parameter covariance (J^T J)^-1 J^T C J (J^T J)^-1 (the
  "sandwich" of linearised least squares, from memory), which predicts the pull widths under Hanning noise.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from pipeline.rates.line_fit import LineFit, fit_line, profile_model

DV = 0.1                                    # km/s channel width
N_CHAN = 2000                               # +-100 km/s: a long line-free stretch to measure the noise on
VELOCITY = (np.arange(N_CHAN) - N_CHAN // 2) * DV
V_OUT, SIGMA_TH = 0.8, 0.12                 # km/s; sqrt(kT/m) = 0.12 km/s is e.g. mass 18 u at 31 K
WINDOW = 1.5 * V_OUT                        # integration half-width, km/s
HANNING = np.array([0.25, 0.5, 0.25])       # common practice (correlator Hanning smoothing)
N_REAL = 300
PULL_SIGMAS = 3.5                           # two-sided bound, about 1 in 2000 for a correct estimator


def arcsine_channels(velocity, v0, v_out):
    """Fraction of the line in each channel for the pure arcsine law (scipy.stats.arcsine on (v0-v, v0+v))."""
    dist = stats.arcsine(loc=v0 - v_out, scale=2 * v_out)
    return dist.cdf(velocity + DV / 2) - dist.cdf(velocity - DV / 2)


def hanning_smooth(x):
    """y_i = x_{i-1}/4 + x_i/2 + x_{i+1}/4 with zeros beyond the ends, written out (no np.convolve)."""
    padded = np.concatenate([[0.0], x, [0.0]])
    return 0.25 * padded[:-2] + 0.5 * padded[1:-1] + 0.25 * padded[2:]


# ----------------------------------------------------------------------------- the profile model
@pytest.mark.parametrize("response", ["hanning", "none"])
@pytest.mark.parametrize("sigma_th", [0.0, SIGMA_TH, 0.6])
@pytest.mark.parametrize("v0", [0.0, 0.37, -1.21])
def test_profile_integrates_to_q(response, sigma_th, v0):
    # closed form: the profile is a probability density (integral 1) and the Hanning weights sum to 1,
    # so sum(model) * dv = Q
    q = 3.7e26
    model = profile_model(VELOCITY, q, v0, V_OUT, sigma_th, response)
    assert model.shape == VELOCITY.shape
    assert np.all(model >= 0)
    assert_allclose(np.sum(model) * DV, q, rtol=1e-10)
    # the same on a descending axis (frequency-ordered cubes run that way)
    assert_allclose(np.sum(profile_model(VELOCITY[::-1], q, v0, V_OUT, sigma_th, response)) * DV, q, rtol=1e-10)


@pytest.mark.parametrize("v0", [0.0, 0.23])
def test_cold_unsmoothed_profile_is_the_arcsine_law(v0):
    # sigma_th = 0, no spectral response: each channel holds Q * [F(hi) - F(lo)] / dv with F the arcsine CDF
    # (scipy.stats.arcsine), nothing beyond |u - v0| > v_out + dv/2
    q = 5.0
    model = profile_model(VELOCITY, q, v0, V_OUT, 0.0, "none")
    expected = q * arcsine_channels(VELOCITY, v0, V_OUT) / DV
    assert_allclose(model, expected, rtol=1e-12, atol=1e-14 * q / DV)
    outside = np.abs(VELOCITY - v0) > V_OUT + DV / 2
    assert outside.sum() > N_CHAN // 2
    assert np.all(model[outside] == 0)
    # closed form: the arcsine density is 1 / (pi sqrt(v^2 - u^2)); the average over a channel of width dv centred
    # at u exceeds the value at u by about (dv / v)^2 / 24 near the line centre (Taylor expansion), here 6.5e-4
    centre = np.argmin(np.abs(VELOCITY - v0))
    u_c = VELOCITY[centre] - v0
    assert_allclose(model[centre], q / (np.pi * np.sqrt(V_OUT**2 - u_c**2)), rtol=1e-3)
    # the horns: the arcsine density is smallest at the centre and largest in the edge channels
    inside = np.abs(VELOCITY - v0) < V_OUT - DV
    assert inside.sum() >= 10
    assert model[centre] == pytest.approx(model[inside].min(), rel=2e-3)
    assert abs(VELOCITY[np.argmax(model)] - v0) > V_OUT - DV
    assert model.max() > 2 * model[centre]


def test_hanning_profile_is_the_smoothed_arcsine():
    # Hanning weights [1/4, 1/2, 1/4] (common practice) applied by hand to the scipy arcsine channel fractions
    q, v0 = 2.0, -0.31
    model = profile_model(VELOCITY, q, v0, V_OUT, 0.0, "hanning")
    expected = q * hanning_smooth(arcsine_channels(VELOCITY, v0, V_OUT)) / DV
    assert_allclose(model, expected, rtol=1e-12, atol=1e-14 * q / DV)


# ----------------------------------------------------------------------------- the fit, noise-free
@pytest.mark.parametrize("response", ["hanning", "none"])
@pytest.mark.parametrize("v0", [0.0, 0.083, -0.27])
def test_fit_recovers_q_and_v0_without_noise(response, v0):
    # Truth known by construction. fit_line measures its channel noise from the line-free channels, so exactly
    # noise-free data would give sigma = 0 (division by zero); a 1e-9-of-peak white floor stands in for "no noise".
    q = 42.0
    model = profile_model(VELOCITY, q, v0, V_OUT, SIGMA_TH, response)
    floor = 1e-9 * model.max()
    y = model + floor * np.random.default_rng(11).standard_normal(N_CHAN)
    fit = fit_line(VELOCITY, y, V_OUT, SIGMA_TH, WINDOW, spectral_response=response)
    assert isinstance(fit, LineFit)
    assert fit.success
    assert_allclose(fit.q, q, rtol=1e-7)
    assert_allclose(fit.v_offset, v0, atol=1e-8)
    # errors positive and small. Not at the level of the floor: the channel noise is measured beyond
    # +-(WINDOW + 3 channels) of 0, where the thermal wing of an off-centre line still puts some signal.
    assert 0 < fit.q_err < 1e-3 * q
    assert 0 < fit.v_offset_err < 1e-3


def broadened_channels(velocity, v0, v_out, sigma, n_theta=20000):
    """Fraction of the line in each channel for the arcsine law broadened by a Gaussian of dispersion sigma.

    P = (1/pi) int_{-pi/2}^{pi/2} [Phi((hi - v0 - v sin t)/sigma) - Phi((lo - v0 - v sin t)/sigma)] dt, by the
    midpoint rule on a uniform grid of t (smooth integrand for sigma > 0) with scipy.stats.norm for Phi.
    """
    out = np.zeros(velocity.shape)
    near = np.abs(velocity - v0) < v_out + 12 * sigma       # Phi(-12) ~ 2e-33: nothing beyond
    t = (np.arange(n_theta) + 0.5) / n_theta * np.pi - np.pi / 2
    u_los = v0 + v_out * np.sin(t)
    lo = (velocity[near] - DV / 2)[:, None]
    hi = (velocity[near] + DV / 2)[:, None]
    out[near] = np.mean(stats.norm.cdf((hi - u_los) / sigma) - stats.norm.cdf((lo - u_los) / sigma), axis=1)
    return out


def test_broadened_reference_matches_profile_model():
    # the independent reference of the next test against the module (midpoint rule vs the module's quadrature)
    ref = broadened_channels(VELOCITY, 0.3, V_OUT, SIGMA_TH)
    assert_allclose(ref.sum(), 1.0, atol=1e-9)
    assert_allclose(2.0 * hanning_smooth(ref) / DV, profile_model(VELOCITY, 2.0, 0.3, V_OUT, SIGMA_TH, "hanning"),
                    rtol=1e-6, atol=1e-12)


@pytest.mark.parametrize("shift", [0.3, -0.3, 0.6])
@pytest.mark.parametrize("descending", [False, True], ids=["ascending", "descending"])
def test_shifted_line_gives_offset_of_its_sign(shift, descending):
    # A line built outside the module (arcsine law broadened by a Gaussian, midpoint rule in theta; Hanning by hand)
    # centred at `shift` km/s on the target-frame velocity axis, with 1 % white noise: v_offset is the line centre
    # on that axis (profile_model centres the line at v0), so it has the sign of the shift, on an ascending or a
    # descending axis.
    q = 10.0
    y = q * hanning_smooth(broadened_channels(VELOCITY, shift, V_OUT, SIGMA_TH)) / DV
    y = y + 0.01 * y.max() * np.random.default_rng(5).standard_normal(N_CHAN)
    v = VELOCITY
    if descending:
        v, y = v[::-1], y[::-1]
    fit = fit_line(v, y, V_OUT, SIGMA_TH, WINDOW, spectral_response="hanning")
    assert fit.success
    assert np.sign(fit.v_offset) == np.sign(shift)
    assert abs(fit.v_offset - shift) < 4 * fit.v_offset_err
    assert fit.v_offset_err < 0.01                 # resolved: 0.3 km/s is many errors from 0
    assert abs(fit.q - q) < 4 * fit.q_err


# ----------------------------------------------------------------------------- coverage of the errors
Q_TRUE, V0_TRUE = 20.0, 0.07                 # Q-density noise of 1 per channel: Q / q_err is about 45


def _pulls(noise_kind, seed):
    model = profile_model(VELOCITY, Q_TRUE, V0_TRUE, V_OUT, SIGMA_TH, "hanning")
    rng = np.random.default_rng(seed)
    rows = []
    for _ in range(N_REAL):
        if noise_kind == "white":
            noise = rng.standard_normal(N_CHAN)
        else:  # Hanning-smoothed white noise, rescaled to unit channel variance (sum of squared weights 3/8)
            noise = hanning_smooth(rng.standard_normal(N_CHAN + 2))[1:-1] / np.sqrt(0.375)
        fit = fit_line(VELOCITY, model + noise, V_OUT, SIGMA_TH, WINDOW, spectral_response="hanning")
        rows.append((fit.success, (fit.q - Q_TRUE) / fit.q_err, (fit.v_offset - V0_TRUE) / fit.v_offset_err,
                     fit.noise_correction))
    success, pull_q, pull_v, correction = np.array(rows).T
    return success.astype(bool), pull_q, pull_v, correction


def _assert_normal(pulls, width, name):
    """Pulls drawn from N(0, width^2), within PULL_SIGMAS of their standard errors."""
    n = pulls.size
    assert n == N_REAL
    assert np.all(np.isfinite(pulls)), name
    # mean: standard error width/sqrt(N); standard deviation: standard error width/sqrt(2 (N - 1)) (normal theory)
    assert abs(pulls.mean()) < PULL_SIGMAS * width / np.sqrt(n), (name, pulls.mean())
    assert abs(pulls.std(ddof=1) - width) < PULL_SIGMAS * width / np.sqrt(2 * (n - 1)), (name, pulls.std(ddof=1))
    # coverage of +-1 error: P(|pull| < 1) = 2 Phi(1/width) - 1 (scipy.stats.norm; 0.6827 for width 1) within its
    # binomial error
    p = 2 * stats.norm.cdf(1 / width) - 1
    inside = np.mean(np.abs(pulls) < 1)
    assert abs(inside - p) < PULL_SIGMAS * np.sqrt(p * (1 - p) / n), (name, inside)


def _hanning_autocovariance():
    """gamma(k) = sum_m h_m h_{m+k} of Hanning-smoothed unit white noise, k = 0, 1, 2: 3/8, 1/4, 1/16."""
    return [float(np.sum(HANNING[: HANNING.size - k] * HANNING[k:])) for k in range(3)]


def _window_sum_factor():
    """True over naive noise of the +-WINDOW window sum of Hanning-correlated channels (closed form).

    Var(sum_i w_i n_i) = sum_ij w_i w_j gamma(i - j); the naive figure is gamma(0) sum_i w_i^2. The weights are the
    channel fractions inside the window, written out here.
    """
    w = np.clip(np.minimum(VELOCITY + DV / 2, WINDOW) - np.maximum(VELOCITY - DV / 2, -WINDOW), 0, None) / DV
    w = w[w > 0]
    g = _hanning_autocovariance()
    var = g[0] * np.sum(w * w) + 2 * g[1] * np.sum(w[:-1] * w[1:]) + 2 * g[2] * np.sum(w[:-2] * w[2:])
    return float(np.sqrt(var / (g[0] * np.sum(w * w))))


def _expected_hanning_pull_widths():
    """Expected pull widths (q, v0) of fit_line under Hanning-correlated noise.

    Least squares that treats correlated noise of covariance C as white has the parameter covariance
    (J^T J)^-1 J^T C J (J^T J)^-1 (the "sandwich"; textbook linearised least squares, from memory), while
    fit_line reports (J^T J)^-1 sigma^2 times the window-sum factor. The pull width is the ratio. J is the
    derivative of the model over the fitted channels (|v| <= 3 WINDOW) by central differences.
    """
    v = VELOCITY[np.abs(VELOCITY) <= 3 * WINDOW]
    h_q, h_v = 1e-6 * Q_TRUE, 1e-6
    jac = np.stack([
        (profile_model(v, Q_TRUE + h_q, V0_TRUE, V_OUT, SIGMA_TH) - profile_model(v, Q_TRUE - h_q, V0_TRUE, V_OUT,
                                                                                    SIGMA_TH)) / (2 * h_q),
        (profile_model(v, Q_TRUE, V0_TRUE + h_v, V_OUT, SIGMA_TH) - profile_model(v, Q_TRUE, V0_TRUE - h_v, V_OUT,
                                                                                    SIGMA_TH)) / (2 * h_v)], axis=1)
    g = _hanning_autocovariance()
    lag = np.abs(np.subtract.outer(np.arange(v.size), np.arange(v.size)))
    cov = np.take(g + [0.0], np.minimum(lag, 3)) / g[0]           # Toeplitz, zero beyond lag 2, unit variance
    a = np.linalg.inv(jac.T @ jac)
    sandwich = a @ jac.T @ cov @ jac @ a
    return np.sqrt(np.diag(sandwich) / np.diag(a)) / _window_sum_factor()


@pytest.fixture(scope="module")
def white_pulls():
    return _pulls("white", seed=20240)


@pytest.fixture(scope="module")
def hanning_pulls():
    return _pulls("hanning", seed=20241)


def test_pulls_are_standard_normal_for_white_noise(white_pulls):
    # white noise: the sandwich equals the naive covariance, so the pulls should be N(0, 1)
    success, pull_q, pull_v, correction = white_pulls
    assert success.all()
    _assert_normal(pull_q, 1.0, "q")
    _assert_normal(pull_v, 1.0, "v_offset")
    # the window-sum factor is 1 up to its own scatter, clipped at 1 from below: with about 78 independent windows
    # the scatter is about 1/sqrt(2 * 78) = 0.08, and a normal clipped at its centre has mean
    # 1 + 0.08 / sqrt(2 pi) = 1.03 (closed form). Errors are therefore some 3 % large, well inside the bounds above.
    assert np.all(correction >= 1.0)
    assert correction.mean() < 1.06


def test_hanning_noise_is_corrected_and_pulls_stay_normal(hanning_pulls):
    success, pull_q, pull_v, correction = hanning_pulls
    assert success.all()
    assert np.all(correction > 1.0)
    expected = _window_sum_factor()
    assert 1.55 < expected < np.sqrt(8 / 3)          # long-window limit sqrt((3/8 + 2/4 + 2/16) / (3/8)) = 1.633
    # the mean measured factor within 3 % (its scatter over 300 realisations is about 0.4 %; the root-mean-square
    # estimator is slightly low for a finite number of windows)
    assert_allclose(correction.mean(), expected, rtol=0.03)
    width_q, width_v = _expected_hanning_pull_widths()
    # Q is a broad, low-frequency template: the window-sum factor is the right one and its pulls are N(0, 1)
    assert width_q == pytest.approx(1.0, abs=0.01)
    _assert_normal(pull_q, width_q, "q")
    # v0 is a narrower template (the profile's horns are about a channel wide here); Hanning smoothing takes out
    # high-frequency noise, so the window-sum factor overstates its error: pulls narrower than 1 (conservative)
    assert 0.85 < width_v < 1.0
    _assert_normal(pull_v, width_v, "v_offset")
