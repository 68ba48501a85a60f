"""Forecasts for planned epochs: the Q limit and the significance of the needed gas, before any cube exists.

The same code path as a real measurement is fed with synthetic noise of the
planned statistics: a noise-only sub-cube (per-channel rms, channel width,
beam, Hanning-correlated channels, beam-correlated pixels) is made at the
epoch's geometry, extracted with the campaign's apertures and window, and
turned into σ_Q by the same response as the real data. A few noise
realisations are averaged so that the forecast is stable.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.wcs import WCS

if TYPE_CHECKING:     # the workflow's graph builder reads PlannedEpoch only: the heavy modules load where used
    from pipeline.coma.response import ComaModel
    from pipeline.io.products import SubCube
    from pipeline.spectra.line_spectra import ExtractionSettings

__all__ = ["PlannedEpoch", "noise_subcube", "noise_realisation", "forecast_sigma"]


@dataclass(frozen=True)
class PlannedEpoch:
    """One planned observation."""

    label: str
    time: str
    lines: tuple[str, ...]
    noise_jy_beam: float          # rms per channel after the spectral response
    channel_khz: float
    beam_arcsec: tuple[float, float, float]
    pixel_arcsec: float
    npix: int = 96
    half_width_km_s: float = 40.0


def _velocity_channels(plan: PlannedEpoch, line) -> tuple[float, int]:
    """The planned channel width in km/s at ``line`` and the number of channels over the plan's half-width."""
    dv = plan.channel_khz * 1e3 / line.freq.to_value(u.Hz) * const.c.to_value(u.km / u.s)
    return dv, 2 * int(plan.half_width_km_s / dv) + 1


def noise_subcube(plan: PlannedEpoch, line, geo: dict, data: np.ndarray | None = None) -> SubCube:
    """A sub-cube of ``line`` at the planned epoch, the target at the centre, holding ``data`` (zeros if None).

    Its velocity axis spans the plan's half-width in channels of the planned width; its beam, pixel size and
    image size are the plan's, its unit Jy/beam.
    """
    dv, nchan = _velocity_channels(plan, line)
    n = plan.npix
    wcs = WCS(naxis=2)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    wcs.wcs.crval = [float(geo["ra"].to_value(u.deg)), float(geo["dec"].to_value(u.deg))]
    wcs.wcs.cdelt = [-plan.pixel_arcsec / 3600, plan.pixel_arcsec / 3600]
    wcs.wcs.crpix = [n / 2 + 0.5, n / 2 + 0.5]
    wcs.wcs.cunit = ["deg", "deg"]
    velocity = -dv * (nchan // 2) + np.arange(nchan) * dv
    from pipeline.io.products import ProductMeta, SubCube

    meta = ProductMeta(cube_id=f"plan_{plan.label}", epoch=plan.label, line_id=line.line_id, species=line.species,
                       covered=True, spectral_response="hanning", target_x=(n - 1) / 2, target_y=(n - 1) / 2,
                       r_h_au=float(geo["r_h"].to_value(u.au)), delta_au=float(geo["delta"].to_value(u.au)))
    beam = (plan.beam_arcsec[0] / 3600, plan.beam_arcsec[1] / 3600, plan.beam_arcsec[2])
    if data is None:
        data = np.zeros((nchan, n, n), dtype=np.float32)
    return SubCube.build(meta, data, velocity, wcs, "Jy/beam", line.freq, beam,
                         name=f"planned epoch {plan.label} ({line.line_id})")


def noise_realisation(plan: PlannedEpoch, nchan: int, rng: np.random.Generator) -> np.ndarray:
    """Noise-only data with the planned rms, correlated over the beam and by Hanning smoothing."""
    from scipy.signal import fftconvolve

    from pipeline.coma.image import apply_spectral_response, beam_kernel

    kernel = beam_kernel(plan.beam_arcsec[0] / plan.pixel_arcsec, plan.beam_arcsec[1] / plan.pixel_arcsec,
                         plan.beam_arcsec[2])
    kernel = kernel / np.sqrt(np.sum(kernel**2))
    white = rng.standard_normal((nchan, plan.npix, plan.npix))
    noise = fftconvolve(white, kernel[None], mode="same", axes=(1, 2)) * plan.noise_jy_beam / np.sqrt(0.375)
    return apply_spectral_response(noise, "hanning").astype(np.float32)


def forecast_sigma(plan: PlannedEpoch, line, geo: dict, extraction: ExtractionSettings, catalogue,
                   t_kin: u.Quantity, model: ComaModel, shortest_baseline: u.Quantity | None = None,
                   correct_filtering: bool = True, n_realisations: int = 4, seed: int = 0) -> np.ndarray:
    """σ_Q (n_T, n_ap) that the planned observation of ``line`` would give: RMS over noise realisations of the
    σ the real measurement code returns for noise-only sub-cubes of the planned statistics.

    The sub-cubes are extracted with ``extraction`` and converted to Q units with
    :func:`pipeline.rates.q_units.stack_input` at the temperatures ``t_kin`` under the coma ``model``
    (and the interferometer's ``shortest_baseline``, when given), exactly as measured cubes are.
    """
    from pipeline.rates.q_units import stack_input
    from pipeline.spectra.line_spectra import extract_spectra

    sig2 = []
    _, nchan = _velocity_channels(plan, line)
    for k in range(n_realisations):
        sub = noise_subcube(plan, line, geo, noise_realisation(plan, nchan, np.random.default_rng(seed + k)))
        spectra = extract_spectra(sub, extraction, offsource=False)
        inp, _ = stack_input(spectra, catalogue, t_kin, model, shortest_baseline, correct_filtering,
                             response_curve=False)
        sig2.append(inp.sigma_q**2)
    return np.sqrt(np.mean(sig2, axis=0))
