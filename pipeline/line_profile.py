"""Line profile of an optically thin, isotropically expanding coma seen through a small aperture.

Molecules flow out radially at speed v. Through an aperture much smaller than
the scale length, the column is dominated by gas along the line of sight with
density ∝ r^-2; the angle θ between the flow and the sky plane is then
uniformly distributed, so the line-of-sight velocity u = v sin θ follows the
arcsine distribution p(u) = 1 / (π sqrt(v² - u²)) on (-v, v). Thermal motion
broadens it by a Gaussian of dispersion sqrt(kT/m). The instrument's spectral
response (e.g. Hanning smoothing) is not included.
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np
from scipy.special import ndtr

__all__ = ["thermal_dispersion", "interval_probability", "channel_fractions", "window_fraction"]

_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(96)


def thermal_dispersion(t_kin: u.Quantity, mass: u.Quantity) -> u.Quantity:
    """One-dimensional thermal velocity dispersion sqrt(kT/m)."""
    return np.sqrt(const.k_B * u.Quantity(t_kin, u.K) / u.Quantity(mass)).to(u.km / u.s)


def interval_probability(lo: np.ndarray, hi: np.ndarray, v_out: float, sigma: float) -> np.ndarray:
    """Probability that the line-of-sight velocity lies in [lo, hi] (all in km/s, plain floats).

    Notes
    -----
    P = (1/π) ∫_{-π/2}^{π/2} [Φ((hi - v sin θ)/σ) - Φ((lo - v sin θ)/σ)] dθ,
    evaluated with 96-point Gauss-Legendre quadrature in θ (the integrand is
    smooth). With σ = 0 it is the arcsine law, (asin(hi/v) - asin(lo/v))/π.
    """
    lo = np.asarray(lo, dtype=float)[..., None]
    hi = np.asarray(hi, dtype=float)[..., None]
    theta = 0.5 * np.pi * _NODES
    u_los = v_out * np.sin(theta)
    if sigma > 0:
        vals = ndtr((hi - u_los) / sigma) - ndtr((lo - u_los) / sigma)
        return 0.5 * np.sum(_WEIGHTS * vals, axis=-1)
    # sigma = 0: closed form of the arcsine law
    a = np.clip(lo[..., 0] / v_out, -1, 1)
    b = np.clip(hi[..., 0] / v_out, -1, 1)
    return (np.arcsin(b) - np.arcsin(a)) / np.pi


def channel_fractions(velocity: np.ndarray, v_out: float, sigma: float) -> np.ndarray:
    """Fraction of the line flux falling in each channel (centres ``velocity``, equal widths), km/s."""
    velocity = np.asarray(velocity, dtype=float)
    dv = np.abs(np.median(np.diff(velocity)))
    return interval_probability(velocity - dv / 2, velocity + dv / 2, v_out, sigma)


def window_fraction(half_width: float, v_out: float, sigma: float) -> float:
    """Fraction of the line flux inside [-half_width, +half_width] (km/s)."""
    return float(interval_probability(np.array(-half_width), np.array(half_width), v_out, sigma))
