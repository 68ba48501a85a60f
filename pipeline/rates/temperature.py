"""The rotational temperature measured from several lines of one species, and Q at any temperature.

The stack records, for every line (and band) that went in, its window estimate of Q at each temperature of the
sweep, with the model response and window capture that made it (the stack's INPUTS table). The measured
quantity behind those estimates does not depend on the temperature: the window-integrated flux
W = Q(T) R(T) f(T). Its model for a production rate Q is

    W_i = Q S_i(T),   S_i(T) = N_i sum_p F_p(T) f_p(T),

with N_i the molecules per unit Q the aperture counts on the model coma (independent of T), F_p the LTE flux per
molecule of line p (:func:`pipeline.coma.excitation.flux_per_molecule`: the Boltzmann population of its upper
level over the catalogue's partition function, and the cosmic background), f_p the share of its profile inside
the window, and p running over the line and the species' lines blended with it. The stack step computes S_i on
:data:`TEMPERATURE_GRID` (:func:`pipeline.rates.q_units.stack_input`); here it is interpolated in log-log. A
band's Q does not depend on T.

:func:`fit_temperature` fits T and Q jointly to the lines of one species (a rotational-temperature fit on the
full model rather than on a rotational diagram): for each T on a fine grid the best Q is linear least squares,
and T minimises the profile chi^2; the 68 % interval of T is where chi^2 rises by 1 (profile likelihood), and
sigma_Q is taken at the best T. :func:`q_at_temperature` gives every input's Q estimate at any T and their
inverse-variance combination, which the limits use at a measured or configured temperature.

References
----------
.. [1] Goldsmith, P. F. & Langer, W. D. 1999, ApJ 517, 209: population (rotational) diagrams and their
   relation to a full LTE fit (from memory).
.. [2] Press, W. H. et al. 2007, *Numerical Recipes*, 3rd ed., section 15.6: confidence intervals from
   Delta chi^2 = 1 for one parameter of interest, the others profiled (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.table import Table

from pipeline.catalogue import Catalogue
from pipeline.io.tables import cell_float

__all__ = ["WindowMeasure", "window_measures", "fit_temperature", "TemperatureFit", "q_at_temperature",
           "TEMPERATURE_GRID", "MIN_EU_SPREAD", "temperature_systematic", "adopted_temperature"]

#: Temperatures on which the profile chi^2 is evaluated [K] (log-spaced, refined by a parabola at the minimum).
TEMPERATURE_GRID = np.geomspace(5.0, 300.0, 241)
#: Least spread of upper-level energies [K] for lines to measure a temperature at all.
MIN_EU_SPREAD = 10.0


@dataclass(frozen=True)
class WindowMeasure:
    """One input of a stack (a line or a band in one cube) in one aperture: the measured window flux.

    ``flux`` and ``sigma`` are W and its error (Jy km/s for a line; Q units for a band, whose ``kind`` is
    'band'); ``curve`` is S(T) on :data:`TEMPERATURE_GRID` (W = Q S(T); blended lines of the species included).
    """

    epoch: str
    cube_id: str
    line_id: str
    aperture: str
    aperture_km: float
    kind: str
    flux: float
    sigma: float
    curve: np.ndarray | None
    distributed_ratio: float = float("nan")    # response under a distributed source over the nucleus one
    nonlte_curve: np.ndarray | None = None     # S(T) under the non-LTE comparison's excitation (None without it)

    def scale(self, t: np.ndarray, nonlte: bool = False) -> np.ndarray:
        """S(T) at the temperatures ``t`` [K] (log-log interpolation on the grid; 1 for a band); with ``nonlte``
        the comparison's non-LTE S(T) (NaN for a line without it)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        if self.kind == "band":
            return np.ones_like(t)
        curve = self.nonlte_curve if nonlte else self.curve
        if curve is None:
            return np.full_like(t, np.nan) if nonlte else np.ones_like(t)
        return np.exp(np.interp(np.log(t), np.log(TEMPERATURE_GRID), np.log(curve)))


def window_measures(inputs: Table, curves: Table | None) -> list[WindowMeasure]:
    """The stack's INPUTS table (and its CURVES) turned back into measured window fluxes, per input and aperture."""
    out: list[WindowMeasure] = []
    if "q" not in inputs.colnames or not len(inputs):
        return out
    found, found_nonlte = {}, {}
    if curves is not None and len(curves):
        for r in curves:
            key = (str(r["epoch"]), str(r["cube_id"]), str(r["line_id"]), str(r["aperture"]))
            found[key] = np.asarray(r["scale"], dtype=float)
            if "nonlte_scale" in curves.colnames and np.all(np.isfinite(r["nonlte_scale"])):
                found_nonlte[key] = np.asarray(r["nonlte_scale"], dtype=float)
    first: dict[tuple[str, str, str, str], int] = {}        # each input's row at the lowest temperature, one pass
    t_kin = np.asarray(inputs["t_kin"], dtype=float)
    for i, key in enumerate(zip(*(np.asarray(inputs[c], dtype=str) for c in ("epoch", "cube_id", "line_id",
                                                                             "aperture")))):
        key = tuple(str(k) for k in key)
        if key not in first or t_kin[i] < t_kin[first[key]]:
            first[key] = i
    for (epoch, cube_id, line_id, aperture), i in first.items():
        row = inputs[i]
        kind = str(row["kind"])
        q, sq = float(row["q"]), float(row["sigma_q"])
        if kind == "band":
            flux, sigma, curve = q, sq, None
        else:
            s = float(row["scale"])
            flux, sigma, curve = q * s, sq * s, found.get((epoch, cube_id, line_id, aperture))
            if curve is None:
                continue                  # a line without its response curve cannot be moved off the sweep
        ratio = cell_float(row["distributed_ratio"]) if "distributed_ratio" in row.colnames else float("nan")
        out.append(WindowMeasure(epoch=epoch, cube_id=cube_id, line_id=line_id, aperture=aperture,
                                 aperture_km=float(row["aperture_km"]), kind=kind, flux=flux, sigma=sigma,
                                 curve=curve, distributed_ratio=ratio,
                                 nonlte_curve=found_nonlte.get((epoch, cube_id, line_id, aperture))))
    return out


@dataclass(frozen=True)
class TemperatureFit:
    """A joint fit of T and Q to several lines of one species (one epoch group, one aperture)."""

    t_kin: float            # K, best fit
    t_lo: float             # K, 68 % interval (profile chi^2 + 1); the grid's end when open
    t_hi: float
    bounded: bool           # both ends of the interval inside the grid
    q: float                # 1/s at t_kin
    sigma_q: float
    chi2: float
    dof: int
    n_lines: int
    e_up_min: float         # K
    e_up_max: float


def _profile(measures: list[WindowMeasure], t: np.ndarray):
    flux = np.array([m.flux for m in measures])
    sigma = np.array([m.sigma for m in measures])
    scale = np.array([m.scale(t) for m in measures])                         # (n, n_T)
    w = 1.0 / sigma**2
    a = np.sum(w[:, None] * scale * scale, axis=0)
    b = np.sum(w[:, None] * scale * flux[:, None], axis=0)
    q = b / a
    chi2 = np.sum(w[:, None] * (flux[:, None] - q[None, :] * scale) ** 2, axis=0)
    return q, 1.0 / np.sqrt(a), chi2


def fit_temperature(measures: list[WindowMeasure], catalogue: Catalogue,
                    grid: np.ndarray = TEMPERATURE_GRID) -> TemperatureFit | None:
    """Fit T and Q to the line measures of one species; None when they cannot tell a temperature.

    The lines must span at least :data:`MIN_EU_SPREAD` in upper-level energy. Returns the best T (parabola
    through the three lowest grid points of the profile chi^2), the interval where chi^2 <= min + S^2 (its ends
    interpolated linearly; ``bounded`` False when it reaches an end of the grid), Q and sigma_Q at the best T
    (times S). S = sqrt(chi^2/dof) when the lines scatter more than their errors allow (chi^2/dof > 1), else 1:
    the scale factor of the Particle Data Group's averaging rule (Review of Particle Physics, Introduction,
    from memory), so a poor fit widens its own interval instead of claiming a precision it does not have.
    """
    lines = [m for m in measures if m.kind == "line"]
    if len(lines) < 2:
        return None
    e_up = np.array([catalogue.get_line(m.line_id).e_up.to_value(u.K) for m in lines])
    if np.ptp(e_up) < MIN_EU_SPREAD:
        return None
    t = np.asarray(grid, dtype=float)
    q, sq, chi2 = _profile(lines, t)
    k = int(np.argmin(chi2))
    best = t[k]
    if 0 < k < t.size - 1:                               # parabola in log T through the three lowest points
        x = np.log(t[k - 1:k + 2])
        c = np.polyfit(x, chi2[k - 1:k + 2], 2)
        if c[0] > 0:
            best = float(np.exp(np.clip(-c[1] / (2 * c[0]), x[0], x[2])))
    q_b, sq_b, chi2_b = (float(v[0]) for v in _profile(lines, np.array([best])))
    dof = len(lines) - 2
    # lines scattering more than their errors allow (chi2/dof > 1): errors scaled by S = sqrt(chi2/dof)
    scale2 = max(1.0, chi2_b / dof) if dof > 0 else 1.0
    level = min(chi2_b, float(chi2[k])) + scale2
    inside = chi2 <= level
    lo_i = k
    while lo_i > 0 and inside[lo_i - 1]:
        lo_i -= 1
    hi_i = k
    while hi_i < t.size - 1 and inside[hi_i + 1]:
        hi_i += 1

    def crossing(i_in: int, i_out: int) -> float:
        x0, x1 = np.log(t[i_in]), np.log(t[i_out])
        y0, y1 = chi2[i_in] - level, chi2[i_out] - level
        return float(np.exp(x0 + (x1 - x0) * (-y0) / (y1 - y0))) if y1 != y0 else float(t[i_in])

    bounded = lo_i > 0 and hi_i < t.size - 1
    t_lo = crossing(lo_i, lo_i - 1) if lo_i > 0 else float(t[0])
    t_hi = crossing(hi_i, hi_i + 1) if hi_i < t.size - 1 else float(t[-1])
    return TemperatureFit(t_kin=float(best), t_lo=min(t_lo, best), t_hi=max(t_hi, best), bounded=bool(bounded),
                          q=q_b, sigma_q=sq_b * np.sqrt(scale2), chi2=chi2_b, dof=dof, n_lines=len(lines),
                          e_up_min=float(e_up.min()), e_up_max=float(e_up.max()))


def q_at_temperature(measures: list[WindowMeasure], t: float, distributed: bool = False,
                     nonlte: bool = False) -> tuple[float, float, list[float], list[float]]:
    """Every measure's Q estimate at ``t`` [K] and their inverse-variance mean: (Q, sigma_Q, q_i, sigma_i).

    With ``distributed`` the estimates are under the distributed-source hypothesis (each divided by its
    ``distributed_ratio``; NaN when a measure has none). With ``nonlte`` they are under the non-LTE comparison's
    excitation at gas kinetic temperature ``t`` (each line's ``nonlte_curve``; NaN when a line has none).
    """
    ratio = [m.distributed_ratio if distributed else 1.0 for m in measures]
    q_i = [m.flux / float(m.scale(np.array([t]), nonlte)[0]) / r for m, r in zip(measures, ratio)]
    s_i = [m.sigma / float(m.scale(np.array([t]), nonlte)[0]) / r for m, r in zip(measures, ratio)]
    w = 1.0 / np.square(s_i)
    return float(np.sum(w * np.array(q_i)) / np.sum(w)), float(1.0 / np.sqrt(np.sum(w))), q_i, s_i


def temperature_systematic(measures: list[WindowMeasure], t: float, lo: float, hi: float) -> float:
    """The largest change of the combined Q between ``t`` and any temperature in [lo, hi] [K] (a systematic)."""
    q0 = q_at_temperature(measures, t)[0]
    grid = np.concatenate([[lo, hi], TEMPERATURE_GRID[(TEMPERATURE_GRID > lo) & (TEMPERATURE_GRID < hi)]])
    return float(max(abs(q_at_temperature(measures, float(x))[0] - q0) for x in grid))


def adopted_temperature(fits: Table, group: str, aperture: str,
                        configured: float | None = None) -> dict | None:
    """The temperature a detection in ``group`` and ``aperture`` is quoted at, and where it comes from.

    ``configured`` (the config's ``excitation.t_adopted_K``) wins. Otherwise the measured temperature (a fit
    of :func:`fit_temperature` with a closed interval), from the species whose interval is narrowest relative
    to its value, looked for in this order: this group and aperture; all epochs, this aperture; this group,
    any aperture; all epochs, any aperture (the ``source`` says which). None when nothing was measured: the
    detection is then quoted at the conservative temperature of the sweep.

    Returns a dict with ``t``, ``lo``, ``hi`` [K], ``origin`` ('configured' or 'measured') and ``source``
    (the species measured, with the group it was measured in).
    """
    if configured is not None:
        return {"t": float(configured), "lo": float("nan"), "hi": float("nan"), "origin": "configured",
                "source": "excitation.t_adopted_K"}
    if fits is None or not len(fits) or "bounded" not in fits.colnames:
        return None
    bounded = np.asarray(fits["bounded"], bool)
    for where, same_aperture in ((group, True), ("all", True), (group, False), ("all", False)):
        sel = fits[(fits["epoch"] == where) & bounded & ((fits["aperture"] == aperture) if same_aperture else True)]
        if len(sel):
            width = (np.asarray(sel["t_hi_K"], float) - np.asarray(sel["t_lo_K"], float)) / np.asarray(
                sel["t_kin_K"], float)
            row = sel[int(np.argmin(width))]
            kelvin = {k: float(u.Quantity(row[k], u.K).value) for k in ("t_kin_K", "t_lo_K", "t_hi_K")}
            return {"t": kelvin["t_kin_K"], "lo": kelvin["t_lo_K"], "hi": kelvin["t_hi_K"],
                    "origin": "measured", "source": f"{row['species']} ({where}, {row['aperture']})"}
    return None
