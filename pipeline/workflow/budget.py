"""Stage 'budget': budget.ecsv and budget.json from the limits and the per-cube geometry."""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np

from pipeline.io.atomic import write_json, write_table
from pipeline.budget.table import budget_table, dust_forces, epoch_distances, joint_exclusion, rocket_fraction
from pipeline.budget.line_shift import offered_zeta, zeta_table
from pipeline.budget.tracers import inferred_water
from pipeline.io.provenance import provenance_record
from pipeline.settings import Settings
from pipeline.io.tables import read_table, table_cache

__all__ = ["run"]

log = logging.getLogger(__name__)


def run(limits_path: str, geometry_paths: list[str], settings: Settings, out_ecsv: str, out_json: str,
        out_exclusion: str | None = None, dust_path: str | None = None, out_water: str | None = None,
        out_zeta: str | None = None) -> None:
    """Compute and write the budget tables (with the dust's push when budget.include_dust is set), and the water
    inferred from tracers (``out_water``; empty without budget.water_from_tracers).

    Without a measured acceleration (``settings.budget.missing``) no epoch can be judged: budget.ecsv and
    exclusion.ecsv are written without rows (same columns), the line-shift efficiencies and the tracers' water
    still are, and budget.json lists what is missing and which key gives it.
    """
    limits = read_table(limits_path)
    include_dust = settings.budget.include_dust
    forces = dust_forces(dust_path, include_dust)
    sets = list(settings.budget.assumption_sets)
    assume = sets[0]
    missing, defaulted = list(settings.budget.missing), list(settings.budget.defaulted)
    for sentence in missing:
        log.info("budget: %s", sentence)
    for sentence in defaulted:
        log.info("budget: %s", sentence)
    geometry = [read_table(p, table_cache(settings.outdir))[0] for p in geometry_paths]
    rh = epoch_distances(geometry)
    judged = {} if missing else rh           # the epochs a verdict is computed for: none without the push
    catalogue = settings.catalogue()
    zeta = zeta_table(limits, geometry, settings.target.elements, assume, catalogue, rh)
    offered = offered_zeta(zeta, assume) if not missing else None
    if offered is not None:
        sets.append(offered)
    table = budget_table(limits, judged, sets, catalogue, forces)
    record = provenance_record(settings, [limits_path, *geometry_paths, *([dust_path] if dust_path else [])], "budget")
    table.meta["provenance"] = record
    table.meta["missing"] = missing
    table.meta["defaulted"] = defaulted
    table.meta["assumptions"] = dict(assume.as_dict(), dust=(
        "the dust's momentum rate (dust.ecsv, largest aperture) pays for part of the push first" if include_dust
        else "not included (budget.include_dust: false)"))
    table.meta["assumption_sets"] = [a.as_dict() for a in sets]
    write_table(table, out_ecsv)
    joint = joint_exclusion(limits, judged, assume, catalogue)
    joint.meta["provenance"] = record
    if out_exclusion is not None:
        write_table(joint, out_exclusion)
    combined = table[(table["epoch"] == "all") & (table["assumption_set"] == assume.name)]
    water = catalogue.get_species("H2O").mass if isinstance(assume.ejection, dict) else None
    summary = {
        "campaign": settings.campaign,
        "assumptions": table.meta["assumptions"],
        "dust_force_N": {k: float(v.to_value(u.N)) for k, v in forces.items()},
        "missing": missing,
        "defaulted": defaulted,
        "rocket_mass_fraction_over_interval": None if missing else rocket_fraction(assume, rh["all"], water),
        "assumption_sets": [a.as_dict() for a in sets],
        "verdicts_by_assumption_set": [
            {"assumption_set": str(r["assumption_set"]), "species": str(r["species"]), "verdict": str(r["verdict"]),
             "ratio_required_to_limit": [None if not np.isfinite(r["ratio_min"]) else float(r["ratio_min"]),
                                         None if not np.isfinite(r["ratio_max"]) else float(r["ratio_max"])]}
            for r in table[table["epoch"] == "all"]],
        "drivers": [
            {"species": str(r["species"]), "verdict": str(r["verdict"]),
             "q_upper_per_s": None if not np.isfinite(r["q_upper"].value) else float(r["q_upper"].value),
             "q_required_per_s": [float(r["q_required_min"].value), float(r["q_required_max"].value)],
             "ratio_required_to_limit": [None if not np.isfinite(r["ratio_min"]) else float(r["ratio_min"]),
                                         None if not np.isfinite(r["ratio_max"]) else float(r["ratio_max"])],
             "largest_mass_allowed_kg": None if not np.isfinite(r["mass_allowed"].value)
             else float(r["mass_allowed"].value)}
            for r in combined],
        "joint_test": {"mass_at_3sigma_kg": joint.meta["mass_at_3sigma_kg"], "test": joint.meta["test"],
                       "reading": "below this nucleus mass the hypothesis that the species alone carries the push "
                                  "survives at 3 sigma; above it the data exclude it"},
        "caution": ("These numbers rest on the stated model assumptions (LTE, optically thin lines, Haser "
                    "outflow, momentum balance with the given efficiency and ejection speed). They are not "
                    "conclusions: those belong to peer review."),
        "provenance": record,
    }
    write_json(summary, out_json)
    if out_zeta is not None:
        zeta.meta["model"] = ("v_offset = zeta v_ej cos(theta), theta between the line of sight and the direction "
                              "opposite to the push (pipeline.budget.line_shift)")
        zeta.meta["provenance"] = record
        write_table(zeta, out_zeta)
    if out_water is not None:
        tracers = settings.budget.water_from_tracers
        missing = [t.species for t in tracers if t.species not in set(str(x) for x in limits["species"])]
        if missing:
            log.warning("water_from_tracers: %s not among the campaign's measured species; no inference from them",
                        ", ".join(missing))
        water = inferred_water(limits, table, tracers)
        water.meta["provenance"] = record
        write_table(water, out_water)
