"""What the line shapes say about the push: the momentum efficiency a detected line's centre allows.

If escaping gas drives the non-gravitational acceleration, the gas leaves preferentially against the push. In a
model where the outflow's mean velocity is zeta v_ej along the direction g opposite to the push (zeta the
momentum efficiency of the budget's momentum balance M a = zeta Mdot v_ej, v_ej the ejection speed), the mean
line-of-sight velocity of the escaping molecules, which is the first moment (the centre) of an optically thin
line, is

    v_los = zeta v_ej cos(theta),   cos(theta) = g . e,

with e the unit vector from the observer to the target (a positive v_los recedes from the observer). A measured
first moment v_moment +- sigma (:func:`pipeline.rates.line_fit.line_moment`; not the centre of a fitted symmetric
template, which an asymmetric outflow with its edges fixed at +-v_ej hardly moves) then gives
zeta = v_moment / (v_ej cos theta), with error sigma / (v_ej |cos theta|).
The push's direction comes from the non-gravitational parameters A1, A2, A3 (radial, transverse, normal:
a = A1 r + A2 t + A3 n with r the Sun-to-target direction, n along the orbital angular momentum, t = n x r);
without them, or without the target's velocity (no elements), the push is taken as radial (A1 > 0, pushed
away from the Sun), and the table says so.

The first moment equals the mean line-of-sight velocity for any velocity distribution of optically thin emitters
(the definition of the moment); that a finite aperture samples the outflow fairly is an assumption, as is a
single mean direction. The observer is placed at the geocentre for the direction of the Sun (an observer within
1.5 million km of the Earth changes the direction by less than 0.6 degrees).
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

from pipeline.budget.table import ejection_speed_at
from pipeline.geometry.observers import body_barycentric
from pipeline.geometry.orbit import heliocentric_state
from pipeline.rates.statistics import bayesian_upper_limit, inverse_variance_mean

if TYPE_CHECKING:
    from pipeline.budget.table import BudgetAssumptions
    from pipeline.catalogue import Catalogue
    from pipeline.geometry.orbit import OrbitalElements

__all__ = ["line_of_sight", "push_direction", "target_heliocentric", "zeta_from_offset", "UPPER_CONFIDENCE",
           "zeta_table", "offered_zeta"]

#: Confidence of the upper bound on zeta (one-sided).
UPPER_CONFIDENCE = 0.95


def line_of_sight(ra: u.Quantity, dec: u.Quantity) -> np.ndarray:
    """Unit vector (ICRS axes) from the observer towards (ra, dec)."""
    a, d = u.Quantity(ra, u.rad).value, u.Quantity(dec, u.rad).value
    return np.array([np.cos(d) * np.cos(a), np.cos(d) * np.sin(a), np.sin(d)])


def target_heliocentric(ra: u.Quantity, dec: u.Quantity, delta: u.Quantity, time: Time) -> np.ndarray:
    """The target's heliocentric position [km] from its direction and distance seen from the geocentre."""
    earth, _ = body_barycentric("earth", Time(time).reshape(-1))
    sun, _ = body_barycentric("sun", Time(time).reshape(-1))
    return earth[:, 0] - sun[:, 0] + u.Quantity(delta, u.km).value * line_of_sight(ra, dec)


def push_direction(r_helio: np.ndarray, v_helio: np.ndarray | None, a1: float, a2: float, a3: float) -> np.ndarray:
    """Unit vector of the push a = A1 r + A2 t + A3 n (ICRS axes); radial only when the velocity is unknown."""
    r_hat = np.asarray(r_helio, dtype=float) / np.linalg.norm(r_helio)
    if v_helio is None:
        vec = np.sign(a1 if a1 != 0 else 1.0) * r_hat
    else:
        n = np.cross(r_helio, v_helio)
        n_hat = n / np.linalg.norm(n)
        t_hat = np.cross(n_hat, r_hat)
        vec = a1 * r_hat + a2 * t_hat + a3 * n_hat
    return vec / np.linalg.norm(vec)


def zeta_from_offset(v_offset: float, v_err: float, v_ej: float, cos_theta: float,
                     min_cos: float = 0.2) -> dict:
    """The momentum efficiency a line-centre offset allows.

    Returns ``zeta``, ``zeta_err``, ``zeta_upper`` (95 %, the Bayesian bound for a flat prior on zeta >= 0, as
    for the production-rate limits: a shift the wrong way does not push the bound to zero) and ``reading``; NaN with
    a reading when |cos theta| < ``min_cos`` (the line of sight nearly across the push: the shift cannot tell).
    Speeds in km/s.

    >>> round(zeta_from_offset(0.3, 0.05, 0.6, 0.5)["zeta"], 6)
    1.0
    """
    if abs(cos_theta) < min_cos:
        return {"zeta": np.nan, "zeta_err": np.nan, "zeta_upper": np.nan,
                "reading": f"the line of sight lies nearly across the push (cos theta = {cos_theta:+.2f}): "
                           "the line shift cannot tell"}
    zeta = v_offset / (v_ej * cos_theta)
    err = v_err / (v_ej * abs(cos_theta))
    upper = float(bayesian_upper_limit(zeta, err, UPPER_CONFIDENCE))
    if zeta - 2 * err > 0:
        reading = f"the gas leaves against the push: zeta = {zeta:.2g} +- {err:.2g}"
    elif zeta + 2 * err < 0:
        reading = (f"the line shifts the wrong way for gas escaping against the push (zeta = {zeta:.2g} +- "
                   f"{err:.2g}): this species' outflow does not carry the push")
    else:
        reading = f"no significant shift: zeta < {upper:.2g} (95 %)"
    return {"zeta": float(zeta), "zeta_err": float(err), "zeta_upper": float(upper), "reading": reading}


def zeta_table(limits: QTable, geometry: list, elements: "OrbitalElements | None", assume: "BudgetAssumptions",
               catalogue: "Catalogue", rh: dict) -> QTable:
    """The momentum efficiency each detected line's centre allows, per epoch and combined over epochs.

    ``geometry`` holds the per-cube geometry rows (:func:`pipeline.geometry.observing.cube_geometry`), ``rh``
    the heliocentric distance of each epoch group; the ejection speed is the assumption set's, the push's
    direction its ``nongrav`` A1, A2, A3 with the elements' velocity (else radial).
    """
    geos: dict[str, list] = {}
    for g in geometry:
        geos.setdefault(str(g["epoch"]), []).append(g)
    ng = assume.nongrav or {"A1": 1.0, "A2": 0.0, "A3": 0.0}
    direction_from = ("A1, A2, A3 and the elements' velocity" if assume.nongrav and elements is not None else
                      "radial (assumed: " + ("no budget.nongrav" if not assume.nongrav else "no target.elements")
                      + ")")
    rows = []
    fitted = limits[np.isfinite(np.asarray(limits["v_moment_err"], dtype=float)) & np.asarray(limits["detected"], bool)]
    for species in dict.fromkeys(str(s) for s in fitted["species"]):
        per_epoch = []
        for epoch in sorted(geos):
            sel = fitted[(fitted["species"] == species) & (fitted["epoch"] == epoch)]
            if not len(sel):
                continue
            r = sel[int(np.argmin(np.asarray(sel["v_moment_err"], dtype=float)))]
            g = geos[epoch]
            time = Time(np.mean([x["time_mid"].mjd for x in g]), format="mjd", scale="utc")
            ra = float(np.mean([x["ra"].to_value(u.deg) for x in g])) * u.deg
            dec = float(np.mean([x["dec"].to_value(u.deg) for x in g])) * u.deg
            delta = float(np.mean([x["delta"].to_value(u.au) for x in g])) * u.au
            r_helio = target_heliocentric(ra, dec, delta, time)
            v_helio = None
            if assume.nongrav and elements is not None:
                v_helio = heliocentric_state(elements, time)[1].to_value(u.km / u.s)[:, 0]
            gas = -push_direction(r_helio, v_helio, float(ng["A1"]), float(ng["A2"]), float(ng["A3"]))
            cos_theta = float(np.dot(gas, line_of_sight(ra, dec)))
            v_ej = float(ejection_speed_at(assume, rh[epoch], catalogue.get_species(species).mass).to_value(u.km / u.s))
            z = zeta_from_offset(float(r["v_moment"].to_value(u.km / u.s)), float(r["v_moment_err"].to_value(u.km / u.s)),
                                 v_ej, cos_theta)
            per_epoch.append(z)
            rows.append({"species": species, "epoch": epoch, "aperture_km": float(r["aperture_km"].to_value(u.km)),
                         "v_moment": float(r["v_moment"].to_value(u.km / u.s)),
                         "v_moment_err": float(r["v_moment_err"].to_value(u.km / u.s)), "cos_theta": cos_theta,
                         "ejection_speed": v_ej, **z, "push_direction": direction_from})
        usable = [z for z in per_epoch if np.isfinite(z["zeta"])]
        if usable:
            mean, err = inverse_variance_mean(np.array([z["zeta"] for z in usable]),
                                              np.array([z["zeta_err"] for z in usable]))
            upper = float(bayesian_upper_limit(float(mean), float(err), UPPER_CONFIDENCE))
            rows.append({"species": species, "epoch": "all", "aperture_km": np.nan, "v_moment": np.nan,
                         "v_moment_err": np.nan, "cos_theta": np.nan, "ejection_speed": np.nan,
                         "zeta": float(mean), "zeta_err": float(err), "zeta_upper": upper,
                         "reading": f"epochs combined: zeta = {float(mean):.2g} +- {float(err):.2g}, "
                                    f"< {upper:.2g} (95 %)", "push_direction": direction_from})
    names = ["species", "epoch", "aperture_km", "v_moment", "v_moment_err", "cos_theta", "ejection_speed", "zeta",
             "zeta_err", "zeta_upper", "reading", "push_direction"]
    table = QTable(rows=[[r[n] for n in names] for r in rows], names=names) if rows else QTable(
        names=names, dtype=[str, str, float, float, float, float, float, float, float, float, str, str])
    for name, unit in (("aperture_km", u.km), ("v_moment", u.km / u.s), ("v_moment_err", u.km / u.s),
                       ("ejection_speed", u.km / u.s)):
        table[name] = u.Quantity(np.asarray(table[name], dtype=float), unit)
    return table


def offered_zeta(zeta: QTable, assume: "BudgetAssumptions") -> "BudgetAssumptions | None":
    """An assumption set at the largest efficiency the best-measured line shift allows, when it is below the
    baseline's (None otherwise, or when the bound is below 1 %, which the budget cannot use as an efficiency)."""
    combined = zeta[(zeta["epoch"] == "all") & np.isfinite(np.asarray(zeta["zeta_err"], dtype=float))] if len(
        zeta) else zeta
    if not len(combined):
        return None
    best = combined[int(np.argmin(np.asarray(combined["zeta_err"], dtype=float)))]
    upper = float(best["zeta_upper"])
    if not 0.01 <= upper < assume.efficiency:
        return None
    return replace(assume, name=f"line-shift zeta ({best['species']})", efficiency=upper)
