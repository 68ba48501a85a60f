"""Stage 'stack': one species' spectra in Q units, combined per epoch and over all epochs."""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import Table, vstack

from pipeline.io.atomic import write_fits
from pipeline.errors import CoverageError
from pipeline.io.products import BandMeasurements, EpochInputs, LineSpectra, SpeciesStack, StackedSpectrum
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.response import nonlte_settings
from pipeline.rates.excitation_water import epoch_water, model_with_water
from pipeline.rates.q_units import band_inputs, nonlte_comparison, stack_input
from pipeline.rates.stacking import combine, combine_distributed, distinct_windows, shared_apertures, velocity_grid
from pipeline.settings import Settings

__all__ = ["run", "run_epoch", "ALL"]

log = logging.getLogger(__name__)
ALL = "all"


def run_epoch(spectra_paths: list[str], species: str, epoch: str, settings: Settings, out_path: str,
              water_path: str | None = None) -> None:
    """One epoch's spectra (and infrared band measurements) of ``species`` in Q units: the stack's inputs, kept.

    ``spectra_paths`` holds spectra files of millimetre lines and bands files of infrared cubes of one epoch. The
    conversion (each line's response on its own grid, window capture, blends) is what a stack costs per input;
    done here once per epoch, adding an epoch later does not redo it. ``water_path``, the epoch's H2O stack
    inputs, gives the water production rate of the non-LTE excitation
    (:func:`pipeline.rates.excitation_water.epoch_water`); every row records the rate used and its source.
    """
    catalogue = settings.catalogue()
    catalogue.get_species(species)
    filtering = settings.interferometer
    water = epoch_water(settings, species, epoch, water_path)
    model = model_with_water(settings.coma, water)            # model nonlte at the epoch's water rate
    comparison = nonlte_comparison(settings, water)  # non-LTE settings beside an LTE run, or None
    # the water is recorded where it excites something (model nonlte or the comparison; either needs a rate)
    excited = water is not None and (nonlte_settings(model) is not None or comparison is not None)
    if excited:
        log.info("%s, epoch %s: non-LTE excitation at Q(H2O) = %.3g /s: %s", species, epoch, water.q_h2o_per_s,
                 water.source)
    inputs, rows, skipped = [], [], []
    for path in spectra_paths:
        with fits.open(path) as spectra:
            if BandMeasurements.is_bands_file(spectra[0].header):
                band_in, band_rows, band_skipped = band_inputs(BandMeasurements.from_fits(spectra), species,
                                                               settings.t_kin)
                inputs.extend(band_in)
                rows.extend(band_rows)
                skipped.extend(band_skipped)
                continue
            line_spectra = LineSpectra.from_fits(spectra)
            if not line_spectra.meta.covered or line_spectra.flux is None:
                skipped.append(f"{line_spectra.meta.cube_id}:{line_spectra.meta.line_id}")
                continue
            inp, r = stack_input(line_spectra, catalogue, settings.t_kin, model,
                                  filtering.shortest_baseline if filtering else None,
                                  filtering.correct if filtering else True, comparison=comparison)
        if not np.all(np.isfinite(inp.q)):
            log.warning("%s: line %s in cube %s has blank channels inside the integration window; left out",
                        species, inp.line_id, inp.cube_id)
            skipped.append(f"{inp.cube_id}:{inp.line_id} (blank window channels)")
            continue
        inputs.append(inp)
        rows.extend(r)
    inputs, overlapping = distinct_windows(inputs, catalogue)      # one of overlapping windows per cube
    for note in overlapping:
        log.warning("%s: %s", species, note)
    skipped.extend(overlapping)
    kept = {(i.cube_id, i.line_id) for i in inputs}
    rows = [                                          # lines only: a band's Q does not depend on the excitation
            {**r, "q_h2o_excitation": water.q_h2o_per_s if excited and r["kind"] == "line" else np.nan,
             "q_h2o_from": water.source if excited and r["kind"] == "line" else ""}
            for r in rows if (r["cube_id"], r["line_id"]) in kept]
    for inp in inputs:
        if inp.epoch != epoch:
            msg = (f"{inp.cube_id}: its {inp.line_id} measurement belongs to epoch {inp.epoch!r}, expected {epoch!r} "
                   "(the stack inputs of one epoch read that epoch's spectra only)")
            raise CoverageError(msg)
    log.info("%s, epoch %s: %d inputs in Q units, %d left out", species, epoch, len(inputs), len(skipped))
    product = EpochInputs(species=species, epoch=epoch, inputs=inputs,
                          rows=Table(rows=rows) if rows else Table(names=["epoch"], dtype=[str]), skipped=skipped)
    hdul = product.to_fits()
    add_to_header(hdul[0].header, provenance_record(settings, spectra_paths, "stack"))
    write_fits(hdul, out_path)


def run(epoch_paths: list[str], species: str, settings: Settings, out_path: str) -> None:
    """Combine the per-epoch inputs of ``species`` (:func:`run_epoch`) per epoch and over all epochs; write the
    stack file."""
    catalogue = settings.catalogue()
    catalogue.get_species(species)
    inputs, tables, skipped = [], [], []
    for path in epoch_paths:
        part = EpochInputs.from_fits(path)
        inputs.extend(part.inputs)
        if len(part.rows) and "cube_id" in part.rows.colnames:
            tables.append(part.rows)
        skipped.extend(part.skipped)
    rows = vstack(tables) if tables else Table(names=["epoch"], dtype=[str])
    if len(rows):
        kept = {(i.cube_id, i.line_id) for i in inputs}
        rows = rows[[(str(c), str(k)) in kept for c, k in zip(rows["cube_id"], rows["line_id"])]]
    for r in rows:
        if "blend_other" in rows.colnames and r["blend_other"]:
            log.warning("%s: the window of %s in cube %s also holds %s (other species, not modelled)", species,
                        r["line_id"], r["cube_id"], r["blend_other"])
            break
    if skipped:
        log.warning("%s: %d line(s) not covered or left out: %s", species, len(skipped), ", ".join(skipped))
    t_kin = settings.t_kin.to_value(u.K)
    groups = sorted({i.epoch for i in inputs})
    half = float(settings.half_width.to_value(u.km / u.s))
    summary = []
    spectra = {}
    for group in groups + ([ALL] if inputs else []):
        members, left_out = shared_apertures([i for i in inputs if group in (ALL, i.epoch)],
                                             f"stack of {species}, epoch group {group!r}")
        if left_out:
            log.warning("%s %s: combined over the apertures every cube has (%s); left out: %s", species, group,
                        ", ".join(members[0].labels), "; ".join(left_out))
        edges = velocity_grid(members, half)
        res = combine(members, edges)
        alt = combine_distributed(members)
        centres = 0.5 * (edges[:-1] + edges[1:])
        spectra[group] = StackedSpectrum(group=group, density=res["density"], v_start=float(centres[0]),
                                         v_step=float(edges[1] - edges[0]))
        lines = sorted({m.line_id for m in members})
        cubes = sorted({m.cube_id for m in members})
        for i, t in enumerate(t_kin):
            for j in range(res["q"].shape[1]):
                radius = float(np.mean([m.radius_km[j] for m in members]))
                summary.append({"epoch": group, "t_kin": t, "aperture_index": j, "aperture": members[0].labels[j],
                                "aperture_km": radius, "q": res["q"][i, j],
                                "sigma_q": res["sigma_q"][i, j], "lines": ",".join(lines),
                                "cubes": ",".join(cubes), "apertures_left_out": "; ".join(left_out),
                                "q_distributed": alt[0][i, j] if alt is not None else np.nan,
                                "sigma_q_distributed": alt[1][i, j] if alt is not None else np.nan})
        log.info("%s %s: %d spectra (%s) -> Q(T=%g K, first aperture) = %.3g +- %.3g /s", species, group,
                 len(members), ", ".join(lines), t_kin[0], res["q"][0, 0], res["sigma_q"][0, 0])
    compared = any(i.nonlte_curve is not None for i in inputs)       # 'nonlte_scale': NaN where one has none
    curves = [{"epoch": i.epoch, "cube_id": i.cube_id, "line_id": i.line_id, "aperture": label,
               "scale": i.curve[:, j],
               **({"nonlte_scale": i.nonlte_curve[:, j] if i.nonlte_curve is not None
                   else np.full(i.curve.shape[0], np.nan)} if compared else {})}
              for i in inputs if i.curve is not None for j, label in enumerate(i.labels)]
    stack = SpeciesStack(species=species, n_inputs=len(inputs), spectra=spectra,
                         inputs=rows if len(rows) else Table(names=["epoch"], dtype=[str]),
                         summary=Table(rows=summary) if summary else Table(names=["epoch"], dtype=[str]),
                         curves=Table(rows=curves) if curves else None)
    hdul = stack.to_fits()
    add_to_header(hdul[0].header, provenance_record(settings, epoch_paths, "stack"))
    write_fits(hdul, out_path)
