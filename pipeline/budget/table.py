"""The mass budget: what the measured push demands of the gas, against what the gas limits allow.

For every driver species and epoch group, the production rate the push needs
(momentum balance M a = ζ Ṁ v_ej, all mass loss in that one species) is set
against the measured upper limit, over the nucleus-mass range. A driver with no
measurement is reported as 'not observed', never as excluded.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import astropy.units as u
import numpy as np
from astropy.table import QTable

from pipeline.catalogue.entries import Catalogue
from pipeline.errors import ConfigError
from pipeline.coma.haser import outflow_speed_law
from pipeline.io.tables import cell_float, read_table
from pipeline.budget.momentum import (LATENT_HEAT, max_bulk_density, max_nucleus_mass,
                          nongrav_acceleration, required_mass_loss_rate, required_production_rate,
                          rocket_mass_fraction, sublimation_area_required, thermal_ejection_speed)

__all__ = ["BudgetAssumptions", "epoch_distances", "dust_forces", "joint_exclusion", "acceleration_at", "ejection_speed_at",
           "budget_table", "rocket_fraction", "VERDICTS", "BUDGET_COLUMNS"]

VERDICTS = ("not observed", "excluded for every mass in the range", "excluded above the allowed mass",
            "not excluded")


@dataclass(frozen=True)
class BudgetAssumptions:
    """Every assumption the budget rests on, with its value."""

    acceleration: tuple[float, float] | None     # m/s^2: value, sigma
    nongrav: dict | None                         # A1, A2, A3 in au/d^2
    radius_km: tuple[float, float] | None
    density_kg_m3: tuple[float, float] | None
    mass_kg: tuple[float, float]
    ejection: str | float | dict                 # 'law', km/s, or {'thermal_K': T}
    efficiency: float
    interval_days: float
    drivers: tuple[str, ...]
    name: str = "baseline"
    g_params: dict | None = None                 # a variant g(r): r0_au, m, n, k
    nucleus_from: str = "radius and density"

    def as_dict(self) -> dict[str, Any]:
        """Plain mapping for JSON and the report."""
        return {"assumption_set": self.name, "nucleus_from": self.nucleus_from, "g_law_variant": self.g_params,
                "acceleration_m_s2": self.acceleration, "nongrav_au_d2": self.nongrav,
                "nucleus_radius_km": self.radius_km, "bulk_density_kg_m3": self.density_kg_m3,
                "nucleus_mass_kg": self.mass_kg, "ejection_speed_km_s": self.ejection,
                "momentum_efficiency": self.efficiency, "interval_days": self.interval_days,
                "drivers": list(self.drivers),
                "momentum_balance": "M a = zeta Mdot v_ej, all mass loss in one species at a time",
                "sublimation": "energy-limited, all absorbed sunlight pays the latent heat (no re-radiation)"}


def acceleration_at(assume: BudgetAssumptions, r_h: u.Quantity) -> tuple[u.Quantity, u.Quantity]:
    """Acceleration magnitude and its error at heliocentric distance ``r_h``."""
    if assume.acceleration is not None:
        return assume.acceleration[0] * u.m / u.s**2, assume.acceleration[1] * u.m / u.s**2
    ng = assume.nongrav
    if ng is None:
        msg = ("budget: neither acceleration_m_s2 nor nongrav is given; expected the measured non-gravitational "
               "acceleration (budget.acceleration_m_s2: [value, sigma] in m/s^2, or budget.nongrav: {A1, A2, A3})")
        raise ConfigError(msg)
    unit = u.au / u.day**2
    law = {}
    if assume.g_params:
        gp = assume.g_params
        law = {"r0": gp["r0_au"] * u.au, "m": gp["m"], "n": gp["n"], "k": gp["k"], "normalise": True}
    a = nongrav_acceleration(ng["A1"] * unit, ng["A2"] * unit, ng["A3"] * unit, u.Quantity(r_h, u.au), **law)
    return a.to(u.m / u.s**2), 0 * u.m / u.s**2


def ejection_speed_at(assume: BudgetAssumptions, r_h: u.Quantity,
                      molecular_mass: u.Quantity | None = None) -> u.Quantity:
    """Gas ejection speed: the configured value, the outflow law at ``r_h``, or a species' thermal speed."""
    if assume.ejection == "law":
        return outflow_speed_law(u.Quantity(r_h, u.au)).to(u.km / u.s)
    if isinstance(assume.ejection, dict):
        if molecular_mass is None:
            msg = ("budget.ejection_speed_km_s = {'thermal_K': ...} needs the molecular mass of the species, found "
                   "none; expected a species from the catalogue")
            raise ConfigError(msg)
        return thermal_ejection_speed(assume.ejection["thermal_K"] * u.K, molecular_mass).to(u.km / u.s)
    return float(assume.ejection) * u.km / u.s


def _verdict(q_upper: float, m_allowed: float, m_min: float, m_max: float) -> str:
    if not np.isfinite(q_upper):
        return VERDICTS[0]
    if m_allowed < m_min:
        return VERDICTS[1]
    if m_allowed < m_max:
        return VERDICTS[2]
    return VERDICTS[3]


#: The budget table's columns and their types, in order (a table without rows carries the same columns).
BUDGET_COLUMNS = {
    "assumption_set": str, "species": str, "epoch": str, "r_h": float, "acceleration": float,
    "acceleration_err": float, "ejection_speed": float, "mdot_required_min": float, "mdot_required_max": float,
    "q_required_min": float, "q_required_max": float, "q_upper": float, "t_kin_K": float, "aperture_km": float,
    "detected": bool, "ratio_min": float, "ratio_max": float, "mass_allowed": float, "density_allowed_rmin": float,
    "density_allowed_rmax": float, "sunlit_area_ratio_min": float, "sunlit_area_ratio_max": float,
    "dust_force": float, "verdict": str,
}


def budget_table(limits: QTable, epoch_rh: dict[str, u.Quantity], assume: BudgetAssumptions | list,
                 catalogue: Catalogue, dust_force: dict[str, u.Quantity] | None = None) -> QTable:
    """One row per driver species and epoch group: required Q, limit, ratios, allowed mass, verdict.

    Parameters
    ----------
    limits : QTable
        The limits table (columns of :data:`pipeline.rates.limits_table.LIMIT_COLUMNS`).
    epoch_rh : dict
        Heliocentric distance of each epoch group, including ``'all'``.
    assume : BudgetAssumptions or list of them
        One row per assumption set (column ``assumption_set``).
    catalogue : Catalogue
        For the molecular masses.
    dust_force : dict, optional
        Largest push the dust can give at each epoch group (N): the gas then has to supply only
        M a - F_dust (never less than zero), so Mdot_gas = max(M a - F_dust, 0) / (zeta v) and the
        largest mass a limit allows is (zeta v Q m + F_dust) / a. Groups not in the dict get 0.
    """
    sets = assume if isinstance(assume, list) else [assume]
    measured = list(dict.fromkeys(str(s) for s in limits["species"]))
    species = list(dict.fromkeys(list(sets[0].drivers) + measured))
    m_min, m_max = (x * u.kg for x in sets[0].mass_kg)
    rows_of: dict[tuple[str, str], list[int]] = {}          # each species' and epoch group's rows of limits
    for i, key in enumerate(zip(np.asarray(limits["species"], dtype=str).tolist(),
                                np.asarray(limits["epoch"], dtype=str).tolist())):
        rows_of.setdefault(key, []).append(i)
    q_upper_all = limits["q_upper"].to_value(1 / u.s)
    rows = []
    for aset, name, (group, r_h) in ((a, n, g) for a in sets for n in species for g in epoch_rh.items()):
        mol = catalogue.get_species(name).mass.to(u.kg)
        a, a_err = acceleration_at(aset, r_h)
        v_ej = ejection_speed_at(aset, r_h, mol)
        f_dust = u.Quantity((dust_force or {}).get(group, 0 * u.N), u.N)
        if not np.isfinite(f_dust.value):
            f_dust = 0 * u.N
        mdot = required_mass_loss_rate(u.Quantity([m_min, m_max]), a, v_ej, aset.efficiency)
        mdot = np.maximum(mdot - (f_dust / (aset.efficiency * v_ej)).to(u.kg / u.s), 0 * u.kg / u.s)
        q_req = required_production_rate(mdot, mol).to_value(1 / u.s)
        sel = np.asarray(rows_of.get((str(name), str(group)), []), dtype=int)
        if len(sel):
            k = int(sel[int(np.argmax(q_upper_all[sel]))])
            q_up = float(q_upper_all[k])
            t_best, ap_best = cell_float(limits["t_kin_K"][k], u.K), float(limits["aperture_km"][k].to_value(u.km))
            m_allowed = float((max_nucleus_mass(q_up / u.s, mol, a, v_ej, aset.efficiency)
                               + f_dust / a).to_value(u.kg)) if a > 0 else np.inf
            detected = bool(np.any(limits["detected"][sel]))
        else:
            q_up = t_best = ap_best = m_allowed = np.nan
            detected = False
        rho_max = [np.nan, np.nan]
        if aset.radius_km is not None and np.isfinite(m_allowed):
            rho_max = [float(max_bulk_density(m_allowed * u.kg, r * u.km).to_value(u.kg / u.m**3))
                       for r in aset.radius_km]
        area_ratio = [np.nan, np.nan]
        if name in LATENT_HEAT and aset.radius_km is not None:
            need = sublimation_area_required(mdot, u.Quantity(r_h, u.au), LATENT_HEAT[name])
            cross = np.pi * (u.Quantity(aset.radius_km, u.km)) ** 2
            area_ratio = list((need / cross).decompose().value)
        rows.append({
            "assumption_set": aset.name, "species": name, "epoch": group, "r_h": float(u.Quantity(r_h, u.au).value),
            "acceleration": a.to_value(u.m / u.s**2), "acceleration_err": a_err.to_value(u.m / u.s**2),
            "ejection_speed": v_ej.to_value(u.km / u.s),
            "mdot_required_min": mdot[0].to_value(u.kg / u.s), "mdot_required_max": mdot[1].to_value(u.kg / u.s),
            "q_required_min": q_req[0], "q_required_max": q_req[1], "q_upper": q_up,
            "t_kin_K": t_best, "aperture_km": ap_best, "detected": detected,
            "ratio_min": q_req[0] / q_up if np.isfinite(q_up) else np.nan,
            "ratio_max": q_req[1] / q_up if np.isfinite(q_up) else np.nan,
            "mass_allowed": m_allowed, "density_allowed_rmin": rho_max[0], "density_allowed_rmax": rho_max[1],
            "sunlit_area_ratio_min": area_ratio[0], "sunlit_area_ratio_max": area_ratio[1],
            "dust_force": f_dust.to_value(u.N),
            "verdict": _verdict(q_up, m_allowed, m_min.value, m_max.value),
        })
    table = QTable(rows=rows) if rows else QTable(names=list(BUDGET_COLUMNS), dtype=list(BUDGET_COLUMNS.values()))
    units = {"r_h": u.au, "acceleration": u.m / u.s**2, "acceleration_err": u.m / u.s**2,
             "ejection_speed": u.km / u.s, "mdot_required_min": u.kg / u.s, "mdot_required_max": u.kg / u.s,
             "q_required_min": 1 / u.s, "q_required_max": 1 / u.s, "q_upper": 1 / u.s, "aperture_km": u.km,
             "mass_allowed": u.kg, "dust_force": u.N, "density_allowed_rmin": u.kg / u.m**3, "density_allowed_rmax": u.kg / u.m**3}
    for name, unit in units.items():
        table[name] = table[name] * unit
    return table


def rocket_fraction(assume: BudgetAssumptions, r_h: u.Quantity, molecular_mass: u.Quantity | None = None) -> float:
    """Fraction of the nucleus mass spent over the interval (Tsiolkovsky), at ``r_h``.

    ``molecular_mass`` is needed only for a thermal ejection speed.
    """
    a, _ = acceleration_at(assume, r_h)
    return float(rocket_mass_fraction(a, assume.interval_days * u.day, ejection_speed_at(assume, r_h, molecular_mass),
                                      assume.efficiency))



def _epoch_measurements(limits: QTable, species: str) -> tuple[list[str], np.ndarray, np.ndarray, float, float]:
    """Per-epoch Q and σ at the temperature and (smallest) aperture that are conservative for 'all'."""
    sel = limits[(limits["species"] == species)]
    comb = sel[(sel["epoch"] == "all") & sel["conservative"]]
    if not len(comb):
        return [], np.array([]), np.array([]), np.nan, np.nan
    ap = float(np.min(comb["aperture_km"].to_value(u.km)))
    t = cell_float(comb[np.argmin(comb["aperture_km"].to_value(u.km))]["t_kin_K"], u.K)
    rows = sel[(sel["epoch"] != "all") & np.isclose(sel["aperture_km"].to_value(u.km), ap)
               & (u.Quantity(sel["t_kin_K"], u.K).value == t)]
    return ([str(e) for e in rows["epoch"]], rows["q"].to_value(1 / u.s), rows["q_err"].to_value(1 / u.s), t, ap)


def joint_exclusion(limits: QTable, epoch_rh: dict[str, u.Quantity], assume: BudgetAssumptions,
                    catalogue: Catalogue, n_mass: int = 41) -> QTable:
    """The joint test of "the push's gas is there" over all epochs, per measured driver, across nucleus masses.

    One row per species and mass on a log grid spanning a decade either side of the mass range, with the
    exclusion significance; the meta holds, per species, the mass at which the exclusion reaches 3σ.
    """
    from pipeline.budget.joint_test import exclusion_significance, mass_at_significance

    lo, hi = assume.mass_kg
    masses = np.logspace(np.log10(lo) - 1, np.log10(hi) + 1, n_mass)
    rows, crossing = [], {}
    for name in dict.fromkeys(list(assume.drivers) + [str(s) for s in limits["species"]]):
        epochs, x, s, t_kin, ap = _epoch_measurements(limits, name)
        epochs_known = [e for e in epochs if e in epoch_rh]
        if not epochs_known:
            continue
        keep = [epochs.index(e) for e in epochs_known]
        x, s = x[keep], s[keep]
        mol = catalogue.get_species(name).mass.to(u.kg)
        per_kg = []
        for e in epochs_known:
            a, _ = acceleration_at(assume, epoch_rh[e])
            v = ejection_speed_at(assume, epoch_rh[e], mol)
            per_kg.append(float((a / (assume.efficiency * v * mol)).to_value(1 / (u.s * u.kg))))
        per_kg = np.array(per_kg)
        for m in masses:
            rows.append({"species": name, "mass": m, "significance": exclusion_significance(x, s, m * per_kg),
                         "n_epochs": len(x), "t_kin_K": t_kin, "aperture_km": ap})
        crossing[name] = mass_at_significance(x, s, per_kg, 3.0, (masses[0] * 1e-3, masses[-1] * 1e3))
    table = QTable(rows=rows) if rows else QTable(names=["species", "mass", "significance", "n_epochs", "t_kin_K",
                                                          "aperture_km"], dtype=[str, float, float, int, float, float])
    table["mass"] = np.asarray(table["mass"], dtype=float) * u.kg
    table.meta["mass_at_3sigma_kg"] = {k: (None if not np.isfinite(v) else v) for k, v in crossing.items()}
    table.meta["test"] = ("likelihood ratio of Q_e = Q_req(t_e) against 0 <= Q_e <= Q_req(t_e) over all epochs, "
                          "chi-bar-square null distribution; one-sided Gaussian significance")
    table.meta["assumption_set"] = assume.name
    return table


def epoch_distances(rows: list) -> dict[str, u.Quantity]:
    """Mean heliocentric distance of each epoch group and of all cubes ('all'), from the cubes' geometry rows."""
    groups: dict[str, list[float]] = {}
    for r in rows:
        groups.setdefault(str(r["epoch"]), []).append(float(r["r_h"].to_value(u.au)))
    out = {g: float(np.mean(v)) * u.au for g, v in sorted(groups.items())}
    out["all"] = float(np.mean([x for v in groups.values() for x in v])) * u.au
    return out


def dust_forces(dust_path: str | None, include: bool) -> dict[str, u.Quantity]:
    """The dust's largest push per epoch group (N) from dust.ecsv, at the largest aperture; empty unless included."""
    if not include or dust_path is None:
        return {}
    dust = read_table(dust_path)
    out: dict[str, u.Quantity] = {}
    if "momentum_rate" not in dust.colnames:
        return out
    for group in dict.fromkeys(str(e) for e in dust["epoch"]):
        sel = dust[dust["epoch"] == group]
        row = sel[int(np.argmax(sel["aperture_km"].to_value(u.km)))]
        if np.isfinite(row["momentum_rate"].value):
            out[group] = u.Quantity(row["momentum_rate"], u.N)
    return out
