"""Line-profile fit of a detected, stacked line: Q and the offset of the line centre from its predicted position.

The model is the isotropic-outflow profile of :mod:`pipeline.coma.line_profile`
(arcsine plus thermal broadening) with the spectrometer's channel response,
scaled by Q and shifted by v0. A line centre far from 0 km/s points at an
ephemeris (range-rate) error. Channel noise is correlated, so the covariance of
the fit is scaled by the measured ratio of the empirical to the naive noise of
a window sum.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from pipeline.coma.line_profile import channel_fractions
from pipeline.spectra.noise import channel_sigma, line_free_mask, window_sum_noise, window_weights
from pipeline.coma.response import SPECTRAL_RESPONSES

__all__ = ["LineFit", "profile_model", "fit_line", "line_moment"]


@dataclass(frozen=True)
class LineFit:
    """Result of a profile fit (Q in the spectrum's Q units, velocities in km/s)."""

    q: float
    q_err: float
    v_offset: float
    v_offset_err: float
    noise_correction: float       # factor applied to the naive errors for channel correlation
    success: bool


def profile_model(velocity: np.ndarray, q: float, v0: float, v_out: float, sigma_th: float,
                  spectral_response: str = "hanning") -> np.ndarray:
    """Q-density per channel of a line of total Q centred at v0.

    Examples
    --------
    The profile is normalised: summed over the channels and multiplied by the channel width
    it gives back Q, with or without Hanning smoothing.

    >>> import numpy as np
    >>> velocity = np.linspace(-5.0, 5.0, 201)          # 0.05 km/s channels
    >>> for response in ("hanning", "none"):
    ...     density = profile_model(velocity, 2.0e27, 0.3, 0.8, 0.1, response)
    ...     print(f"{density.sum() * 0.05:.6g}")
    2e+27
    2e+27
    """
    dv = float(np.abs(np.median(np.diff(velocity))))
    shape = channel_fractions(velocity - v0, v_out, sigma_th)
    shape = np.convolve(shape, SPECTRAL_RESPONSES[spectral_response], mode="same")
    return q * shape / dv


def fit_line(velocity: np.ndarray, density: np.ndarray, v_out: float, sigma_th: float, window: float,
             spectral_response: str = "hanning", q_guess: float | None = None) -> LineFit:
    """Least-squares fit of Q and v0 to a stacked Q-density spectrum.

    Channels within ±(window + 3 channels) of 0 are excluded from the noise
    estimate; the fit uses the channels within 3 windows of 0.
    """
    velocity = np.asarray(velocity, dtype=float)
    density = np.asarray(density, dtype=float)
    ok = np.isfinite(density)
    dv = float(np.abs(np.median(np.diff(velocity))))
    free = line_free_mask(velocity, np.array([0.0]), window + 3 * dv, valid=ok)
    sigma = channel_sigma(density, free)
    try:
        wn = window_sum_noise(density, free, window_weights(velocity, window), min_windows=0)
        correction = max(1.0, wn.sigma / wn.sigma_naive)
    except Exception:  # too few line-free channels to measure the correlation: no correction
        correction = 1.0
    use = ok & (np.abs(velocity) <= 3 * window)
    v, y = velocity[use], density[use]
    q0 = q_guess if q_guess is not None else float(np.sum(y) * dv)

    def resid(p):
        return (profile_model(v, p[0], p[1], v_out, sigma_th, spectral_response) - y) / sigma

    res = least_squares(resid, x0=[q0, 0.0], bounds=([-np.inf, -window], [np.inf, window]),
                        x_scale=[abs(q0) if q0 else 1.0, dv])
    try:
        cov = np.linalg.inv(res.jac.T @ res.jac)
        err = np.sqrt(np.diag(cov)) * correction
    except np.linalg.LinAlgError:
        err = np.array([np.nan, np.nan])
    return LineFit(q=float(res.x[0]), q_err=float(err[0]), v_offset=float(res.x[1]), v_offset_err=float(err[1]),
                   noise_correction=float(correction), success=bool(res.success))


def line_moment(velocity: np.ndarray, density: np.ndarray, half_width: float,
                noise_window: float | None = None) -> tuple[float, float]:
    """First moment (centroid) of a line within +-``half_width`` km/s of 0, and its error.

    m1 = sum(v y) / sum(y) over the channels inside; the error propagates the channel noise (measured on the
    line-free channels beyond ``noise_window``, default ``half_width`` + 3 channels) through that ratio,
    sigma_m1^2 = sum(((v - m1) / sum(y))^2) sigma^2, scaled by the measured correlation of neighbouring channels
    (the window-sum noise over its white-noise value, as in :func:`fit_line`). Unlike the fitted centre of a
    symmetric template, the first moment is the emitters' mean line-of-sight velocity for any velocity
    distribution (an asymmetric outflow keeps the line's edges at +-v_out and moves only its weight).

    >>> v = np.linspace(-3, 3, 601)
    >>> y = np.exp(-0.5 * ((v - 0.2) / 0.3) ** 2)       # a Gaussian centred on 0.2 km/s
    >>> round(line_moment(v, y, 1.5)[0], 4)
    0.2
    """
    velocity = np.asarray(velocity, dtype=float)
    density = np.asarray(density, dtype=float)
    ok = np.isfinite(density)
    dv = float(np.abs(np.median(np.diff(velocity))))
    inside = ok & (np.abs(velocity) <= half_width)
    total = float(np.sum(density[inside]))
    if not inside.any() or total <= 0:
        return float("nan"), float("nan")
    m1 = float(np.sum(velocity[inside] * density[inside]) / total)
    free = line_free_mask(velocity, np.array([0.0]), (noise_window or half_width) + 3 * dv, valid=ok)
    try:
        sigma = channel_sigma(density, free)
        wn = window_sum_noise(density, free, window_weights(velocity, half_width), min_windows=0)
        correction = max(1.0, wn.sigma / wn.sigma_naive)
    except Exception:  # too few line-free channels: no error can be stated
        return m1, float("nan")
    err = float(np.sqrt(np.sum(((velocity[inside] - m1) / total) ** 2)) * sigma * correction)
    return m1, err
