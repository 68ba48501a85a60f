"""Stage 'forecast': predicted limits for planned epochs, beside what the campaign measured."""

from __future__ import annotations

import tempfile
from pathlib import Path
from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable
from astropy.time import Time

from pipeline.io.atomic import write_table
from pipeline.geometry.ephemeris import read_ephemeris
from pipeline.rates.forecast import PlannedEpoch, forecast_sigma, noise_subcube_header
from pipeline.geometry.observing import target_geometry
from pipeline.geometry.orbit import OrbitalElements
from pipeline.io.provenance import provenance_record
from pipeline.rates.statistics import bayesian_upper_limit, nsigma_to_confidence
from pipeline.workflow.common import catalogue_from_config, location_from_config, temperatures
from pipeline.workflow.extract import extraction_settings

__all__ = ["run", "planned_epochs"]


def planned_epochs(config: dict[str, Any]) -> list[PlannedEpoch]:
    """The config's ``planned`` entries."""
    out = []
    for p in config.get("planned", []):
        out.append(PlannedEpoch(label=p["label"], time=p["time"], lines=tuple(p["lines"]),
                                noise_jy_beam=float(p["noise_jy_beam"]), channel_khz=float(p["channel_khz"]),
                                beam_arcsec=tuple(float(b) for b in p["beam_arcsec"]),
                                pixel_arcsec=float(p.get("pixel_arcsec", p["beam_arcsec"][1] / 4)),
                                npix=int(p.get("npix", 96)),
                                half_width_km_s=float(config["comoving"]["half_width_km_s"])))
    return out


def run(budget_path: str, config: dict[str, Any], out_path: str, ephemeris_path: str | None = None) -> None:
    """Forecast every planned epoch; write forecast.ecsv (empty when nothing is planned)."""
    catalogue = catalogue_from_config(config)
    budget = QTable.read(budget_path, format="ascii.ecsv")
    base = budget[(budget["epoch"] == "all") & (budget["assumption_set"] == budget["assumption_set"][0])] \
        if len(budget) else budget
    cl = float(nsigma_to_confidence(config["limits"]["nsigma"]))
    t_all = temperatures(config).to_value(u.K)
    target = config["target"]
    ephem = read_ephemeris(target["ephemeris"]) if "ephemeris" in target else None
    elements = None if ephem is not None else OrbitalElements.from_mapping(target["elements"])
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for plan in planned_epochs(config):
            t = Time(plan.time, scale="utc")
            geo = target_geometry(Time([t, t]), what=f"planned epoch {plan.label}", ephemeris=ephem,
                                  elements=elements, location=location_from_config(config))
            geo = {k: v[0] for k, v in geo.items()}
            per_species: dict[str, list[np.ndarray]] = {}
            radii = None
            for line_id in plan.lines:
                line = catalogue.get_line(line_id)
                header, _ = noise_subcube_header(plan, line, geo)
                settings = extraction_settings(header, config, catalogue)
                sig = forecast_sigma(plan, line, geo, settings, catalogue, config, Path(tmp))
                per_species.setdefault(line.species, []).append(sig)
                radii = [r.to_value(u.km) if r.unit.physical_type == "length"
                         else (r.to_value(u.rad) * geo["delta"].to_value(u.km)) for r in settings.radii]
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
    table.meta["provenance"] = provenance_record(config, inputs, "forecast")
    write_table(table, out_path)
