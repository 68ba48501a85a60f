"""Noise of aperture spectra: line-free channels, baselines, and the empirical noise of a window sum.

Correlator output is correlated between neighbouring channels (e.g. Hanning
smoothing), so the noise of a sum over N channels is not sigma * sqrt(N). It is
measured here directly: the same-width window is slid over every line-free
stretch of the spectrum and the scatter of those sums is taken. The naive
sigma * sqrt(N) is returned beside it for comparison.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from pipeline.errors import CoverageError, CubeError, NoiseWarning

__all__ = ["line_free_mask", "fit_baseline", "baseline_polynomial", "window_sums", "channel_sigma", "WindowNoise", "window_sum_noise",
           "window_weights", "CONSTANT_RTOL"]


#: Line-free channels whose values spread by no more than this fraction of their size are taken as constant.
CONSTANT_RTOL = 1e-5


def line_free_mask(velocity: np.ndarray, line_velocities: np.ndarray, exclude_half_width: float,
                   valid: np.ndarray | None = None) -> np.ndarray:
    """Channels farther than ``exclude_half_width`` from every line position (all in km/s).

    ``valid`` (optional) marks the channels with usable data; the others are never line-free.
    A channel within rounding (1e-9 of the channel step) of the exclusion edge counts as on it, and so
    is excluded, whichever way the axis runs and however its velocities were rounded.

    Raises
    ------
    CubeError
        When ``valid`` is given and marks no channel at all (e.g. an all-NaN cube).
    """
    velocity = np.asarray(velocity, dtype=float)
    step = float(np.median(np.abs(np.diff(velocity)))) if velocity.size > 1 else 0.0
    edge = exclude_half_width + 1e-9 * max(step, abs(exclude_half_width))
    free = np.ones(velocity.shape, dtype=bool)
    for v in np.atleast_1d(line_velocities):
        free &= np.abs(velocity - v) > edge
    if valid is not None:
        valid = np.asarray(valid, dtype=bool)
        if valid.size and not valid.any():
            msg = (f"none of the {valid.size} channels has usable data (each holds blank/NaN values where it is "
                   "measured: an all-NaN cube, or a mask over the target); expected finite pixel values")
            raise CubeError(msg)
        free &= valid
    return free


def fit_baseline(velocity: np.ndarray, spectrum: np.ndarray, free: np.ndarray, order: int = 1) -> np.ndarray:
    """Least-squares polynomial of ``order`` through the line-free channels, evaluated everywhere.

    Raises
    ------
    CoverageError
        When too few line-free channels are left for the fit.
    CubeError
        When the line-free channels all hold the same value (to a relative
        :data:`CONSTANT_RTOL`): constant data (blank, zero-filled, a model
        without noise) carry no noise to measure, and every noise figure and
        limit made from them would be zero or rounding error.
    """
    ok = free & np.isfinite(spectrum)
    if ok.sum() <= order + 1:
        msg = f"only {int(ok.sum())} line-free channels; expected more than {order + 1} to fit a baseline"
        raise CoverageError(msg)
    vals = np.asarray(spectrum, dtype=float)[ok]
    if np.ptp(vals) <= CONSTANT_RTOL * np.max(np.abs(vals)):
        msg = (f"all {vals.size} line-free channels of the spectrum hold the same value ({vals[0]:.6g}): the data "
               "are constant and carry no noise to measure; expected noisy data (a blank, zero-filled or "
               "noise-free cube cannot give a noise estimate or a limit)")
        raise CubeError(msg)
    return baseline_polynomial(velocity, spectrum, ok, order)


def window_sums(flux: np.ndarray, weights: np.ndarray, dv: float) -> np.ndarray:
    """The weighted window sum, sum w F dv over the channels (last axis) where w > 0; a blank channel inside the
    window makes that sum NaN (never counted as zero), one outside it does not count."""
    weights = np.asarray(weights, dtype=float)
    return np.sum(np.where(weights > 0, flux, 0.0) * weights, axis=-1) * dv


def baseline_polynomial(velocity: np.ndarray, spectrum: np.ndarray, ok: np.ndarray, order: int = 1) -> np.ndarray:
    """The least-squares polynomial of :func:`fit_baseline` through the channels ``ok``, without its checks of the
    data: a linear map of ``spectrum``, so also the baseline a noise-free model contributes to data it is added to
    (injection-recovery)."""
    x = (velocity - velocity[ok].mean()) / max(np.ptp(velocity[ok]), 1e-30)
    coef = np.polyfit(x[ok], np.asarray(spectrum, dtype=float)[ok], order)
    return np.polyval(coef, x)


def channel_sigma(spectrum: np.ndarray, free: np.ndarray) -> float:
    """Standard deviation of the line-free channels (ddof = 1)."""
    vals = spectrum[free & np.isfinite(spectrum)]
    if vals.size < 3:
        msg = f"only {vals.size} line-free channels; expected at least 3 to estimate the noise"
        raise CoverageError(msg)
    return float(np.std(vals, ddof=1))


def window_weights(velocity: np.ndarray, half_width: float, centre: float = 0.0) -> np.ndarray:
    """Fraction of each channel inside [centre - half_width, centre + half_width].

    Channels are taken as bins of width |dv| around their centres; partial
    channels at the window edges get fractional weights, so the window sum
    times |dv| is the flux-conserving integral over exactly the window.
    Fractions within 1e-9 of 0 or 1 (a window edge on a channel edge, up to
    the rounding of the channel velocities) are set to 0 or 1, so that a
    rounding sliver never adds a channel to the window: the window, and the
    noise kernel made from it, are then the same whichever way the axis runs.
    """
    velocity = np.asarray(velocity, dtype=float)
    dv = np.abs(np.median(np.diff(velocity)))
    lo = velocity - dv / 2
    hi = velocity + dv / 2
    overlap = np.clip(np.minimum(hi, centre + half_width) - np.maximum(lo, centre - half_width), 0, None)
    frac = overlap / dv
    frac[frac < 1e-9] = 0.0
    frac[frac > 1 - 1e-9] = 1.0
    return frac


@dataclass(frozen=True)
class WindowNoise:
    """Noise of a window sum measured from line-free windows."""

    sigma: float          # empirical scatter of line-free window sums (same weights as the real window)
    sigma_naive: float    # channel sigma times sqrt(sum of squared weights)
    n_windows: int        # number of line-free window positions used
    n_independent: int    # number of non-overlapping windows among them


def window_sum_noise(spectrum: np.ndarray, free: np.ndarray, weights: np.ndarray,
                     min_windows: int = 10) -> WindowNoise:
    """Empirical noise of sum(weights * spectrum) from line-free placements of the same window.

    The weight pattern (non-zero run of ``weights``) is slid across the
    spectrum; every placement whose channels are all line-free and finite gives
    one noise sample. Their standard deviation about zero mean (the baseline was
    removed) is the window noise.

    Warns
    -----
    NoiseWarning
        When fewer than ``min_windows`` independent placements exist.
    """
    nz = np.flatnonzero(weights > 0)
    kernel = weights[nz.min():nz.max() + 1]
    n = kernel.size
    good = free & np.isfinite(spectrum)
    vals = np.where(good, spectrum, 0.0)
    if good.sum() < n:
        msg = f"only {int(good.sum())} line-free channels for a window of {n} channels"
        raise CoverageError(msg)
    sums = np.correlate(vals, kernel, mode="valid")
    all_good = np.correlate(good.astype(float), np.ones(n), mode="valid") >= n - 0.5
    samples = sums[all_good]
    if samples.size < 2:
        msg = f"no two line-free placements of a {n}-channel window; expected a wider line-free band"
        raise CoverageError(msg)
    # independent placements: greedy non-overlapping choice
    starts = np.flatnonzero(all_good)
    independent, last = 0, -n
    for s in starts:
        if s >= last + n:
            independent += 1
            last = s
    if independent < min_windows:
        warnings.warn(f"the window noise rests on {independent} independent line-free windows "
                      f"(fewer than {min_windows}); its own uncertainty is about "
                      f"{100 / np.sqrt(2 * max(independent, 1)):.0f} %", NoiseWarning, stacklevel=2)
    sigma = float(np.sqrt(np.mean(samples**2)))
    naive = channel_sigma(spectrum, free) * float(np.sqrt(np.sum(kernel**2)))
    return WindowNoise(sigma=sigma, sigma_naive=naive, n_windows=int(samples.size),
                       n_independent=int(independent))
