"""Activity-law fits across epochs: Q(r_h) = Q0 (r_h / 1 au)^-n.

With n fixed the model is linear in Q0, and Q0 ± σ follows in closed form
(weighted least squares); its upper limit respects Q0 ≥ 0 like the per-epoch
limits. With n free, (Q0, n) are fitted by least squares and the 1σ interval
of n is read off the profile χ²(n) = χ²_min + 1, reported only when the
epochs span enough r_h and the data constrain it (else NaN).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from pipeline.rates.statistics import bayesian_upper_limit

__all__ = ["ActivityFit", "fit_fixed_slope", "fit_free_slope"]


@dataclass(frozen=True)
class ActivityFit:
    """Q0 (at 1 au) with its error and upper limit, and the slope n (with its 1σ interval when fitted)."""

    q0: float
    q0_err: float
    q0_upper: float
    n: float
    n_lo: float
    n_hi: float
    chi2: float
    dof: int
    fitted_slope: bool


def _q0_for_slope(q, s, r, n):
    f = r ** (-n)
    w = 1 / s**2
    den = np.sum(w * f**2)
    q0 = np.sum(w * q * f) / den
    chi2 = float(np.sum(w * (q - q0 * f) ** 2))
    return q0, 1 / np.sqrt(den), chi2


def fit_fixed_slope(q: np.ndarray, sigma: np.ndarray, r_h_au: np.ndarray, n: float,
                    confidence: float) -> ActivityFit:
    """Q0 for a fixed slope n; Q0 = Σ w q f / Σ w f², σ = (Σ w f²)^-1/2, f = r^-n, w = 1/σ²."""
    q, s, r = (np.asarray(x, dtype=float) for x in (q, sigma, r_h_au))
    q0, err, chi2 = _q0_for_slope(q, s, r, n)
    return ActivityFit(q0=float(q0), q0_err=float(err), q0_upper=float(bayesian_upper_limit(q0, err, confidence)),
                       n=float(n), n_lo=np.nan, n_hi=np.nan, chi2=chi2, dof=len(q) - 1, fitted_slope=False)


def fit_free_slope(q: np.ndarray, sigma: np.ndarray, r_h_au: np.ndarray, confidence: float,
                   n_range: tuple[float, float] = (-10.0, 20.0)) -> ActivityFit:
    """Q0 and n both fitted; the 1σ interval of n from the profile χ² (Δχ² = 1), NaN where it is open."""
    q, s, r = (np.asarray(x, dtype=float) for x in (q, sigma, r_h_au))
    if len(q) < 3 or np.ptp(np.log(r)) < 1e-3:
        msg = "a free slope needs at least 3 epochs spread in r_h"
        raise ValueError(msg)

    def prof(n):
        return _q0_for_slope(q, s, r, n)[2]

    best = minimize_scalar(prof, bounds=n_range, method="bounded", options={"xatol": 1e-6})
    n_best, chi2_min = float(best.x), float(best.fun)
    target = chi2_min + 1.0

    def edge(lo, hi):
        try:
            return brentq(lambda n: prof(n) - target, lo, hi) if prof(lo) > target or prof(hi) > target else np.nan
        except ValueError:
            return np.nan

    n_lo = edge(n_range[0], n_best) if prof(n_range[0]) > target else np.nan
    n_hi = edge(n_best, n_range[1]) if prof(n_range[1]) > target else np.nan
    q0, err, _ = _q0_for_slope(q, s, r, n_best)
    return ActivityFit(q0=float(q0), q0_err=float(err), q0_upper=float(bayesian_upper_limit(q0, err, confidence)),
                       n=n_best, n_lo=float(n_lo), n_hi=float(n_hi), chi2=chi2_min, dof=len(q) - 2,
                       fitted_slope=True)
