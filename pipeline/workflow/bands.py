"""Stage 'bands': infrared band fluxes, production rates and the dust continuum of one infrared cube.

One pass over the cube: aperture spectra on the target (F_lambda, with the ERR
extension's sigma), then for every catalogue band of the configured species the
continuum fit and band integral (:mod:`pipeline.spectra.band_measure`) and the band
flux per unit production rate (fluorescence efficiency at r_h times the Haser
coma counted on the cube's own pixel grid, convolved with the point-spread
function when BMAJ/BMIN give one), and the dust continuum as Afrho at the
configured wavelengths with its colour (:mod:`pipeline.dust.afrho`). The continuum
under a band is the solar spectrum times a polynomial (the reflectance) unless
``infrared.continuum_shape`` is 'flat'.

The integration windows are placed at the target's rest wavelengths mapped to
the observed axis (one Doppler factor for the whole cube); the band flux is the
integral over observed wavelength, the energy flux at the telescope.
"""

from __future__ import annotations

import logging
from typing import Any

import astropy.units as u
import numpy as np
from astropy.table import Table

from pipeline.spectra.apertures import aperture_label, radius_in_pixels
from pipeline.io.atomic import write_fits
from pipeline.spectra.band_measure import band_capture, continuum_level, measure_band
from pipeline.catalogue.entries import Band, Catalogue
from pipeline.io.cubes import CubeInfo, read_cube_info
from pipeline.dust.afrho import afrho, slope_percent_per_100nm, spectral_slope
from pipeline.errors import CoverageError, CubeError
from pipeline.spectra.ir_spectra import F_LAMBDA, IRSpectra, extract_ir_spectra
from pipeline.io.products import BandMeasurements
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.response import ComaModel, GridGeometry, band_response_on_grid, outflow_speed
from pipeline.settings import DustSettings, InfraredSettings, Settings
from pipeline.spectra.band_windows import band_setup, band_windows, doppler_factor, resolving_power_of, scatter_sigma
from pipeline.io.tables import read_table

__all__ = ["run"]

log = logging.getLogger(__name__)
_RESPONSE = u.W / u.m**2 * u.s


def _band_rows(spectra: IRSpectra, sigma: u.Quantity, obs: u.Quantity, band: Band, windows, catalogue: Catalogue,
               ir: InfraredSettings, model: ComaModel, geo, info: CubeInfo, radii_km: list[float], x: float, y: float,
               resolving_power: float) -> tuple[list[dict], np.ndarray]:
    """Rows of the BANDS table for one band (one per aperture) and its continuum models (n_ap, n_chan)."""
    lo, hi, wlo, whi = windows[band.band_id]
    n_ap, n_chan = spectra.flux.shape
    models = np.full((n_ap, n_chan), np.nan)
    base = {"band_id": band.band_id, "species": band.species, "cube_id": str(geo["cube_id"]),
            "epoch": str(geo["epoch"]), "window_lo": wlo.to_value(u.um), "window_hi": whi.to_value(u.um)}
    if wlo < obs.min() or whi > obs.max():
        reason = (f"the window {wlo.to_value(u.um):.4f}-{whi.to_value(u.um):.4f} um is not inside the cube's "
                  f"{obs.min().to_value(u.um):.4f}-{obs.max().to_value(u.um):.4f} um")
        log.warning("band %s in cube %s is not used: %s", band.band_id, geo["cube_id"], reason)
        return [dict(base, covered=False, reason=reason, aperture_km=r, aperture_index=j)
                for j, r in enumerate(radii_km)], models
    capture = band_capture(lo, hi, wlo, whi, resolving_power)
    free, shape = band_setup(band.band_id, windows, obs, ir.continuum_factor, ir.continuum_shape)
    species = catalogue.get_species(band.species)
    parent = catalogue.get_species(species.parent) if species.parent else None
    r_h, delta = u.Quantity(geo["r_h"]), u.Quantity(geo["delta"])
    v_out = outflow_speed(model, r_h)
    psf = ((info.beam_major / info.pixel_scale).decompose().value, (info.beam_minor / info.pixel_scale).decompose().value,
           info.beam_pa.to_value(u.deg)) if info.beam_major is not None else None
    grid = GridGeometry(shape=info.shape[1:], x=x, y=y, pixel_arcsec=float(info.pixel_scale.to_value(u.arcsec)),
                        radii_pix=list(spectra.radius_pix), beam_pix=psf)
    responses = band_response_on_grid(band, species, parent, r_h, delta, grid, model).to_value(u.W / u.m**2 * u.s)
    rows = []
    for j, radius in enumerate(radii_km):
        try:
            m = measure_band(obs, spectra.flux[j], sigma[j], wlo, whi, free,
                             order=ir.continuum_order, capture=capture, continuum_shape=shape)
        except CoverageError as exc:
            msg = f"cube {geo['cube_id']}, band {band.band_id}, aperture {radius:g} km: {exc}"
            raise CoverageError(msg) from exc
        span = obs[free | ((obs >= wlo) & (obs <= whi))]
        inside = (obs >= span.min()) & (obs <= span.max())          # the model only where it was fitted and used
        models[j] = np.where(inside, np.asarray(u.Quantity(m.continuum_model).to_value(F_LAMBDA)), np.nan)
        response = float(responses[j])                                     # band flux per unit Q [W m-2 s]
        flux = m.flux.to_value(u.W / u.m**2)
        rows.append(dict(base, covered=True, reason="", aperture_km=radius, aperture_index=j,
                         radius_pix=float(spectra.radius_pix[j]), flux=flux,
                         sigma=m.sigma.to_value(u.W / u.m**2), sigma_err=m.sigma_err.to_value(u.W / u.m**2),
                         sigma_empirical=m.sigma_empirical.to_value(u.W / u.m**2),
                         empirical_method=m.empirical_method, chi2_reduced=float(m.chi2_reduced),
                         capture=float(capture), n_window=int(m.n_window_channels), n_continuum=int(m.n_continuum),
                         continuum=m.continuum_at_centre.to_value(F_LAMBDA),
                         g_factor=band.g_factor(r_h).to_value(1 / u.s), response=response,
                         q=flux / response, sigma_q=m.sigma.to_value(u.W / u.m**2) / response,
                         outflow=v_out.to_value(u.km / u.s), r_h=r_h.to_value(u.au), delta=delta.to_value(u.au),
                         resolving_power=resolving_power))
    log.info("band %s in cube %s: F = %.3g +- %.3g W/m2 (first aperture) -> Q = %.3g +- %.3g /s", band.band_id,
             geo["cube_id"], rows[0]["flux"], rows[0]["sigma"], rows[0]["q"], rows[0]["sigma_q"])
    return rows, models


def _dust_rows(spectra: IRSpectra, sigma: u.Quantity, obs: u.Quantity, free_all: np.ndarray, dust: DustSettings, geo,
               radii_km: list[float], windows) -> tuple[list[dict], list[dict]]:
    """Afrho at the configured wavelengths (DUST) and the colour between them (COLOUR), per aperture."""
    half = float(dust.half_width.to_value(u.um)) * u.um
    r_h, delta = u.Quantity(geo["r_h"]), u.Quantity(geo["delta"])
    rows, colour = [], []
    for j, radius in enumerate(radii_km):
        lam_ok, values, errors = [], [], []
        for lam_um in dust.wavelengths.to_value(u.um).tolist():
            lam = lam_um * u.um
            inside = any(w[2] - half <= lam <= w[3] + half for w in windows.values())
            if lam - half < obs.min() or lam + half > obs.max() or inside:
                continue
            try:
                level, err = continuum_level(obs, spectra.flux[j], sigma[j], lam, half, free_all)
            except CoverageError as exc:
                log.warning("cube %s: no continuum at %.3f um (%s)", geo["cube_id"], lam_um, exc)
                continue
            rho = radius * u.km
            a = afrho(level, lam, rho, r_h, delta).to(u.cm)
            a_err = afrho(err, lam, rho, r_h, delta).to(u.cm)
            rows.append({"cube_id": str(geo["cube_id"]), "epoch": str(geo["epoch"]), "aperture_km": radius,
                         "wavelength": lam_um, "flux_density": level.to_value(F_LAMBDA),
                         "flux_density_err": err.to_value(F_LAMBDA), "afrho": a.value, "afrho_err": abs(a_err.value),
                         "r_h": r_h.to_value(u.au), "delta": delta.to_value(u.au),
                         "phase": float(u.Quantity(geo["phase"]).to_value(u.deg))})
            lam_ok.append(lam_um)
            values.append(a.value)
            errors.append(abs(a_err.value))
        if len(lam_ok) >= 2:
            slope, slope_err = spectral_slope(lam_ok * u.um, values * u.cm, errors * u.cm)
            colour.append({"cube_id": str(geo["cube_id"]), "epoch": str(geo["epoch"]), "aperture_km": radius,
                           "wavelength_min": min(lam_ok), "wavelength_max": max(lam_ok),
                           "slope": slope_percent_per_100nm(slope), "slope_err": slope_percent_per_100nm(slope_err)})
    return rows, colour


def run(geometry_path: str, band_ids: list[str], settings: Settings, out_path: str) -> None:
    """Measure the bands ``band_ids`` and the dust continuum of the settings' (infrared) cube; write the bands file."""
    cube_path = settings.cube.path
    resolving_power = settings.cube.resolving_power
    info = read_cube_info(cube_path, settings.cube.beam_arcsec)
    if info.regime != "infrared":
        msg = (f"{cube_path}: the spectral axis reaches {info.wavelengths.max():.1f}; expected an infrared cube "
               "(every channel short of 30 um) for band measurement")
        raise CubeError(msg)
    geo = read_table(geometry_path)[0]
    catalogue = settings.catalogue()
    rpow, rsource = resolving_power_of(info, resolving_power)
    factor = doppler_factor(info, geo)
    obs = info.wavelengths
    delta = u.Quantity(geo["delta"])
    radii = list(settings.apertures_of())
    radii_pix = [radius_in_pixels(r, delta, info.pixel_scale) for r in radii]
    radii_km = [float((r if r.unit.physical_type == "length" else (r.to_value(u.rad) * delta)).to_value(u.km))
                for r in radii]
    x, y = float(geo["x_pix"]), float(geo["y_pix"])
    log.info("cube %s: infrared, %d channels %.4f-%.4f um, R = %.0f (%s), %d apertures", geo["cube_id"],
             info.shape[0], obs.min().to_value(u.um), obs.max().to_value(u.um), rpow, rsource, len(radii))
    spectra = extract_ir_spectra(info, x, y, radii_pix, settings.quality.dq_bad_bits,
                                 settings.quality.max_masked_share)
    # every catalogue band in range is kept out of the continuum, configured species or not
    windows = band_windows(obs, catalogue, band_ids, factor, rpow, settings.infrared.margin_fwhm)
    free_all = np.ones(obs.shape, dtype=bool)
    for w in windows.values():
        free_all &= ~((obs >= w[2]) & (obs <= w[3]))
    if spectra.sigma is not None:
        sigma = spectra.sigma
        sigma_source = "ERR extension"
    else:
        sigma = np.array([scatter_sigma(obs.value, f, free_all) for f in spectra.flux.value]) * F_LAMBDA
        sigma_source = "scatter of line-free channel differences (no ERR extension)"
        log.warning("cube %s has no ERR extension: the per-channel sigma is the %s", geo["cube_id"], sigma_source)
    band_rows, continua = [], []
    for band_id in band_ids:
        band = catalogue.get_band(band_id)
        rows, models = _band_rows(spectra, sigma, obs, band, windows, catalogue, settings.infrared, settings.coma, geo,
                                  info, radii_km, x, y, rpow)
        band_rows.extend(rows)
        continua.append(models)
    dust_rows, colour_rows = _dust_rows(spectra, sigma, obs, free_all, settings.dust, geo, radii_km, windows)

    def table(rows: list[dict]) -> Table:
        return Table(rows=_uniform(rows)) if rows else Table(names=["cube_id"], dtype=[str])

    product = BandMeasurements(
        cube_id=str(geo["cube_id"]), epoch=str(geo["epoch"]), r_h_au=float(geo["r_h"].to_value(u.au)),
        delta_au=float(delta.to_value(u.au)), resolving_power=rpow, resolving_power_source=rsource, doppler=factor,
        centre=(x, y), pixel_scale_arcsec=float(info.pixel_scale.to_value(u.arcsec)), sigma_source=sigma_source,
        band_ids=tuple(band_ids), spectra=spectra.flux.to_value(F_LAMBDA), sigma=sigma.to_value(F_LAMBDA),
        continuum=np.array(continua) if continua else np.zeros((0, len(radii), obs.size)),
        wave=Table({"observed": obs.to(u.um), "rest": (obs / factor).to(u.um)}),
        apertures=Table({"aperture": [aperture_label(r) for r in radii], "radius_km": np.array(radii_km) * u.km,
                         "radius_pix": spectra.radius_pix,
                         "area_pix": spectra.area_pix}),
        bands=table(band_rows), dust=table(dust_rows), colour=table(colour_rows))
    hdul = product.to_fits()
    add_to_header(hdul[0].header, provenance_record(settings, [cube_path, geometry_path], "bands"))
    write_fits(hdul, out_path)


def _uniform(rows: list[dict]) -> list[dict]:
    """Rows with the same keys (missing numeric values as NaN, strings as '')."""
    keys: dict[str, Any] = {}
    for r in rows:
        for k, v in r.items():
            keys.setdefault(k, v)
    out = []
    for r in rows:
        out.append({k: r.get(k, "" if isinstance(v, str) else (False if isinstance(v, bool) else
                                                               (-1 if isinstance(v, int) else np.nan)))
                    for k, v in keys.items()})
    return out

