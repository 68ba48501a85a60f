"""Spectra in production-rate units: each line's aperture spectra and each band measurement as Q per channel.

The stack combines measurements of one species from different lines, cubes and
epochs; before that each is divided by its model response, the flux a
production rate of 1 molecule/s gives in that aperture, for that line, geometry
and temperature, so that every input is in the same units (Q).

Blends: other lines of the same species whose emission reaches a line's
integration window (within the window's half-width plus 1.5 outflow speeds)
are modelled jointly: the window's response is the sum of each line's flux per
molecule times the share of its profile inside the window, so the window
estimate is of the species' Q, not a sum of lines counted as one. Lines of
other species there cannot be modelled (their Q is another unknown) and are
named in the ``blend_other`` column and the log. The stack keeps one of several
windows of one cube that overlap (:func:`pipeline.workflow.stack`), so no flux is
counted twice.

Each input also carries its response curve S(T) on
:data:`pipeline.rates.temperature.TEMPERATURE_GRID` (the window flux per unit Q
at every temperature; captures interpolated in log T from 13 temperatures), from
which the temperature fit and Q at any temperature are computed.
"""

from __future__ import annotations

import logging
from dataclasses import replace
from typing import TYPE_CHECKING

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.catalogue import Catalogue, Line
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.response import (ComaModel, GridGeometry, filtering_departure_on_grid, line_departure_on_grid,
                                    line_response_on_grid, nonlte_settings, outflow_speed, window_capture)
from pipeline.coma.departure import NonLteSettings
from pipeline.errors import CatalogueError
from pipeline.io.products import BandMeasurements, LineSpectra
from pipeline.rates.excitation_water import ExcitationWater
from pipeline.rates.stacking import StackInput
from pipeline.rates.temperature import TEMPERATURE_GRID
from pipeline.spectra.apertures import aperture_labels
from pipeline.spectra.noise import window_sums

if TYPE_CHECKING:
    from pipeline.settings import Settings

__all__ = ["stack_input", "nonlte_comparison", "band_inputs", "blend_partners", "BLEND_REACH_OUTFLOWS"]

log = logging.getLogger(__name__)

#: A line blends with another when their separation is below the window half-width plus this many outflow speeds.
BLEND_REACH_OUTFLOWS = 1.5
_CAPTURE_GRID = np.geomspace(TEMPERATURE_GRID[0], TEMPERATURE_GRID[-1], 13)
_NOT_COMPARED: set[str] = set()


def blend_partners(line: Line, catalogue: Catalogue, reach: u.Quantity) -> tuple[list[tuple[Line, float]], list[str]]:
    """Other catalogue lines within ``reach`` of ``line``: (same-species lines with their radio velocity [km/s] on
    ``line``'s axis, ids of other species' lines)."""
    c = const.c.to_value(u.km / u.s)
    velocity = c * (1 - catalogue.line_frequencies_ghz / line.freq.to_value(u.GHz))
    same, other = [], []
    for k in np.flatnonzero(np.abs(velocity) <= u.Quantity(reach).to_value(u.km / u.s)):
        cand = catalogue.lines[k]
        if cand.line_id == line.line_id:
            continue
        if cand.species == line.species:
            same.append((cand, float(velocity[k])))
        else:
            other.append(cand.line_id)
    return same, other


def nonlte_comparison(settings: Settings, water: ExcitationWater | None = None) -> NonLteSettings | None:
    """The non-LTE settings of the comparison beside the LTE sweep: under ``excitation.model: lte`` with a water
    production rate (the epoch's ``water``, :func:`pipeline.rates.excitation_water.epoch_water`, or else
    ``excitation.q_h2o_per_s``), the settings model nonlte would have (parsed by
    :meth:`pipeline.settings.Settings.from_config` from the step's own ``excitation`` and ``coma`` sections); None
    otherwise (no comparison, or model nonlte, whose responses are already non-LTE)."""
    if nonlte_settings(settings.coma) is not None:
        return None
    given = settings.record
    excitation = dict(given["excitation"])
    if water is not None:
        excitation["q_h2o_per_s"] = water.q_h2o_per_s
    if "q_h2o_per_s" not in excitation:
        return None
    sections = {"coma": given["coma"], "excitation": {**excitation, "model": "nonlte"}}
    return type(settings).from_config(sections, sections=tuple(sections)).coma.excitation


def stack_input(spectra: LineSpectra, catalogue: Catalogue, t_kin: u.Quantity, model: ComaModel,
                shortest_baseline: u.Quantity | None = None,
                correct_filtering: bool = True, response_curve: bool = True,
                comparison: NonLteSettings | None = None) -> tuple[StackInput, list[dict]]:
    """Rescale one line's aperture spectra to Q units; also return its rows for the stack's INPUTS table.

    Each spectrum is divided by the model response, the line flux per unit Q in each aperture on the
    data's own pixel grid (:func:`pipeline.coma.response.line_response_on_grid`), and by the fraction of
    the line that the weighted window sum captures (:func:`pipeline.coma.response.window_capture`).

    Parameters
    ----------
    spectra : LineSpectra
        A covered line's aperture spectra (the extract step's product).
    catalogue : Catalogue
    t_kin : Quantity [temperature], shape (n_T,)
        The kinetic temperatures of the sweep.
    model : ComaModel
        Outflow, photodestruction and excitation assumptions. Under non-LTE excitation every line's response (the
        line's, its blended partners', the response curve's) carries that line's departure from LTE on the grid
        (:func:`pipeline.coma.response.line_departure_on_grid`; on the curve's temperatures interpolated in log T
        from the 13 temperatures of the captures).
    shortest_baseline : Quantity [length], optional
        An interferometer's shortest projected baseline: the fraction of the model flux that survives
        spatial filtering is computed per aperture and recorded.
    correct_filtering : bool
        Scale the response by that surviving fraction.
    response_curve : bool
        Compute the response curve S(T) on :data:`TEMPERATURE_GRID` (what the temperature fit needs); a caller that
        reads only Q and σ at the sweep's temperatures (injection, forecasts) leaves it out (``curve`` None).
    comparison : NonLteSettings, optional
        Under LTE (``model.excitation`` None): also the window's response under these non-LTE settings, recorded
        as the rows' ``nonlte_ratio`` (NaN without it, under model nonlte, and for a species the non-LTE model
        cannot describe: logged). The LTE numbers are unchanged.

    Notes
    -----
    The non-LTE window response is the LTE one with every member of the blend weighted by its departure D(T, ρ)
    on the grid (:func:`pipeline.coma.response.line_departure_on_grid`, which is what
    :func:`pipeline.coma.response.line_response_on_grid` multiplies by under non-LTE excitation):

        S_nonLTE = R D_line c + sum_p N f_p c_p D_p,   nonlte_ratio = S_nonLTE / S_LTE,

    R the line's response, c its window capture, N the molecules each aperture counts, f_p and c_p a blended
    partner's flux per molecule and capture. The window's Q under non-LTE is then q / nonlte_ratio, its σ
    sigma_q / nonlte_ratio.
    """
    meta = spectra.meta
    line = catalogue.get_line(meta.line_id)
    species = catalogue.get_species(line.species)
    parent = catalogue.get_species(species.parent) if species.parent else None
    aps = spectra.apertures
    vel = spectra.velocity
    dv = float(np.abs(np.median(np.diff(vel))))
    wts = np.asarray(spectra.channels["window_weight"], dtype=float)
    r_h, delta = meta.r_h, meta.delta
    t_kin = u.Quantity(t_kin, u.K)
    v_out = outflow_speed(model, r_h)
    radii = np.asarray(aps["radius_km"], dtype=float) * u.km
    pixel = spectra.pixel_scale_arcsec
    beam_pix = ((spectra.beam_deg[0] * 3600 / pixel, spectra.beam_deg[1] * 3600 / pixel, spectra.beam_deg[2])
                if spectra.beam_deg is not None else None)
    grid_geometry = GridGeometry(shape=spectra.grid_shape, x=spectra.centre[0], y=spectra.centre[1],
                                 pixel_arcsec=pixel, radii_pix=list(np.asarray(aps["radius_pix"], dtype=float)),
                                 beam_pix=beam_pix)
    resp, surviving = line_response_on_grid(line, species, parent, t_kin, r_h, delta, grid_geometry, model,
                                            shortest_baseline, correct_filtering)
    resp = resp.to_value(u.Jy * u.km / u.s * u.s)
    rel = vel - float(spectra.v_centre)
    frac = window_capture(species, t_kin, rel, wts, v_out, meta.spectral_response)                # (T,)
    scale = resp * frac[:, None]                                                                   # Jy km/s per (1/s)
    blended = []                    # (partner, its flux per molecule times window capture (T,)) for the comparison
    # the coma's molecules per unit Q seen in each aperture (times the surviving fraction): resp / flux per molecule
    nonlte = nonlte_settings(model) is not None
    baseline = shortest_baseline if correct_filtering else None      # filtering the response is scaled by
    if nonlte:          # and over the line's departure from LTE, which the response carries

        def departure(member: Line, temperatures: u.Quantity) -> np.ndarray:
            return _line_departure(member, species, parent, temperatures, r_h, delta, grid_geometry, model,
                                   baseline)

        count = resp[0] / (flux_per_molecule(line, species, t_kin[:1], delta).to_value(u.Jy * u.km / u.s)[0]
                           * departure(line, t_kin[:1])[0])
    else:
        count = resp[0] / flux_per_molecule(line, species, t_kin[:1], delta).to_value(u.Jy * u.km / u.s)[0]
    partners, others = blend_partners(line, catalogue, float(spectra.window) * u.km / u.s
                                      + BLEND_REACH_OUTFLOWS * v_out)
    members = [(line, 0.0)] + partners
    grid = TEMPERATURE_GRID * u.K
    curve = np.zeros((grid.size, count.size)) if response_curve else None
    on_grid = []                    # (member, its flux per molecule times window capture on the grid)
    for member, v_p in members:
        if member is not line:
            f_p = flux_per_molecule(member, species, t_kin, delta).to_value(u.Jy * u.km / u.s)
            frac_p = window_capture(species, t_kin, rel - v_p, wts, v_out, meta.spectral_response)
            if nonlte:
                scale = scale + count[None, :] * (f_p * frac_p)[:, None] * departure(member, t_kin)
            else:
                scale = scale + count[None, :] * (f_p * frac_p)[:, None]
            blended.append((member, f_p * frac_p))
        if curve is None:
            continue
        cap = window_capture(species, _CAPTURE_GRID * u.K, rel - v_p, wts, v_out, meta.spectral_response)
        cap_grid = np.interp(np.log(TEMPERATURE_GRID), np.log(_CAPTURE_GRID), cap)
        f_grid = flux_per_molecule(member, species, grid, delta).to_value(u.Jy * u.km / u.s)
        on_grid.append((member, f_grid * cap_grid))
        if nonlte:
            curve += count[None, :] * (f_grid * cap_grid)[:, None] * _departure_on_temperature_grid(
                member, species, parent, r_h, delta, grid_geometry, model, baseline)
        else:
            curve += count[None, :] * (f_grid * cap_grid)[:, None]
    share = 1.0 - resp * frac[:, None] / scale                                                    # (T, ap)
    # a species the catalogue gives a distributed source: the response under that hypothesis over the nucleus one
    # (the coma's count changes, the excitation does not, so the ratio holds at every temperature)
    ratio = None
    if species.distributed_scale is not None and species.parent is None:
        alt, _ = line_response_on_grid(line, species, None, t_kin[:1], r_h, delta, grid_geometry,
                                       replace(model, source="distributed"), shortest_baseline, correct_filtering)
        ratio = alt.to_value(u.Jy * u.km / u.s * u.s)[0] / resp[0]
    compare = np.full(scale.shape, np.nan)
    nonlte_curve = None
    if comparison is not None and not nonlte:
        compared = replace(model, excitation=comparison)
        compare = _nonlte_ratio(line, species, parent, t_kin, r_h, delta, grid_geometry, compared,
                                resp * frac[:, None], count, blended, scale, baseline)
        if curve is not None and np.all(np.isfinite(compare)):
            # the comparison's S(T) beside the LTE one, so Q under non-LTE can be read at any temperature (the
            # measured one included), as the LTE curve allows
            nonlte_curve = sum(count[None, :] * fc[:, None] * _departure_on_temperature_grid(
                member, species, parent, r_h, delta, grid_geometry, compared, baseline) for member, fc in on_grid)
    flux = np.asarray(spectra.flux, dtype=float)                                                  # (ap, chan)
    density = flux[None, :, :] / scale[:, :, None]
    # a blank channel inside the window makes that aperture's sum NaN (never silently counted as zero)
    window_sum = window_sums(flux, wts, dv)                                                       # (ap,)
    q = window_sum[None, :] / scale
    sigma = np.asarray(aps["sigma_window"], dtype=float)[None, :] / scale
    labels = aperture_labels(aps)
    inp = StackInput(epoch=meta.epoch, cube_id=meta.cube_id, line_id=line.line_id, velocity=vel,
                     density=density, q=q, sigma_q=sigma, radius_km=radii.to_value(u.km), apertures=labels,
                     curve=curve, window=float(spectra.window), distributed_ratio=ratio, nonlte_curve=nonlte_curve)
    rows = []
    for i, t in enumerate(t_kin.to_value(u.K)):
        for j, r in enumerate(radii.to_value(u.km)):
            rows.append({"epoch": inp.epoch, "cube_id": inp.cube_id, "line_id": inp.line_id, "t_kin": t,
                         "aperture": labels[j], "aperture_km": r, "response": resp[i, j], "window_fraction": frac[i],
                         "scale": scale[i, j], "blend": ",".join(p.line_id for p, _ in partners),
                         "blend_share": share[i, j], "blend_other": ",".join(others),
                         "distributed_ratio": float(ratio[j]) if ratio is not None else np.nan,
                         "window": float(spectra.window), "q": q[i, j], "sigma_q": sigma[i, j],
                         "r_h": r_h.value, "delta": delta.value, "outflow": v_out.to_value(u.km / u.s),
                         "spectral_response": meta.spectral_response, "response_model": "grid",
                         "surviving_fraction": float(surviving[i, j]), "kind": "line",
                         "nonlte_ratio": compare[i, j]})
    return inp, rows


def _line_departure(member: Line, species, parent, t_kin: u.Quantity, r_h: u.Quantity, delta: u.Quantity,
                    grid: GridGeometry, model: ComaModel, baseline: u.Quantity | None) -> np.ndarray:
    """A line's departure from LTE on the grid, (n_T, n_ap): the non-LTE over the LTE count
    (:func:`pipeline.coma.response.line_departure_on_grid`) times, with an interferometer's ``baseline``, the
    non-LTE over the LTE surviving fraction (:func:`pipeline.coma.response.filtering_departure_on_grid`)."""
    dep = line_departure_on_grid(member, species, parent, t_kin, r_h, delta, grid, model)
    if baseline is not None:
        dep = dep * filtering_departure_on_grid(member, species, parent, t_kin, r_h, delta, grid, model, baseline)
    return dep


def _departure_on_temperature_grid(member: Line, species, parent, r_h: u.Quantity, delta: u.Quantity,
                                   grid: GridGeometry, model: ComaModel, baseline: u.Quantity | None) -> np.ndarray:
    """A line's departure from LTE on the grid (:func:`_line_departure`) at the 13 capture temperatures,
    interpolated in log T onto :data:`TEMPERATURE_GRID`: shape (n_grid, n_ap)."""
    dep = _line_departure(member, species, parent, _CAPTURE_GRID * u.K, r_h, delta, grid, model, baseline)
    return np.stack([np.interp(np.log(TEMPERATURE_GRID), np.log(_CAPTURE_GRID), d) for d in dep.T], axis=1)


def _nonlte_ratio(line: Line, species, parent, t_kin: u.Quantity, r_h: u.Quantity, delta: u.Quantity,
                  grid: GridGeometry, model: ComaModel, own: np.ndarray, count: np.ndarray,
                  blended: list[tuple[Line, np.ndarray]], scale: np.ndarray,
                  baseline: u.Quantity | None = None) -> np.ndarray:
    """The window's response under the non-LTE ``model`` over the LTE ``scale`` (T, ap); NaN, logged, for a species
    the non-LTE model cannot describe (no rotor constants and no molecular-data file)."""
    try:
        total = own * _line_departure(line, species, parent, t_kin, r_h, delta, grid, model, baseline)
        for member, f_c in blended:
            total = total + count[None, :] * f_c[:, None] * _line_departure(member, species, parent, t_kin, r_h,
                                                                            delta, grid, model, baseline)
    except CatalogueError as err:
        if species.name not in _NOT_COMPARED:          # one note per species and process
            _NOT_COMPARED.add(species.name)
            log.info("%s: no non-LTE comparison beside the LTE sweep (line %s: %s)", species.name, line.line_id, err)
        return np.full(scale.shape, np.nan)
    return total / scale


def band_inputs(bands: BandMeasurements, species: str, t_kin: u.Quantity) -> tuple[list[StackInput], list[dict], list[str]]:
    """The covered bands of ``species`` in one bands file as stack inputs (Q the same at every T_kin).

    Returns the inputs, their rows for the INPUTS table and the bands left out (not covered) as 'cube:band'.
    """
    table = bands.bands
    cube_id, epoch = bands.cube_id, bands.epoch
    t_kin = u.Quantity(t_kin, u.K).to_value(u.K)
    inputs, rows, skipped = [], [], []
    if "species" not in table.colnames:
        return inputs, rows, skipped
    table = table[table["species"] == species]
    names = aperture_labels(bands.apertures)
    for band_id in dict.fromkeys(str(b) for b in table["band_id"]):
        sel = table[table["band_id"] == band_id]
        sel = sel[np.argsort(np.asarray(sel["aperture_index"]))]
        if not all(bool(c) for c in sel["covered"]):
            skipped.append(f"{cube_id}:{band_id}")
            continue
        q = np.tile(np.asarray(sel["q"], dtype=float), (t_kin.size, 1))
        sq = np.tile(np.asarray(sel["sigma_q"], dtype=float), (t_kin.size, 1))
        radii = np.asarray(sel["aperture_km"], dtype=float)
        labels = tuple(names[int(k)] for k in sel["aperture_index"])
        inputs.append(StackInput(epoch=epoch, cube_id=cube_id, line_id=band_id, velocity=None,
                                 density=None, q=q, sigma_q=sq, radius_km=radii, apertures=labels))
        for t in t_kin:
            for r, label in zip(sel, labels):
                rows.append({"epoch": epoch, "cube_id": cube_id, "line_id": band_id, "t_kin": t,
                             "aperture": label, "aperture_km": float(r["aperture_km"]), "response": float(r["response"]),
                             "window_fraction": float(r["capture"]), "scale": np.nan, "blend": "", "blend_share": 0.0,
                             "blend_other": "", "distributed_ratio": np.nan, "window": np.nan, "q": float(r["q"]),
                             "sigma_q": float(r["sigma_q"]), "r_h": float(r["r_h"]), "delta": float(r["delta"]),
                             "outflow": float(r["outflow"]), "spectral_response": "band",
                             "response_model": "grid", "surviving_fraction": 1.0, "kind": "band",
                             "nonlte_ratio": np.nan})
    return inputs, rows, skipped
