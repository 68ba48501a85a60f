"""Stage 'injection': would the gas the push needs (or gas at the limit) have been seen? Per species, ECSV."""

from __future__ import annotations

import logging
from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable

from ..atomic import write_table
from ..injection import inject_spectra, placements
from ..provenance import provenance_record
from .common import catalogue_from_config, coma_model, temperatures
from .extract import extraction_settings
from .stack import stack_input

__all__ = ["run", "injection_levels"]

log = logging.getLogger(__name__)


def injection_levels(species: str, limits: QTable, budget: QTable) -> tuple[list[tuple[str, float]], float]:
    """The production rates to inject and the temperature to model them at.

    'limit': the species' combined upper limit (conservative temperature, smallest aperture); 'required': the
    rate it would need to carry the push alone for the lightest nucleus of the range.
    """
    sel = limits[(limits["species"] == species) & (limits["epoch"] == "all") & limits["conservative"]]
    levels, t_kin = [], 40.0
    if len(sel):
        row = sel[np.argmin(sel["aperture_km"].to_value(u.km))]
        levels.append(("limit", float(row["q_upper"].to_value(1 / u.s))))
        t_kin = float(row["t_kin_K"])
    baseline = budget["assumption_set"][0] if "assumption_set" in budget.colnames and len(budget) else None
    bsel = budget[(budget["species"] == species) & (budget["epoch"] == "all")
                  & ((budget["assumption_set"] == baseline) if baseline is not None else True)]
    if len(bsel) and np.isfinite(bsel["q_required_min"][0].value):
        levels.append(("required", float(bsel["q_required_min"][0].to_value(1 / u.s))))
    return levels, t_kin


def run(subcube_paths: list[str], species: str, limits_path: str, budget_path: str, config: dict[str, Any],
        out_path: str) -> None:
    """Inject, extract, measure and combine; write the per-placement results."""
    catalogue = catalogue_from_config(config)
    sp = catalogue.get_species(species)
    limits = QTable.read(limits_path, format="ascii.ecsv")
    budget = QTable.read(budget_path, format="ascii.ecsv")
    levels, t_kin = injection_levels(species, limits, budget)
    t_all = temperatures(config).to_value(u.K)
    it = int(np.argmin(np.abs(t_all - t_kin)))
    model = coma_model(config)
    rows = []
    covered = []
    for path in subcube_paths:
        if fits.getheader(path).get("GLCOVER", False):
            covered.append(path)
    for level, q in levels:
        groups: dict[tuple[int, int], list] = {}
        for path in covered:
            header = fits.getheader(path)
            settings = extraction_settings(header, config, catalogue)
            where = placements(path, settings)
            line = catalogue.get_line(header["GLLINE"])
            parent = catalogue.get_species(sp.parent) if sp.parent else None
            for k, hdul in enumerate(inject_spectra(path, settings, line, sp, q, t_kin * u.K, model, where,
                                                    parent)):
                inp, _ = stack_input(hdul, catalogue, config)
                vrank = sorted({p.v_centre for p in where}).index(where[k].v_centre)
                groups.setdefault((where[k].index, vrank), []).append(inp)
        for (index, vrank), members in sorted(groups.items()):
            w = np.array([1 / m.sigma_q[it] ** 2 for m in members])             # (n, n_ap)
            qs = np.array([m.q[it] for m in members])
            q_rec = (w * qs).sum(axis=0) / w.sum(axis=0)
            sig = 1 / np.sqrt(w.sum(axis=0))
            for j, radius in enumerate(members[0].radius_km):
                rows.append({"level": level, "q_injected": q, "t_kin_K": float(t_all[it]), "placement": index,
                             "velocity_slot": vrank, "aperture_km": float(radius), "q_recovered": q_rec[j],
                             "q_err": sig[j], "snr": q_rec[j] / sig[j], "n_spectra": len(members)})
        if groups:
            first = min(r["aperture_km"] for r in rows if r["level"] == level)
            snr = [r["snr"] for r in rows if r["level"] == level and r["aperture_km"] == first]
            what = "at its upper limit" if level == "limit" else "at the rate the push needs (lightest nucleus)"
            log.info("%s: a coma %s, Q = %.3g /s, would be seen at %.1f sigma (median; %.1f to %.1f over %d "
                     "placements, %.0f km aperture)", species, what, q, np.median(snr), np.min(snr), np.max(snr),
                     len(snr), first)
    table = QTable(rows=rows) if rows else QTable(names=["level", "q_injected", "snr"], dtype=[str, float, float])
    for name in ("q_injected", "q_recovered", "q_err"):
        if name in table.colnames:
            table[name] = table[name] / u.s
    if "aperture_km" in table.colnames:
        table["aperture_km"] = table["aperture_km"] * u.km
    table.meta["species"] = species
    table.meta["provenance"] = provenance_record(config, [*subcube_paths, limits_path, budget_path], "injection")
    write_table(table, out_path)
