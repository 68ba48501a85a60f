"""Stage 'temperature': the rotational temperature of every species with lines of different upper energy."""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np
from astropy.table import QTable

from pipeline.io.atomic import write_table
from pipeline.io.products import SpeciesStack
from pipeline.io.provenance import provenance_record
from pipeline.rates.temperature import fit_temperature, window_measures
from pipeline.settings import Settings

__all__ = ["run", "TEMPERATURE_UNITS"]

log = logging.getLogger(__name__)
ALL = "all"
#: Units of the temperature table's columns.
TEMPERATURE_UNITS = {"aperture_km": u.km, "t_kin_K": u.K, "t_lo_K": u.K, "t_hi_K": u.K, "q": 1 / u.s,
                     "sigma_q": 1 / u.s, "e_up_min_K": u.K, "e_up_max_K": u.K}


def run(stack_paths: list[str], settings: Settings, out_path: str) -> None:
    """Fit T and Q to the lines of each species, per epoch group and aperture; write temperature.ecsv."""
    catalogue = settings.catalogue()
    rows = []
    for path in stack_paths:
        stack = SpeciesStack.from_fits(path)
        measures = [m for m in window_measures(stack.inputs, stack.curves) if m.kind == "line"]
        groups = sorted({m.epoch for m in measures})
        for group in groups + ([ALL] if measures else []):
            members = [m for m in measures if group in (ALL, m.epoch)]
            for label in dict.fromkeys(m.aperture for m in members):
                chosen = [m for m in members if m.aperture == label]
                fit = fit_temperature(chosen, catalogue)
                if fit is None:
                    continue
                rows.append({"species": stack.species, "epoch": group, "aperture": label,
                             "aperture_km": float(np.mean([m.aperture_km for m in chosen])), "t_kin_K": fit.t_kin,
                             "t_lo_K": fit.t_lo, "t_hi_K": fit.t_hi, "bounded": fit.bounded, "q": fit.q,
                             "sigma_q": fit.sigma_q, "chi2": fit.chi2, "dof": fit.dof, "n_lines": fit.n_lines,
                             "lines": ",".join(sorted({m.line_id for m in chosen})),
                             "e_up_min_K": fit.e_up_min, "e_up_max_K": fit.e_up_max})
                log.info("%s %s %s: T = %.1f K (%.1f-%.1f%s), Q = %.3g +- %.2g /s, chi2 = %.1f for %d dof, %d lines",
                         stack.species, group, label, fit.t_kin, fit.t_lo, fit.t_hi,
                         "" if fit.bounded else ", interval open", fit.q, fit.sigma_q, fit.chi2, fit.dof,
                         fit.n_lines)
    names = ["species", "epoch", "aperture", "aperture_km", "t_kin_K", "t_lo_K", "t_hi_K", "bounded", "q",
             "sigma_q", "chi2", "dof", "n_lines", "lines", "e_up_min_K", "e_up_max_K"]
    table = QTable(rows=[[r[n] for n in names] for r in rows], names=names) if rows else QTable(
        names=names, dtype=[str, str, str, float, float, float, float, bool, float, float, float, int, int, str,
                            float, float])
    for name, unit in TEMPERATURE_UNITS.items():
        table[name] = u.Quantity(np.asarray(table[name], dtype=float), unit)
    table.meta["method"] = ("joint fit of T and Q to a species' lines (LTE, blends modelled), profile chi^2 over "
                            "5-300 K, 68 % interval where chi^2 rises by 1 (bounded = both ends inside the grid)")
    table.meta["provenance"] = provenance_record(settings, stack_paths, "temperature")
    write_table(table, out_path)
