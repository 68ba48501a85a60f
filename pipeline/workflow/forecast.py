"""Stage 'forecast': predicted limits for planned epochs, beside what the campaign measured."""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

from pipeline.io.atomic import write_table
from pipeline.geometry.ephemeris import check_observer, check_spacing, read_ephemeris
from pipeline.rates.forecast import forecast_sigma
from pipeline.geometry.observing import target_geometry
from pipeline.coma.response import outflow_speed
from pipeline.io.provenance import provenance_record
from pipeline.rates.statistics import bayesian_upper_limit, nsigma_to_confidence
from pipeline.settings import Settings
from pipeline.spectra.line_spectra import extraction_settings
from pipeline.io.tables import read_table

__all__ = ["run"]

log = logging.getLogger(__name__)


def run(budget_path: str, settings: Settings, out_path: str) -> None:
    """Forecast every planned epoch; write forecast.ecsv (empty when nothing is planned)."""
    catalogue = settings.catalogue()
    filtering = settings.interferometer
    budget = read_table(budget_path)
    base = budget[(budget["epoch"] == "all") & (budget["assumption_set"] == budget["assumption_set"][0])] \
        if len(budget) else budget
    if not len(budget) and settings.planned:
        log.info("forecast: the budget has no rows (%s); the planned epochs are forecast without the Q the push "
                 "needs", "; ".join(budget.meta.get("missing", [])) or "no verdict was computed")
    cl = float(nsigma_to_confidence(settings.limits.nsigma))
    t_all = settings.t_kin.to_value(u.K)
    target = settings.target
    ephemeris_path = target.ephemeris
    ephem = read_ephemeris(ephemeris_path) if ephemeris_path is not None else None
    if ephem is not None:
        check_spacing(ephem)                            # warns (in the log) when the table is too coarse
        check_observer(ephem, settings.observer_of())
    elements = target.elements
    rows = []
    for plan in settings.planned:
        t = Time(plan.time, scale="utc")
        geo = target_geometry(Time([t, t]), what=f"planned epoch {plan.label}", ephemeris=ephem,
                              elements=elements, observer=settings.observer_of())
        geo = {k: v[0] for k, v in geo.items()}
        per_species: dict[str, list[np.ndarray]] = {}
        radii = None
        for line_id in plan.lines:
            line = catalogue.get_line(line_id)
            v_out = outflow_speed(settings.coma, float(geo["r_h"].to_value(u.au)) * u.au)
            what = extraction_settings(line, catalogue, settings.apertures,
                                       settings.limits.window_factor * v_out, settings.half_width,
                                       settings.quality.max_masked_share)
            sig = forecast_sigma(plan, line, geo, what, catalogue, settings.t_kin, settings.coma,
                                 filtering.shortest_baseline if filtering else None,
                                 filtering.correct if filtering else True)
            per_species.setdefault(line.species, []).append(sig)
            radii = [r.to_value(u.km) if r.unit.physical_type == "length"
                     else (r.to_value(u.rad) * geo["delta"].to_value(u.km)) for r in what.radii]
        for species, sigmas in per_species.items():
            sigma = 1 / np.sqrt(np.sum([1 / s**2 for s in sigmas], axis=0))          # inverse-variance lines
            bsel = base[base["species"] == species] if len(base) else base
            q_req = float(bsel["q_required_min"][0].to_value(1 / u.s)) if len(bsel) else np.nan
            for i, tk in enumerate(t_all):
                for j, r in enumerate(radii):
                    rows.append({"epoch": plan.label, "time": plan.time, "species": species,
                                 "aperture_km": float(r), "t_kin_K": float(tk), "sigma_q": sigma[i, j],
                                 "q_upper_forecast": float(bayesian_upper_limit(0.0, sigma[i, j], cl)),
                                 "q_required_min": q_req, "significance_required": q_req / sigma[i, j],
                                 "r_h": float(geo["r_h"].to_value(u.au)),
                                 "delta": float(geo["delta"].to_value(u.au)),
                                 "n_lines": len(sigmas)})
    table = QTable(rows=rows) if rows else QTable(names=["epoch", "species", "sigma_q"], dtype=[str, str, float])
    for name in ("sigma_q", "q_upper_forecast", "q_required_min"):
        if name in table.colnames:
            table[name] = np.asarray(table[name], dtype=float) / u.s
    table.meta["method"] = ("the measurement code on noise-only sub-cubes of the planned noise, channel width and "
                            "beam (4 realisations, RMS of sigma_Q); q_upper_forecast is the limit for a measured Q of 0")
    inputs = [budget_path] + ([ephemeris_path] if ephemeris_path else [])
    table.meta["provenance"] = provenance_record(settings, inputs, "forecast")
    write_table(table, out_path)
