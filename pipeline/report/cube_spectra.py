"""Each cube's aperture spectra in its own units, with the model at the quoted production rate or at the limit.

Millimetre cubes: per line, the extract step's aperture spectrum (Jy, or the aperture's mean Rayleigh-Jeans
brightness temperature in K for a cube in K) with the model line of the quoted row of ``limits.ecsv`` (column
``adopted``) for the cube's epoch: Q when detected, the upper limit otherwise, at the quoted temperature and
aperture. The model flux is the pipeline's own flux per unit Q of each line in that aperture
(:func:`pipeline.rates.q_units.stack_input`, the response on the data's grid) spread over the outflow profile
(:func:`pipeline.rates.line_fit.profile_model`), summed over the species' other lines in the panel (blends).

Infrared cubes: per band, the aperture spectrum F_lambda with the fitted continuum and the continuum plus the
band model at the quoted Q: the band flux per unit Q (the bands file's ``response``) times the band template
(:func:`pipeline.spectra.band_measure.band_template`).

These figures need the campaign's limits, so they are drawn when the report is built, not in the per-cube
image jobs.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.table import QTable

from pipeline.catalogue import Catalogue
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.response import ComaModel, outflow_speed
from pipeline.coma.thermal import thermal_dispersion
from pipeline.io.products import BandMeasurements, LineSpectra
from pipeline.rates.line_fit import profile_model
from pipeline.rates.q_units import blend_partners, stack_input
from pipeline.spectra.band_measure import band_template
from pipeline.spectra.ir_spectra import F_LAMBDA

__all__ = ["SpectrumPanel", "QuotedModel", "quoted_model", "line_spectrum_panels", "band_spectrum_panels",
           "aperture_brightness_temperature", "MAX_LINES"]

#: At most this many lines of one species are drawn per cube (the strongest in the model).
MAX_LINES = 6


@dataclass(frozen=True)
class QuotedModel:
    """The quoted row of limits.ecsv a model is drawn at."""

    q: float                 # 1/s: Q when detected, else the upper limit
    detected: bool
    t_kin: float             # K
    aperture_km: float

    @property
    def label(self) -> str:
        what = "model at Q" if self.detected else "model at the upper limit"
        return f"{what} = {self.q:.2e} s⁻¹ ({self.t_kin:.0f} K, {self.aperture_km:.0f} km)"


@dataclass(frozen=True)
class SpectrumPanel:
    """One panel: a spectrum, its 1-sigma channel noise, the model, and the window, in display units."""

    title: str
    x: np.ndarray                    # velocity [km/s] or rest wavelength [um]
    flux: np.ndarray
    sigma: np.ndarray | float
    model: np.ndarray | None
    window: tuple[float, float]      # shaded range on x
    x_label: str
    y_label: str
    model_label: str
    continuum: np.ndarray | None = None


def quoted_model(limits: QTable, species: str, epoch: str, radii_km: np.ndarray) -> tuple[QuotedModel, int] | None:
    """The quoted row of ``species`` at ``epoch`` in the smallest of the apertures ``radii_km`` that has one.

    Returns the model's Q and the index of that aperture in ``radii_km``, or None when limits.ecsv quotes no
    row for them.
    """
    rows = limits[(limits["species"] == species) & (limits["epoch"] == epoch) & limits["adopted"]]
    radii = np.asarray(radii_km, dtype=float)
    best = None
    for row in rows:
        r = float(u.Quantity(row["aperture_km"], u.km).value)
        match = np.flatnonzero(np.isclose(radii, r, rtol=1e-6))
        if match.size and (best is None or r < best[0].aperture_km):
            detected = bool(row["detected"])
            q = u.Quantity(row["q"] if detected else row["q_upper"]).to_value(1 / u.s)
            t_kin = float(u.Quantity(row["t_kin_K"], u.K).value)      # limits.ecsv: in K (a bare number read as K)
            best = (QuotedModel(q=float(q), detected=detected, t_kin=t_kin, aperture_km=r),
                    int(match[0]))
    return best


def aperture_brightness_temperature(flux: u.Quantity, area_pix: float, pixel_scale: u.Quantity,
                                    frequency: u.Quantity) -> u.Quantity:
    """The mean Rayleigh-Jeans brightness temperature over an aperture of ``area_pix`` pixels holding ``flux``.

    T = F c^2 / (2 k nu^2 Omega), Omega the aperture's solid angle (astropy's brightness_temperature
    equivalency, the one the extraction uses to turn K into Jy).
    """
    omega = (float(area_pix) * u.Quantity(pixel_scale) ** 2).to(u.sr)
    return (u.Quantity(flux, u.Jy) / omega).to(u.K, equivalencies=u.brightness_temperature(u.Quantity(frequency)))


def _display(flux_jy: np.ndarray, kelvin: bool, area_pix: float, pixel_arcsec: float,
             freq_hz: float) -> tuple[float, str]:
    """Factor from Jy to the display unit, and its label."""
    if kelvin:
        k = aperture_brightness_temperature(1.0 * u.Jy, area_pix, pixel_arcsec * u.arcsec, freq_hz * u.Hz)
        return float(k.to_value(u.K)), "aperture mean T$_B$ [K]"
    peak = float(np.nanmax(np.abs(flux_jy))) if np.isfinite(flux_jy).any() else 1.0
    return (1e3, "flux density [mJy]") if peak < 0.1 else (1.0, "flux density [Jy]")


def line_spectrum_panels(spectra: list[LineSpectra], limits: QTable, catalogue: Catalogue, coma: ComaModel,
                         kelvin: bool = False, shortest_baseline: u.Quantity | None = None,
                         correct_filtering: bool = True, max_lines: int = MAX_LINES) -> tuple[list[SpectrumPanel],
                                                                                                list[str]]:
    """The panels of one millimetre cube's covered lines (``spectra``, the extract step's products), and notes.

    Per species, the ``max_lines`` lines with the largest flux per molecule at the quoted temperature are drawn
    (in frequency order); a note says how many were left out. ``kelvin`` draws the aperture's mean brightness
    temperature (a cube in K) instead of its flux density.
    """
    covered = [s for s in spectra if s.meta.covered and s.flux is not None]
    notes = [f"{s.meta.line_id}: not covered ({s.meta.reason})" for s in spectra if not s.meta.covered]
    panels = []
    for species_name in dict.fromkeys(s.meta.species for s in covered):
        group = [s for s in covered if s.meta.species == species_name]
        species = catalogue.get_species(species_name)
        radii = np.asarray(group[0].apertures["radius_km"], dtype=float)
        quoted = quoted_model(limits, species_name, group[0].meta.epoch, radii)
        responses: dict[str, float] = {}
        if quoted is not None:
            model, j = quoted
            # rank by the LTE flux per molecule (the response's only line-dependent factor), then compute the
            # pipeline's response for the lines drawn and the same-species lines that blend with them
            t = [model.t_kin] * u.K
            strength = {s.meta.line_id: float(flux_per_molecule(catalogue.get_line(s.meta.line_id), species, t,
                                                                 s.meta.delta)[0].value) for s in group}
            order = sorted(group, key=lambda s: -strength[s.meta.line_id])
            needed = {s.meta.line_id for s in order[:max_lines]}
            for s in order[:max_lines]:
                reach = (np.max(np.abs(s.velocity)) + 3 * outflow_speed(coma, s.meta.r_h).to_value(u.km / u.s))
                needed |= {p.line_id for p, _ in blend_partners(catalogue.get_line(s.meta.line_id), catalogue,
                                                                 reach * u.km / u.s)[0]}
            for s in group:
                if s.meta.line_id in needed:
                    _, rows = stack_input(s, catalogue, t, coma, shortest_baseline, correct_filtering)
                    responses[s.meta.line_id] = float(rows[j]["response"])      # Jy km/s per (1/s)
        else:
            notes.append(f"{species_name}: limits.ecsv quotes no row for epoch {group[0].meta.epoch} in these "
                         "apertures; spectra drawn without a model")
            order = group
        shown = sorted(order[:max_lines], key=lambda s: catalogue.get_line(s.meta.line_id).freq.to_value(u.Hz))
        if len(group) > len(shown):
            notes.append(f"{species_name}: {len(shown)} of {len(group)} lines shown, those with the largest LTE "
                         "flux per molecule at the quoted temperature")
        for s in shown:
            panels.append(_line_panel(s, quoted, responses, catalogue, coma, species, kelvin))
    return panels, notes


def _line_panel(s: LineSpectra, quoted, responses: dict[str, float], catalogue: Catalogue, coma: ComaModel,
                species, kelvin: bool) -> SpectrumPanel:
    line = catalogue.get_line(s.meta.line_id)
    vel = s.velocity
    j = quoted[1] if quoted is not None else 0
    flux = np.asarray(s.flux[j], dtype=float)
    factor, y_label = _display(flux, kelvin, float(s.apertures["area_pix"][j]), s.pixel_scale_arcsec,
                               line.freq.to_value(u.Hz))
    model = None
    label = "no quoted row: no model"
    if quoted is not None:
        q = quoted[0]
        v_out = outflow_speed(coma, s.meta.r_h).to_value(u.km / u.s)
        sigma_th = thermal_dispersion(q.t_kin * u.K, species.mass).to_value(u.km / u.s)
        reach = (np.max(np.abs(vel)) + 3 * v_out) * u.km / u.s
        partners, _ = blend_partners(line, catalogue, reach)
        model = profile_model(vel, q.q * responses[line.line_id], 0.0, v_out, sigma_th, s.meta.spectral_response)
        for partner, v_p in partners:
            if partner.line_id in responses:                  # a blended line of the same species measured here
                model = model + profile_model(vel, q.q * responses[partner.line_id], v_p, v_out, sigma_th,
                                              s.meta.spectral_response)
        model = model * factor
        label = q.label
    sigma = float(s.apertures["sigma_chan"][j]) * factor
    name = line.line_id.split("_", 1)[-1]
    title = f"{line.species} {name} MHz  ·  {s.apertures['aperture'][j] if 'aperture' in s.apertures.colnames else ''}"
    return SpectrumPanel(title=title.rstrip(" ·"), x=vel, flux=flux * factor, sigma=sigma, model=model,
                         window=(s.v_centre - s.window, s.v_centre + s.window), x_label="velocity [km/s]",
                         y_label=y_label, model_label=label)


def band_spectrum_panels(bands: BandMeasurements, limits: QTable, catalogue: Catalogue) -> tuple[list[SpectrumPanel],
                                                                                                  list[str]]:
    """The panels of one infrared cube: per covered band, F_lambda, the continuum and continuum + band model."""
    table = bands.bands
    panels, notes = [], []
    if "covered" not in table.colnames:
        return panels, ["no band of a configured species in this cube"]
    radii = np.asarray(bands.apertures["radius_km"], dtype=float)
    rest, obs = (u.Quantity(bands.wave[c], u.um).to_value(u.um) for c in ("rest", "observed"))
    for k, band_id in enumerate(bands.band_ids):
        band = catalogue.get_band(band_id)
        rows = table[table["band_id"] == band_id]
        if not len(rows) or not all(bool(c) for c in rows["covered"]):
            notes.append(f"{band_id}: not covered ({rows['reason'][0] if len(rows) else 'no row'})")
            continue
        quoted = quoted_model(limits, band.species, bands.epoch, radii)
        j = quoted[1] if quoted is not None else 0
        row = rows[np.asarray(rows["aperture_index"]) == j][0]
        flux = np.asarray(bands.spectra[j], dtype=float)
        sigma = np.asarray(bands.sigma[j], dtype=float)
        continuum = np.asarray(bands.continuum[k][j], dtype=float)
        lo, hi = float(row["window_lo"]), float(row["window_hi"])
        span = np.isfinite(continuum)
        model, label = None, "no quoted row: no model"
        if quoted is not None:
            q = quoted[0]
            template = band_template(obs * u.um, band.extent_lo * bands.doppler, band.extent_hi * bands.doppler,
                                     bands.resolving_power)
            band_flux = q.q * float(row["response"]) * u.W / u.m**2          # the band flux at the quoted Q
            model = continuum + (band_flux * template).to_value(F_LAMBDA)
            label = q.label
        scale = 10.0 ** np.floor(np.log10(np.nanmax(np.abs(flux[span])) if span.any() else 1.0))
        sel = span if span.any() else np.ones(flux.shape, dtype=bool)
        panels.append(SpectrumPanel(
            title=f"{band_id} ({band.species})  ·  {bands.apertures['aperture'][j]}", x=rest[sel],
            flux=flux[sel] / scale, sigma=sigma[sel] / scale, model=None if model is None else model[sel] / scale,
            window=(lo / bands.doppler, hi / bands.doppler), x_label="rest wavelength [µm]",
            y_label=f"F$_λ$ [10$^{{{int(np.log10(scale))}}}$ W m$^{{-2}}$ µm$^{{-1}}$]", model_label=label,
            continuum=continuum[sel] / scale))
    return panels, notes
