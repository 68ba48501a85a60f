"""Stage 'injection': would the gas the push needs (or gas at the limit) have been seen? Per species, ECSV."""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np
from astropy.table import QTable

from pipeline.io.atomic import write_table
from pipeline.rates.band_injection import inject_band, ring_positions
from pipeline.io.cubes import open_data, read_cube_info
from pipeline.rates.line_injection import inject_spectra, placement_kind, placements
from pipeline.rates.stacking import StackInput, shared_apertures
from pipeline.spectra.apertures import aperture_labels
from pipeline.rates.statistics import inverse_variance_mean
from pipeline.spectra.band_windows import band_setup, band_windows
from pipeline.io.products import BandMeasurements, SubCube
from pipeline.io.provenance import provenance_record
from pipeline.spectra.ir_spectra import F_LAMBDA
from pipeline.coma.response import outflow_speed
from pipeline.rates.q_units import stack_input
from pipeline.settings import Settings
from pipeline.spectra.line_spectra import extraction_settings
from pipeline.io.tables import cell_float, read_table

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


def band_groups(bands_paths: list[str], species: str, q: float, settings: Settings,
                n_t: int) -> dict[tuple[int, int], list[StackInput]]:
    """Band injections of rate ``q`` in every infrared cube of ``species``, grouped by placement (velocity slot 0)."""
    catalogue, model, ir = settings.catalogue(), settings.coma, settings.infrared
    sp = catalogue.get_species(species)
    entries = {c.cube_id: c for c in settings.cubes}
    groups: dict[tuple[int, int], list[StackInput]] = {}
    for path in bands_paths:
        measured = BandMeasurements.from_fits(path)
        bands = measured.bands
        if "species" not in bands.colnames:
            continue
        info = read_cube_info(entries[measured.cube_id].path, entries[measured.cube_id].beam_arcsec)
        obs = info.wavelengths
        radii_pix = list(np.asarray(measured.apertures["radius_pix"], dtype=float))
        radii_km = np.asarray(measured.apertures["radius_km"], dtype=float)
        ids = [str(b) for b in dict.fromkeys(bands["band_id"][(bands["species"] == species) & bands["covered"]])]
        windows = band_windows(obs, catalogue, ids, measured.doppler, measured.resolving_power, ir.margin_fwhm)
        with open_data(info.path) as data:               # where the cube holds data in every channel
            footprint = np.all(np.isfinite(data), axis=0)
        where = ring_positions(info.shape[1:], measured.centre[0], measured.centre[1], max(radii_pix),
                               footprint=footprint)
        for band_id in ids:
            free, shape = band_setup(band_id, windows, obs, ir.continuum_factor, ir.continuum_shape)
            results = inject_band(info, catalogue.get_band(band_id), sp, q / u.s, where, radii_pix,
                                  measured.r_h_au * u.au, measured.delta_au * u.au, measured.doppler,
                                  measured.resolving_power, windows[band_id][2:], free, measured.sigma * F_LAMBDA,
                                  model, ir.continuum_order, shape, dq_bad_bits=settings.quality.dq_bad_bits,
                                  max_masked_share=settings.quality.max_masked_share)
            for res in results:
                groups.setdefault((res.index, 0), []).append(StackInput(
                    epoch=measured.epoch, cube_id=measured.cube_id, line_id=band_id, velocity=None, density=None,
                    q=np.tile(res.q_recovered, (n_t, 1)), sigma_q=np.tile(res.q_err, (n_t, 1)), radius_km=radii_km,
                    apertures=aperture_labels(measured.apertures)))
    return groups


def run(subcube_paths: list[str], species: str, limits_path: str, budget_path: str, settings: Settings,
        out_path: str, bands_paths: list[str] | None = None) -> None:
    """Inject, extract, measure and combine; write the per-placement results.

    Millimetre lines are injected into their sub-cubes (``subcube_paths``) at velocities away from the real
    lines; infrared bands into their cubes (via ``bands_paths``) at sky positions, differenced
    (:mod:`pipeline.rates.band_injection`). Members of one placement index are combined like the real stack.
    """
    catalogue = settings.catalogue()
    sp = catalogue.get_species(species)
    limits = read_table(limits_path)
    budget = read_table(budget_path)
    levels, t_kin = injection_levels(species, limits, budget)
    t_all = settings.t_kin.to_value(u.K)
    it = int(np.argmin(np.abs(t_all - t_kin)))
    model = settings.coma
    filtering = settings.interferometer
    rows = []
    cubes: dict[str, set] = {}
    covered = [sub for sub in map(SubCube.from_fits, subcube_paths) if sub.meta.covered]
    for level, q in levels:
        groups: dict[tuple[str, int, int], list] = {}
        for sub in covered:
            line = catalogue.get_line(sub.meta.line_id)
            v_out = outflow_speed(model, sub.meta.r_h)
            radii = settings.apertures_of(settings.with_cube(sub.meta.cube_id).cube)
            what = extraction_settings(line, catalogue, radii, settings.limits.window_factor * v_out,
                                       settings.half_width, settings.quality.max_masked_share)
            where = placements(sub, what)
            parent = catalogue.get_species(sp.parent) if sp.parent else None
            for k, spectra in enumerate(inject_spectra(sub, what, line, sp, q, t_kin * u.K, model, where,
                                                       parent)):
                inp, _ = stack_input(spectra, catalogue, settings.t_kin, model,
                                     filtering.shortest_baseline if filtering else None,
                                     filtering.correct if filtering else True, response_curve=False)
                vrank = sorted({p.v_centre for p in where}).index(where[k].v_centre)
                groups.setdefault(("millimetre", where[k].index, vrank), []).append(inp)
        # instruments apart: a millimetre line moved in velocity and an infrared band differenced on the sky are
        # different tests (and their noise differs by orders of magnitude), so their results are not combined
        for (index, vrank), members in band_groups(list(bands_paths or []), species, q, settings,
                                                   t_all.size).items():
            groups.setdefault(("infrared", index, vrank), []).extend(members)
        for (instrument, index, vrank), members in sorted(groups.items()):
            cubes.setdefault(instrument, set()).update(m.cube_id for m in members)
            members, _ = shared_apertures(members, f"injection of {species}")
            q_rec, sig = inverse_variance_mean(np.array([m.q[it] for m in members]),          # (n, n_ap)
                                               np.array([m.sigma_q[it] for m in members]), axis=0)
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
    table.meta["provenance"] = provenance_record(settings, [*subcube_paths, *(bands_paths or []), limits_path,
                                                          budget_path], "injection")
    table.meta["bands"] = ("infrared bands: injected at the nucleus and on a ring of sky positions; recovered = "
                           "measurement with minus without the injection (the estimator is linear)")
    write_table(table, out_path)
