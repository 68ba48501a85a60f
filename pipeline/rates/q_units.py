"""Spectra in production-rate units: each line's aperture spectra and each band measurement as Q per channel.

The stack combines measurements of one species from different lines, cubes and
epochs; before that each is divided by its model response, the flux a
production rate of 1 molecule/s gives in that aperture, for that line, geometry
and temperature, so that every input is in the same units (Q).
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import Table

from pipeline.catalogue import Catalogue
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.filtering import min_spatial_frequency, surviving_fraction
from pipeline.coma.image import aperture_count_on_grid
from pipeline.coma.response import ComaModel, line_response, outflow_speed, scale_lengths, window_capture
from pipeline.rates.stacking import StackInput

__all__ = ["stack_input", "band_inputs"]


def stack_input(spectra: fits.HDUList, catalogue: Catalogue, t_kin: u.Quantity, model: ComaModel,
                shortest_baseline: u.Quantity | None = None,
                correct_filtering: bool = True) -> tuple[StackInput, list[dict]]:
    """Rescale one line's aperture spectra to Q units; also return its rows for the stack's INPUTS table.

    Each spectrum is divided by the model response (flux per unit Q on the data's own pixel grid,
    :func:`pipeline.coma.image.aperture_count_on_grid`, times the flux per molecule of
    :func:`pipeline.coma.excitation.flux_per_molecule`) and by the fraction of the line that the
    weighted window sum captures (:func:`pipeline.coma.response.window_capture`).

    Parameters
    ----------
    spectra : HDUList
        A spectra file of the extract step (primary = flux per aperture and channel, APERTURES, CHANNELS).
    catalogue : Catalogue
    t_kin : Quantity [temperature], shape (n_T,)
        The kinetic temperatures of the sweep.
    model : ComaModel
        Outflow and photodestruction assumptions.
    shortest_baseline : Quantity [length], optional
        An interferometer's shortest projected baseline: the fraction of the model flux that survives
        spatial filtering is computed per aperture and recorded.
    correct_filtering : bool
        Scale the response by that surviving fraction.
    """
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
    t_kin = u.Quantity(t_kin, u.K)
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
        if shortest_baseline is not None:
            q_min = min_spatial_frequency(shortest_baseline, line.freq)
            surviving = surviving_fraction((h["GLNY"], h["GLNX"]), h["GLAPX"], h["GLAPY"], h["GLPIXSC"],
                                           list(np.asarray(aps["radius_pix"], dtype=float)), beam_pix, v_out,
                                           length, q_min, delta, daughter)
            if correct_filtering:
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


def band_inputs(bands: fits.HDUList, species: str, t_kin: u.Quantity) -> tuple[list[StackInput], list[dict], list[str]]:
    """The covered bands of ``species`` in one bands file as stack inputs (Q the same at every T_kin).

    Returns the inputs, their rows for the INPUTS table and the bands left out (not covered) as 'cube:band'.
    """
    h = bands[0].header
    table = Table.read(bands["BANDS"])
    t_kin = u.Quantity(t_kin, u.K).to_value(u.K)
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
