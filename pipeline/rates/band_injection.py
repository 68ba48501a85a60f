"""Injection-recovery for infrared bands: would a band of production rate Q have been seen in this cube?

Infrared bands cannot be moved in velocity away from the real band as the
millimetre lines are, so the model coma is placed on the sky instead: on the
nucleus and on a ring around it. At each place the aperture spectra of the real
cube are extracted, the model band of a Haser coma of rate Q centred there
(counted on the cube's pixel grid with its PSF, spread in wavelength by the band
template at the resolving power) is added, and the band is measured exactly as
the real one (same window, continuum, errors). The measurement is linear in the
spectrum, so the recovered rate is the measurement with the injection minus the
measurement without it: whatever real gas and dust lie at that place cancel,
and the recovered-to-injected ratio checks the whole chain (template, capture,
continuum subtraction of the band's wings, PSF and pixel grid) while its
significance uses the errors measured at that place.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from pipeline.spectra.apertures import aperture_fits, within_footprint
from pipeline.spectra.band_measure import band_capture, binned_band_template, channel_widths, measure_band
from pipeline.catalogue.entries import Band, Species
from pipeline.coma.image import aperture_count_on_grid
from pipeline.coma.conversion import band_flux_from_molecules
from pipeline.io.cubes import CubeInfo
from pipeline.rates.line_injection import placement_kind
from pipeline.spectra.ir_spectra import F_LAMBDA, extract_ir_spectra
from pipeline.coma.response import ComaModel, outflow_speed, scale_lengths

__all__ = ["BandInjection", "ring_positions", "inject_band"]


@dataclass(frozen=True)
class BandInjection:
    """One placement's result, per aperture (arrays of n_apertures)."""

    index: int                 # 0 = nucleus, 1.. ring
    x: float
    y: float
    q_recovered: np.ndarray    # 1/s
    q_err: np.ndarray          # 1/s

    @property
    def kind(self) -> str:
        """'nucleus' or 'ring' (:func:`pipeline.rates.line_injection.placement_kind`)."""
        return placement_kind(self.index)


def ring_positions(shape: tuple[int, int], x: float, y: float, radius_pix: float, n: int = 4,
                   footprint: np.ndarray | None = None) -> list[tuple[float, float]]:
    """The nucleus and up to ``n`` positions around it whose apertures of ``radius_pix`` fit in the field.

    Each lies along a diagonal, as far out as 2.5 aperture radii allows inside the field (at least a quarter
    radius out) and, with ``footprint`` (2-D, True where the cube holds data in every channel), inside the
    data: a NaN border is no place for an injection. The injections are differenced, so overlapping the real
    coma or each other does no harm.
    """
    out = [(x, y)]
    for k in range(n):
        ang = 2 * np.pi * k / n + np.pi / 4
        for factor in np.linspace(2.5, 0.25, 10):
            px, py = x + factor * radius_pix * np.cos(ang), y + factor * radius_pix * np.sin(ang)
            if not aperture_fits(shape, px, py, radius_pix):
                continue
            if not within_footprint(footprint, px, py, radius_pix):
                continue
            out.append((float(px), float(py)))
            break
    return out


def inject_band(info: CubeInfo, band: Band, species: Species, q: u.Quantity, positions: list[tuple[float, float]],
                radii_pix: list[float], r_h: u.Quantity, delta: u.Quantity, doppler: float, resolving_power: float,
                window: tuple[u.Quantity, u.Quantity], continuum: np.ndarray, sigma: u.Quantity | None,
                model: ComaModel, order: int = 1, continuum_shape: np.ndarray | None = None,
                parent: Species | None = None, dq_bad_bits: int = 0,
                max_masked_share: float | None = None) -> list[BandInjection]:
    """Inject a band of rate ``q`` at each position, measure it and return the recovered rates.

    ``window``, ``continuum`` (mask), ``continuum_shape`` and ``order`` are the ones the real
    measurement used; ``sigma`` is the per-channel error to use when the cube has no ERR extension;
    ``dq_bad_bits`` and ``max_masked_share`` treat flagged and blank voxels as the real measurement did
    (:func:`pipeline.spectra.ir_spectra.extract_ir_spectra`).
    """
    obs = info.wavelengths
    lo, hi = band.extent_lo * doppler, band.extent_hi * doppler
    capture = band_capture(lo, hi, window[0], window[1], resolving_power)
    spread = np.asarray(binned_band_template(obs, lo, hi, resolving_power)) / channel_widths(obs).to_value(u.um)
    v_out = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v_out)
    pix_km = info.pixel_scale.to_value(u.rad) * u.Quantity(delta).to_value(u.km)
    psf = ((info.beam_major / info.pixel_scale).decompose().value, (info.beam_minor / info.pixel_scale).decompose().value,
           info.beam_pa.to_value(u.deg)) if info.beam_major is not None else None
    per_molecule = band_flux_from_molecules(1.0 * u.one, band.wavelength, band.g_1au, r_h, delta).to_value(
        u.W / u.m**2)
    q_value = u.Quantity(q, 1 / u.s).value
    out = []
    for index, (x, y) in enumerate(positions):
        spectra = extract_ir_spectra(info, x, y, radii_pix, dq_bad_bits, max_masked_share)
        sig = spectra.sigma if spectra.sigma is not None else sigma
        count = aperture_count_on_grid(info.shape[1:], x, y, list(radii_pix), pix_km, psf, v_out, length, daughter)
        rec, err = [], []
        for j in range(len(radii_pix)):
            response = per_molecule * count[j]
            injected = q_value * response * spread * F_LAMBDA
            args = dict(order=order, capture=capture, continuum_shape=continuum_shape)
            before = measure_band(obs, spectra.flux[j], sig[j], window[0], window[1], continuum, **args)
            after = measure_band(obs, spectra.flux[j] + injected, sig[j], window[0], window[1], continuum, **args)
            rec.append((after.flux - before.flux).to_value(u.W / u.m**2) / response)
            err.append(after.sigma.to_value(u.W / u.m**2) / response)
        out.append(BandInjection(index=index, x=float(x), y=float(y), q_recovered=np.array(rec), q_err=np.array(err)))
    return out
