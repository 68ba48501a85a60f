"""Activity-law fits across epochs: Q(r_h) = Q0 (r_h / 1 au)^-n.

With n fixed the model is linear in Q0, and Q0 ± σ follows in closed form
(weighted least squares); its upper limit respects Q0 ≥ 0 like the per-epoch
limits. With n free, (Q0, n) are fitted by least squares and the 1σ interval
of n is read off the profile χ²(n) = χ²_min + 1, reported only when the
epochs span enough r_h and the data constrain it (else NaN).
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.table import QTable
from scipy.optimize import brentq, minimize_scalar

from pipeline.errors import CoverageError
from pipeline.rates.statistics import bayesian_upper_limit

__all__ = ["ActivityFit", "fit_fixed_slope", "fit_free_slope", "free_slope_possible", "activity_table", "SLOPE_RANGE",
           "slope_bound"]

#: The range a free slope n is searched in; a best fit at one of its ends is no measurement of n.
SLOPE_RANGE = (-10.0, 20.0)


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
    at_bound: float = float("nan")   # the end of the search range the fitted n sits at (NaN: inside the range)


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


def free_slope_possible(r_h_au: np.ndarray) -> bool:
    """Whether the epochs allow a free slope: at least 3 of them, spread in r_h."""
    r = np.asarray(r_h_au, dtype=float)
    return bool(len(r) >= 3 and np.ptp(np.log(r)) >= 1e-3)


def slope_bound(n: float, n_range: tuple[float, float] = SLOPE_RANGE, tolerance: float = 1e-3) -> float:
    """The end of ``n_range`` a fitted slope ``n`` sits at (within ``tolerance``), NaN when it lies inside.

    A bounded minimiser that ends at an edge has found no minimum of the profile chi^2: the slope is then
    unconstrained in that direction, and the edge is a setting of the search, not a fitted value.
    """
    for edge in n_range:
        if np.isfinite(n) and abs(n - edge) <= tolerance * max(1.0, abs(edge)):
            return float(edge)
    return float("nan")


def fit_free_slope(q: np.ndarray, sigma: np.ndarray, r_h_au: np.ndarray, confidence: float,
                   n_range: tuple[float, float] = SLOPE_RANGE) -> ActivityFit:
    """Q0 and n both fitted; the 1σ interval of n from the profile χ² (Δχ² = 1), NaN where it is open."""
    q, s, r = (np.asarray(x, dtype=float) for x in (q, sigma, r_h_au))
    if not free_slope_possible(r):
        spread = f" at r_h {r.min():.6g}-{r.max():.6g} au" if r.size else ""
        msg = (f"a free activity slope needs at least 3 epochs spread in r_h (ln r_h over a range >= 1e-3), "
               f"found {r.size} epoch{'s' if r.size != 1 else ''}{spread}")
        raise CoverageError(msg)

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
                       fitted_slope=True, at_bound=slope_bound(n_best, n_range))


def activity_table(limits: QTable, epoch_rh: dict[str, float], slope: float, confidence: float) -> QTable:
    """Activity-law fits per species and aperture at the temperature conservative for 'all'.

    Parameters
    ----------
    limits : QTable
        The joined limits table (columns species, epoch, aperture_km, t_kin_K, q, q_err, conservative).
    epoch_rh : dict
        Mean heliocentric distance [au] of each epoch group.
    slope : float
        The fixed slope n of Q0 (r_h / au)^-n; a free slope is fitted too where :func:`free_slope_possible`.
    confidence : float
        One-sided confidence of the Q0 upper limit.
    """
    rows = []
    for species in dict.fromkeys(str(s) for s in limits["species"]):
        sel = limits[limits["species"] == species]
        for row in sel[(sel["epoch"] == "all") & sel["conservative"]]:
            ap, t = row["aperture_km"].to_value(u.km), row["t_kin_K"]
            ep = sel[(sel["epoch"] != "all") & np.isclose(sel["aperture_km"].to_value(u.km), ap)
                     & (sel["t_kin_K"] == t)]
            ep = ep[[str(e) in epoch_rh for e in ep["epoch"]]]
            if len(ep) < 2:
                continue
            q, s_ = ep["q"].to_value(1 / u.s), ep["q_err"].to_value(1 / u.s)
            r = np.array([epoch_rh[str(e)] for e in ep["epoch"]])
            fits_ = [fit_fixed_slope(q, s_, r, slope, confidence)]
            if free_slope_possible(r):
                fits_.append(fit_free_slope(q, s_, r, confidence))
            for f in fits_:
                rows.append({"species": species, "aperture_km": ap, "t_kin_K": t, "slope": "fitted" if
                             f.fitted_slope else "fixed", "n": f.n, "n_lo": f.n_lo, "n_hi": f.n_hi,
                             "n_constrained": bool(np.isfinite(f.n_lo) and np.isfinite(f.n_hi)),
                             "n_at_bound": f.at_bound, "q0": f.q0,
                             "q0_err": f.q0_err, "q0_upper": f.q0_upper, "chi2": f.chi2, "dof": f.dof,
                             "n_epochs": len(q), "r_h_min": float(r.min()), "r_h_max": float(r.max())})
    table = QTable(rows=rows) if rows else QTable(names=["species", "q0"], dtype=[str, float])
    for name in ("q0", "q0_err", "q0_upper"):
        if name in table.colnames:
            table[name] = np.asarray(table[name], dtype=float) / u.s
    table.meta["model"] = "Q(r_h) = Q0 (r_h / 1 au)^-n; n fixed (config limits.activity_slope) and fitted"
    table.meta["slope_range"] = list(SLOPE_RANGE)
    table.meta["n_at_bound"] = ("the end of slope_range a fitted n sits at (the chi^2 has no minimum inside it: n "
                                "unconstrained that way); NaN when n lies inside")
    return table
