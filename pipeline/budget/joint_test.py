"""One joint test over all epochs: is the gas that the push needs there?

For a driver species and a nucleus mass M the push needs Q_req(t_e) at each
epoch (momentum balance with the acceleration at that epoch's r_h). The
measurements x_e ± σ_e test H0 "Q_e = Q_req,e" against H1 "0 ≤ Q_e ≤ Q_req,e"
(less gas than needed, the positivity-aware alternative) with the likelihood
ratio

    T = Σ_e [(x_e − Q_req,e)² − (x_e − clip(x_e, 0, Q_req,e))²] / σ_e²,

which is zero for epochs showing at least the required gas. Each term is 0 or a
χ²₁ variable with probability ½ each (a boundary at the null value, Chernoff
1954; Self & Liang 1987), so under H0 T follows the chi-bar-square mixture
P(T ≥ t) = Σ_k C(N,k) 2^-N P(χ²_k ≥ t). The p-value is turned into a one-sided
Gaussian significance. Q_req grows with M, so so does the significance; the
mass at which it reaches 3σ is where the hypothesis stops surviving.
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from scipy.optimize import brentq
from scipy.special import comb

__all__ = ["lr_statistic", "null_sf", "exclusion_significance", "mass_at_significance"]


def lr_statistic(x: np.ndarray, sigma: np.ndarray, q_req: np.ndarray) -> float:
    """The likelihood-ratio statistic T of H0 Q = Q_req against 0 <= Q <= Q_req."""
    x, s, q = (np.asarray(a, dtype=float) for a in (x, sigma, q_req))
    best = np.clip(x, 0.0, q)
    return float(np.sum(((x - q) ** 2 - (x - best) ** 2) / s**2))


def null_sf(t: float, n_epochs: int) -> float:
    """P(T >= t) under H0: the chi-bar-square mixture with binomial(N, 1/2) weights."""
    if t <= 0:
        return 1.0
    k = np.arange(1, n_epochs + 1)
    return float(np.sum(comb(n_epochs, k) * 0.5**n_epochs * stats.chi2.sf(t, k)))


def exclusion_significance(x: np.ndarray, sigma: np.ndarray, q_req: np.ndarray) -> float:
    """One-sided Gaussian significance Φ⁻¹(1 − p) at which H0 is excluded (0 when the data show enough gas)."""
    p = null_sf(lr_statistic(x, sigma, q_req), len(np.atleast_1d(x)))
    return float(max(0.0, stats.norm.isf(p))) if p < 0.5 else 0.0


def mass_at_significance(x: np.ndarray, sigma: np.ndarray, q_req_per_kg: np.ndarray, level: float = 3.0,
                         mass_range: tuple[float, float] = (1e3, 1e20)) -> float:
    """Nucleus mass at which the exclusion reaches ``level`` σ (Q_req = M × q_req_per_kg); NaN if never/always."""
    def f(log_m):
        return exclusion_significance(x, sigma, 10**log_m * np.asarray(q_req_per_kg)) - level

    lo, hi = np.log10(mass_range[0]), np.log10(mass_range[1])
    if f(lo) >= 0 or f(hi) < 0:
        return float("nan")
    return float(10 ** brentq(f, lo, hi, xtol=1e-6))
