"""Stage 'stack': one species' spectra in Q units, combined per epoch and over all epochs."""

from __future__ import annotations

import logging
from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import Table

from pipeline.io.atomic import write_fits
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.image import aperture_count_on_grid
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.filtering import min_spatial_frequency, surviving_fraction
from pipeline.coma.response import line_response, outflow_speed, scale_lengths, window_capture
from pipeline.rates.stacking import StackInput, combine, velocity_grid
from pipeline.workflow.common import catalogue_from_config, coma_model, temperatures

__all__ = ["run", "stack_input", "band_inputs", "ALL"]

log = logging.getLogger(__name__)
ALL = "all"


def stack_input(spectra: fits.HDUList, catalogue, config) -> tuple[StackInput, list[dict]]:
    """Rescale one spectra file to Q units; also return its rows for the INPUTS table."""
    h = spectra[0].header
    line = catalogue.get_line(h["GLLINE"])
    species = catalogue.get_species(line.species)
    parent = catalogue.get_species(species.parent) if species.parent else None
    aps = Table.read(spectra["APERTURES"])
    chans = Table.read(spectra["CHANNELS"])
    vel = np.asarray(chans["velocity"], dtype=float)
    dv = float(np.abs(np.median(np.diff(vel))))
    wts = np.asarray(chans["window_weight"], dtype=float)
    r_h, delta = float(h["GLRH"]) * u.au, float(h["GLDELTA"]) * u.au
    beam = (np.sqrt(h["BMAJ"] * h["BMIN"]) * u.deg).to_value(u.rad) * delta.to(u.km) if "BMAJ" in h else 0 * u.km
    t_kin = temperatures(config)
    model = coma_model(config)
    v_out = outflow_speed(model, r_h)
    radii = np.asarray(aps["radius_km"], dtype=float) * u.km
    surviving = np.ones(len(aps))
    if "GLPIXSC" in h:  # the model coma summed on the data's own pixel grid with the extraction's weights
        pix_km = (h["GLPIXSC"] * u.arcsec).to_value(u.rad) * delta.to_value(u.km)
        beam_pix = ((h["BMAJ"] * 3600 / h["GLPIXSC"], h["BMIN"] * 3600 / h["GLPIXSC"], h.get("BPA", 0.0))
                    if "BMAJ" in h else None)
        length, daughter = scale_lengths(species, parent, model, r_h, v_out)
        count = aperture_count_on_grid((h["GLNY"], h["GLNX"]), h["GLAPX"], h["GLAPY"],
                                       list(np.asarray(aps["radius_pix"], dtype=float)), pix_km, beam_pix, v_out,
                                       length, daughter)
        resp = (flux_per_molecule(line, species, t_kin, delta)[:, None] * count[None, :]).to_value(u.Jy * u.km / u.s)
        method = "grid"
        if "interferometer" in config:
            q_min = min_spatial_frequency(config["interferometer"]["shortest_baseline_m"] * u.m, line.freq)
            surviving = surviving_fraction((h["GLNY"], h["GLNX"]), h["GLAPX"], h["GLAPY"], h["GLPIXSC"],
                                           list(np.asarray(aps["radius_pix"], dtype=float)), beam_pix, v_out,
                                           length, q_min, delta, daughter)
            if config["interferometer"].get("correct", True):
                resp = resp * surviving[None, :]
    else:
        resp = line_response(line, species, t_kin, radii, r_h, delta, beam, model, parent).to_value(u.Jy * u.km)
        method = "analytic"
    frac = window_capture(species, t_kin, vel - float(h.get("GLVCEN", 0.0)), wts, v_out,
                          h.get("GLSPRESP", "hanning"))                                         # (T,)
    scale = resp * frac[:, None]                                                                   # Jy km/s per (1/s)
    flux = np.asarray(spectra[0].data, dtype=float)                                                # (ap, chan)
    density = flux[None, :, :] / scale[:, :, None]
    # a blank channel inside the window makes that aperture's sum NaN (never silently counted as zero)
    window_sum = np.sum(np.where(wts[None, :] > 0, flux, 0.0) * wts[None, :], axis=1) * dv          # (ap,)
    q = window_sum[None, :] / scale
    sigma = np.asarray(aps["sigma_window"], dtype=float)[None, :] / scale
    inp = StackInput(epoch=h["GLEPOCH"], cube_id=h["GLCUBE"], line_id=line.line_id, velocity=vel,
                     density=density, q=q, sigma_q=sigma, radius_km=radii.to_value(u.km))
    rows = []
    for i, t in enumerate(t_kin.to_value(u.K)):
        for j, r in enumerate(radii.to_value(u.km)):
            rows.append({"epoch": inp.epoch, "cube_id": inp.cube_id, "line_id": inp.line_id, "t_kin": t,
                         "aperture_km": r, "response": resp[i, j], "window_fraction": frac[i],
                         "window": float(h["GLWIN"]), "q": q[i, j], "sigma_q": sigma[i, j],
                         "r_h": r_h.value, "delta": delta.value, "outflow": v_out.to_value(u.km / u.s),
                         "spectral_response": h.get("GLSPRESP", "hanning"), "response_model": method,
                         "surviving_fraction": float(surviving[j]), "kind": "line"})
    return inp, rows


def band_inputs(bands: fits.HDUList, species: str, config) -> tuple[list[StackInput], list[dict], list[str]]:
    """The covered bands of ``species`` in one bands file as stack inputs (Q the same at every T_kin).

    Returns the inputs, their rows for the INPUTS table and the bands left out (not covered) as 'cube:band'.
    """
    h = bands[0].header
    table = Table.read(bands["BANDS"])
    t_kin = temperatures(config).to_value(u.K)
    inputs, rows, skipped = [], [], []
    if "species" not in table.colnames:
        return inputs, rows, skipped
    table = table[table["species"] == species]
    for band_id in dict.fromkeys(str(b) for b in table["band_id"]):
        sel = table[table["band_id"] == band_id]
        sel = sel[np.argsort(np.asarray(sel["aperture_index"]))]
        if not all(bool(c) for c in sel["covered"]):
            skipped.append(f"{h['GLCUBE']}:{band_id}")
            continue
        q = np.tile(np.asarray(sel["q"], dtype=float), (t_kin.size, 1))
        sq = np.tile(np.asarray(sel["sigma_q"], dtype=float), (t_kin.size, 1))
        radii = np.asarray(sel["aperture_km"], dtype=float)
        inputs.append(StackInput(epoch=h["GLEPOCH"], cube_id=h["GLCUBE"], line_id=band_id, velocity=None,
                                 density=None, q=q, sigma_q=sq, radius_km=radii))
        for t in t_kin:
            for r in sel:
                rows.append({"epoch": h["GLEPOCH"], "cube_id": h["GLCUBE"], "line_id": band_id, "t_kin": t,
                             "aperture_km": float(r["aperture_km"]), "response": float(r["response"]),
                             "window_fraction": float(r["capture"]), "window": np.nan, "q": float(r["q"]),
                             "sigma_q": float(r["sigma_q"]), "r_h": float(r["r_h"]), "delta": float(r["delta"]),
                             "outflow": float(r["outflow"]), "spectral_response": "band",
                             "response_model": "grid", "surviving_fraction": 1.0, "kind": "band"})
    return inputs, rows, skipped


def run(spectra_paths: list[str], species: str, config: dict[str, Any], out_path: str) -> None:
    """Stack every covered spectrum (and infrared band measurement) of ``species`` and write the stack file.

    ``spectra_paths`` holds spectra files of millimetre lines and bands files of infrared cubes.
    """
    catalogue = catalogue_from_config(config)
    catalogue.get_species(species)
    inputs, rows, skipped = [], [], []
    for path in spectra_paths:
        with fits.open(path) as spectra:
            if spectra[0].header.get("GLREGIME") == "infrared":
                band_in, band_rows, band_skipped = band_inputs(spectra, species, config)
                inputs.extend(band_in)
                rows.extend(band_rows)
                skipped.extend(band_skipped)
                continue
            if not spectra[0].header.get("GLCOVER", False) or spectra[0].data is None:
                skipped.append(f"{spectra[0].header.get('GLCUBE')}:{spectra[0].header.get('GLLINE')}")
                continue
            inp, r = stack_input(spectra, catalogue, config)
        if not np.all(np.isfinite(inp.q)):
            log.warning("%s: line %s in cube %s has blank channels inside the integration window; left out",
                        species, inp.line_id, inp.cube_id)
            skipped.append(f"{inp.cube_id}:{inp.line_id} (blank window channels)")
            continue
        inputs.append(inp)
        rows.extend(r)
    if skipped:
        log.warning("%s: %d line(s) not covered and left out: %s", species, len(skipped), ", ".join(skipped))
    prim = fits.PrimaryHDU()
    prim.header["GLSPEC"] = species
    prim.header["GLNIN"] = (len(inputs), "number of spectra stacked")
    add_to_header(prim.header, provenance_record(config, spectra_paths, "stack"))
    hdus = [prim]
    t_kin = temperatures(config).to_value(u.K)
    groups = sorted({i.epoch for i in inputs})
    half = float(config["comoving"]["half_width_km_s"])
    summary = []
    for group in groups + ([ALL] if inputs else []):
        members = [i for i in inputs if group in (ALL, i.epoch)]
        edges = velocity_grid(members, half)
        res = combine(members, edges)
        hdu = fits.ImageHDU(res["density"], name=f"STACK_{group}")
        centres = 0.5 * (edges[:-1] + edges[1:])
        hdu.header["CTYPE1"], hdu.header["CUNIT1"], hdu.header["CRPIX1"] = "VRAD", "km/s", 1.0
        hdu.header["CRVAL1"], hdu.header["CDELT1"] = float(centres[0]), float(edges[1] - edges[0])
        hdu.header["CTYPE2"], hdu.header["CTYPE3"] = "APERTURE", "TKIN"
        hdu.header["SPECSYS"], hdu.header["BUNIT"] = "SOURCE", "s-1 / (km s-1)"
        hdu.header["GLGROUP"] = group
        hdus.append(hdu)
        lines = sorted({m.line_id for m in members})
        cubes = sorted({m.cube_id for m in members})
        for i, t in enumerate(t_kin):
            for j in range(res["q"].shape[1]):
                radius = float(np.mean([m.radius_km[j] for m in members]))
                summary.append({"epoch": group, "t_kin": t, "aperture_index": j, "aperture_km": radius,
                                "q": res["q"][i, j],
                                "sigma_q": res["sigma_q"][i, j], "lines": ",".join(lines),
                                "cubes": ",".join(cubes)})
        log.info("%s %s: %d spectra (%s) -> Q(T=%g K, first aperture) = %.3g +- %.3g /s", species, group,
                 len(members), ", ".join(lines), t_kin[0], res["q"][0, 0], res["sigma_q"][0, 0])
    in_hdu = fits.table_to_hdu(Table(rows=rows) if rows else Table(names=["epoch"], dtype=[str]))
    in_hdu.name = "INPUTS"
    sum_hdu = fits.table_to_hdu(Table(rows=summary) if summary else Table(names=["epoch"], dtype=[str]))
    sum_hdu.name = "SUMMARY"
    write_fits(fits.HDUList(hdus + [in_hdu, sum_hdu]), out_path)
