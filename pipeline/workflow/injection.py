"""Stage 'injection': would the gas the push needs (or gas at the limit) have been seen? Per species, ECSV.

Two steps. :func:`run_epoch` measures, once per epoch and species, every injection placement of the epoch's
cubes: the data there and the model coma per unit rate, at each temperature of the sweep (the measurement is
linear: :mod:`pipeline.rates.line_injection`). :func:`run` reads those per-epoch tables and, for the rates known
only once every epoch is combined (the limit, the rate the push needs), sums data + q x model and combines the
cubes of each placement: a new epoch costs its own measurements and a combination of tables.
"""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np
from astropy.table import QTable, vstack

from pipeline.io.atomic import write_table
from pipeline.rates.band_injection import inject_band, ring_positions
from pipeline.io.cubes import open_data, read_cube_info
from pipeline.errors import CoverageError
from pipeline.rates.line_injection import Q_UNIT, placement_kind, placements, unit_injections
from pipeline.rates.stacking import StackInput, shared_apertures
from pipeline.spectra.apertures import aperture_labels
from pipeline.rates.statistics import inverse_variance_mean
from pipeline.spectra.band_windows import band_setup, band_windows
from pipeline.io.products import BandMeasurements, EpochInputs, SubCube
from pipeline.io.provenance import provenance_record
from pipeline.spectra.ir_spectra import F_LAMBDA
from pipeline.coma.response import nonlte_settings, outflow_speed
from pipeline.rates.excitation_water import epoch_water, model_with_water
from pipeline.rates.q_units import stack_input
from pipeline.settings import Settings
from pipeline.spectra.line_spectra import extraction_settings
from pipeline.io.tables import cell_float, read_table, table_cache

__all__ = ["run", "run_epoch", "injection_levels", "EPOCH_COLUMNS"]

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
        t_kin = cell_float(row["t_kin_K"], u.K)
    baseline = budget["assumption_set"][0] if "assumption_set" in budget.colnames and len(budget) else None
    bsel = budget[(budget["species"] == species) & (budget["epoch"] == "all")
                  & ((budget["assumption_set"] == baseline) if baseline is not None else True)]
    if len(bsel) and np.isfinite(bsel["q_required_min"][0].value):
        levels.append(("required", float(bsel["q_required_min"][0].to_value(1 / u.s))))
    elif not len(budget):
        log.info("%s: no injection at the rate the push needs: the budget has no rows (%s)", species,
                 "; ".join(budget.meta.get("missing", [])) or "no verdict was computed")
    return levels, t_kin


#: The per-epoch table: one row per cube, line or band, placement, temperature and aperture.
EPOCH_COLUMNS = ("epoch", "cube_id", "line_id", "instrument", "placement", "velocity_slot", "t_kin_K", "aperture",
                 "aperture_km", "q_data", "q_per_q", "q_err")


def _band_rows(bands_paths: list[str], species: str, settings: Settings,
               stacked: set[tuple[str, str]] | None = None) -> list[dict]:
    """Band injections of rate :data:`Q_UNIT` in every infrared cube of ``species``, per unit rate (rows).

    The band measurement is differenced (with minus without the injection), so the data's own part is zero and
    the result does not depend on the temperature: the same row is written at each temperature of the sweep.
    """
    catalogue, model, ir = settings.catalogue(), settings.coma, settings.infrared
    sp = catalogue.get_species(species)
    entries = {c.cube_id: c for c in settings.cubes}
    t_all = settings.t_kin.to_value(u.K)
    rows = []
    for path in bands_paths:
        measured = BandMeasurements.from_fits(path)
        bands = measured.bands
        if "species" not in bands.colnames:
            continue
        info = read_cube_info(entries[measured.cube_id].path, entries[measured.cube_id].beam_arcsec)
        obs = info.wavelengths
        radii_pix = list(np.asarray(measured.apertures["radius_pix"], dtype=float))
        radii_km = np.asarray(measured.apertures["radius_km"], dtype=float)
        labels = aperture_labels(measured.apertures)
        ids = [str(b) for b in dict.fromkeys(bands["band_id"][(bands["species"] == species) & bands["covered"]])
               if stacked is None or (measured.cube_id, str(b)) in stacked]
        if not ids:
            continue
        windows = band_windows(obs, catalogue, ids, measured.doppler, measured.resolving_power, ir.margin_fwhm)
        with open_data(info.path) as data:               # where the cube holds data in every channel
            footprint = np.all(np.isfinite(data), axis=0)
        where = ring_positions(info.shape[1:], measured.centre[0], measured.centre[1], max(radii_pix),
                               footprint=footprint)
        for band_id in ids:
            free, shape = band_setup(band_id, windows, obs, ir.continuum_factor, ir.continuum_shape)
            results = inject_band(info, catalogue.get_band(band_id), sp, Q_UNIT / u.s, where, radii_pix,
                                  measured.r_h_au * u.au, measured.delta_au * u.au, measured.doppler,
                                  measured.resolving_power, windows[band_id][2:], free, measured.sigma * F_LAMBDA,
                                  model, ir.continuum_order, shape, dq_bad_bits=settings.quality.dq_bad_bits,
                                  max_masked_share=settings.quality.max_masked_share)
            for res in results:
                for t in t_all:
                    for j, label in enumerate(labels):
                        rows.append({"epoch": measured.epoch, "cube_id": measured.cube_id, "line_id": band_id,
                                     "instrument": "infrared", "placement": res.index, "velocity_slot": 0,
                                     "t_kin_K": float(t), "aperture": label, "aperture_km": float(radii_km[j]),
                                     "q_data": 0.0, "q_per_q": float(res.q_recovered[j]) / Q_UNIT,
                                     "q_err": float(res.q_err[j])})
    return rows


def run_epoch(subcube_paths: list[str], species: str, epoch: str, settings: Settings, out_path: str,
              bands_paths: list[str] | None = None, stack_inputs_path: str | None = None,
              water_path: str | None = None) -> None:
    """Measure every injection placement of one epoch's cubes of ``species``; write the per-epoch table.

    Millimetre lines are injected into their sub-cubes (``subcube_paths``) at velocities away from the real
    lines; infrared bands into their cubes (via ``bands_paths``) at sky positions, differenced
    (:mod:`pipeline.rates.band_injection`). With the epoch's stack inputs (``stack_inputs_path``,
    :func:`pipeline.workflow.stack.run_epoch`), only the lines and bands the stack combines are injected (not a
    line left out for a window that overlaps another's, or for blank channels). Nothing here depends on other
    epochs or on the rates to inject. Under model nonlte the model comae are excited at the epoch's water
    production rate, measured (``water_path``, the epoch's H2O stack inputs) or configured, as the stack's are
    (:func:`pipeline.rates.excitation_water.epoch_water`).
    """
    stacked = None
    if stack_inputs_path is not None:
        stacked = {(i.cube_id, i.line_id) for i in EpochInputs.from_fits(stack_inputs_path).inputs}
    catalogue = settings.catalogue()
    sp = catalogue.get_species(species)
    parent = catalogue.get_species(sp.parent) if sp.parent else None
    model = settings.coma
    if nonlte_settings(model) is not None:
        model = model_with_water(model, epoch_water(settings, species, epoch, water_path))
    filtering = settings.interferometer

    def to_q_units(spectra):
        return stack_input(spectra, catalogue, settings.t_kin, model,
                           filtering.shortest_baseline if filtering else None,
                           filtering.correct if filtering else True, response_curve=False)

    t_all = settings.t_kin.to_value(u.K)
    rows = []
    covered = [sub for sub in map(SubCube.from_fits, subcube_paths) if sub.meta.covered
               and (stacked is None or (sub.meta.cube_id, sub.meta.line_id) in stacked)]
    for sub in covered:
        if sub.meta.epoch != epoch:
            msg = (f"{sub.name}: the sub-cube belongs to epoch {sub.meta.epoch!r}, expected {epoch!r} (the "
                   "injection of one epoch reads that epoch's sub-cubes only)")
            raise CoverageError(msg)
        line = catalogue.get_line(sub.meta.line_id)
        v_out = outflow_speed(model, sub.meta.r_h)
        radii = settings.apertures_of(settings.with_cube(sub.meta.cube_id).cube)
        what = extraction_settings(line, catalogue, radii, settings.limits.window_factor * v_out,
                                   settings.half_width, settings.quality.max_masked_share)
        for unit in unit_injections(sub, what, line, sp, settings.t_kin, model, placements(sub, what), to_q_units,
                                    parent):
            for i, t in enumerate(t_all):
                for j, label in enumerate(unit.apertures):
                    rows.append({"epoch": epoch, "cube_id": sub.meta.cube_id, "line_id": line.line_id,
                                 "instrument": "millimetre", "placement": unit.placement.index,
                                 "velocity_slot": unit.velocity_slot, "t_kin_K": float(t), "aperture": label,
                                 "aperture_km": float(unit.radius_km[j]), "q_data": float(unit.q_data[i, j]),
                                 "q_per_q": float(unit.q_per_q[i, j]), "q_err": float(unit.sigma_q[i, j])})
    rows.extend(_band_rows(list(bands_paths or []), species, settings, stacked))
    table = QTable(rows=rows, names=EPOCH_COLUMNS) if rows else QTable(
        names=EPOCH_COLUMNS, dtype=[str, str, str, str, int, int, float, str, float, float, float, float])
    table["t_kin_K"].unit = u.K
    table["aperture_km"].unit = u.km
    for name in ("q_data", "q_err"):
        table[name].unit = 1 / u.s
    table.meta["species"] = species
    table.meta["epoch"] = epoch
    table.meta["provenance"] = provenance_record(settings, [*subcube_paths, *(bands_paths or []),
                                                          *([stack_inputs_path] if stack_inputs_path else [])],
                                                 "injection")
    log.info("%s, epoch %s: %d placements measured in %d sub-cubes and %d bands files", species, epoch,
             len({(r["cube_id"], r["line_id"], r["placement"], r["velocity_slot"]) for r in rows}), len(covered),
             len(bands_paths or []))
    write_table(table, out_path)


def _placement_inputs(table: QTable, q: float, t_kin: float) -> dict[tuple[str, int, int], list[StackInput]]:
    """Per (instrument, placement, velocity slot): one input per epoch, cube and line, recovered at rate ``q``
    (the data's measurement plus ``q`` times the model's), at the sweep temperature ``t_kin`` [K]."""
    t = np.asarray(u.Quantity(table["t_kin_K"], u.K).value, dtype=float)
    q_rec = (np.asarray(u.Quantity(table["q_data"], 1 / u.s).value, dtype=float)
             + q * np.asarray(table["q_per_q"], dtype=float))
    err = np.asarray(u.Quantity(table["q_err"], 1 / u.s).value, dtype=float)
    radius = np.asarray(u.Quantity(table["aperture_km"], u.km).value, dtype=float)
    columns = [np.asarray(table[c]).tolist() for c in ("instrument", "placement", "velocity_slot", "epoch",
                                                         "cube_id", "line_id")]
    members: dict[tuple, list[int]] = {}
    for k in np.flatnonzero(np.isclose(t, t_kin)):
        key = (str(columns[0][k]), int(columns[1][k]), int(columns[2][k]), str(columns[3][k]), str(columns[4][k]),
               str(columns[5][k]))
        members.setdefault(key, []).append(int(k))
    groups: dict[tuple[str, int, int], list[StackInput]] = {}
    for (instrument, index, slot, epoch, cube_id, line_id), rows in members.items():
        groups.setdefault((instrument, index, slot), []).append(StackInput(
            epoch=epoch, cube_id=cube_id, line_id=line_id, velocity=None, density=None, q=q_rec[rows][None, :],
            sigma_q=err[rows][None, :], radius_km=radius[rows],
            apertures=tuple(str(a) for a in table["aperture"][rows])))
    return groups


def run(epoch_paths: list[str], species: str, limits_path: str, budget_path: str, settings: Settings,
        out_path: str) -> None:
    """Recover the injections of the limit and of the rate the push needs from the per-epoch tables; combine.

    Members of one placement (instrument, placement index, velocity slot) are combined over the cubes, lines and
    epochs like the real stack; millimetre lines and infrared bands stay apart.
    """
    limits = read_table(limits_path)
    budget = read_table(budget_path)
    levels, t_kin = injection_levels(species, limits, budget)
    t_all = settings.t_kin.to_value(u.K)
    it = int(np.argmin(np.abs(t_all - t_kin)))
    tables = [read_table(p, table_cache(settings.outdir)) for p in epoch_paths]
    for t in tables:
        t.meta.clear()
    measured = vstack(tables) if tables else QTable()
    rows = []
    cubes: dict[str, set] = {}
    for level, q in levels:
        groups = _placement_inputs(measured, q, float(t_all[it])) if len(measured) else {}
        for (instrument, index, vrank), members in sorted(groups.items()):
            cubes.setdefault(instrument, set()).update(m.cube_id for m in members)
            members, _ = shared_apertures(members, f"injection of {species}")
            q_rec, sig = inverse_variance_mean(np.array([m.q[0] for m in members]),          # (n, n_ap)
                                               np.array([m.sigma_q[0] for m in members]), axis=0)
            for j, radius in enumerate(members[0].radius_km):
                rows.append({"level": level, "q_injected": q, "t_kin_K": float(t_all[it]), "instrument": instrument,
                             "placement_kind": placement_kind(index), "placement": index,
                             "velocity_slot": vrank, "aperture_km": float(radius), "q_recovered": q_rec[j],
                             "q_err": sig[j], "snr": q_rec[j] / sig[j], "n_spectra": len(members)})
        for instrument in sorted({key[0] for key in groups}):
            mine = [r for r in rows if r["level"] == level and r["instrument"] == instrument]
            first = min(r["aperture_km"] for r in mine)
            snr = [r["snr"] for r in mine if r["aperture_km"] == first]
            what = "at its upper limit" if level == "limit" else "at the rate the push needs (lightest nucleus)"
            log.info("%s, %s: a coma %s, Q = %.3g /s, would be seen at %.1f sigma (median; %.1f to %.1f over %d "
                     "placements, %.0f km aperture)", species, instrument, what, q, np.median(snr), np.min(snr),
                     np.max(snr), len(snr), first)
    table = QTable(rows=rows) if rows else QTable(names=["level", "q_injected", "snr"], dtype=[str, float, float])
    for name in ("q_injected", "q_recovered", "q_err"):
        if name in table.colnames:
            table[name] = table[name] / u.s
    if "aperture_km" in table.colnames:
        table["aperture_km"] = table["aperture_km"] * u.km
    table.meta["species"] = species
    table.meta["instrument_cubes"] = {k: sorted(v) for k, v in sorted(cubes.items())}
    table.meta["provenance"] = provenance_record(settings, [*epoch_paths, limits_path, budget_path], "injection")
    table.meta["bands"] = ("infrared bands: injected at the nucleus and on a ring of sky positions; recovered = "
                           "measurement with minus without the injection (the estimator is linear)")
    table.meta["lines"] = ("millimetre lines: injected at velocities away from every line, on the nucleus and on a "
                           "ring; recovered = the data measured there plus the rate times the model's measurement "
                           "(the estimator is linear), with the data's noise")
    write_table(table, out_path)
