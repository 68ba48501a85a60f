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
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.io import fits
from scipy.signal import fftconvolve

from pipeline.coma.image import apply_spectral_response, beam_kernel
from pipeline.coma.response import ComaModel
from pipeline.rates.q_units import stack_input
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra

__all__ = ["PlannedEpoch", "noise_subcube_header", "noise_realisation", "write_noise_subcube", "forecast_sigma"]


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


def noise_subcube_header(plan: PlannedEpoch, line, geo: dict, location_delta_dot=None) -> tuple[fits.Header, int]:
    """The header of a comoving-stage sub-cube for ``line`` at the planned epoch (target at the centre)."""
    dv = plan.channel_khz * 1e3 / line.freq.to_value(u.Hz) * const.c.to_value(u.km / u.s)
    nchan = 2 * int(plan.half_width_km_s / dv) + 1
    n = plan.npix
    h = fits.Header()
    h["NAXIS"], h["NAXIS1"], h["NAXIS2"], h["NAXIS3"] = 3, n, n, nchan
    h["CTYPE1"], h["CRVAL1"], h["CDELT1"], h["CRPIX1"], h["CUNIT1"] = "RA---SIN", float(geo["ra"].to_value(u.deg)), \
        -plan.pixel_arcsec / 3600, n / 2 + 0.5, "deg"
    h["CTYPE2"], h["CRVAL2"], h["CDELT2"], h["CRPIX2"], h["CUNIT2"] = "DEC--SIN", float(geo["dec"].to_value(u.deg)), \
        plan.pixel_arcsec / 3600, n / 2 + 0.5, "deg"
    h["CTYPE3"], h["CUNIT3"], h["CRVAL3"], h["CDELT3"], h["CRPIX3"] = "VRAD", "km/s", -dv * (nchan // 2), dv, 1.0
    h["SPECSYS"], h["RESTFRQ"], h["BUNIT"] = "SOURCE", line.freq.to_value(u.Hz), "Jy/beam"
    h["BMAJ"], h["BMIN"], h["BPA"] = plan.beam_arcsec[0] / 3600, plan.beam_arcsec[1] / 3600, plan.beam_arcsec[2]
    h["GLXPIX"], h["GLYPIX"] = (n - 1) / 2, (n - 1) / 2
    h["GLDELTA"], h["GLRH"] = float(geo["delta"].to_value(u.au)), float(geo["r_h"].to_value(u.au))
    h["GLLINE"], h["GLCUBE"], h["GLEPOCH"], h["GLCOVER"] = line.line_id, f"plan_{plan.label}", plan.label, True
    h["GLSPRESP"] = "hanning"
    return h, nchan


def noise_realisation(plan: PlannedEpoch, nchan: int, rng: np.random.Generator) -> np.ndarray:
    """Noise-only data with the planned rms, correlated over the beam and by Hanning smoothing."""
    kernel = beam_kernel(plan.beam_arcsec[0] / plan.pixel_arcsec, plan.beam_arcsec[1] / plan.pixel_arcsec,
                         plan.beam_arcsec[2])
    kernel = kernel / np.sqrt(np.sum(kernel**2))
    white = rng.standard_normal((nchan, plan.npix, plan.npix))
    noise = fftconvolve(white, kernel[None], mode="same", axes=(1, 2)) * plan.noise_jy_beam / np.sqrt(0.375)
    return apply_spectral_response(noise, "hanning").astype(np.float32)


def write_noise_subcube(path: Path, plan: PlannedEpoch, line, geo: dict, seed: int) -> Path:
    """Write one noise realisation as a sub-cube file (the extraction reads the header from it)."""
    header, nchan = noise_subcube_header(plan, line, geo)
    data = noise_realisation(plan, nchan, np.random.default_rng(seed))
    hdu = fits.PrimaryHDU(data)
    for key, value in header.items():
        if key not in ("NAXIS", "NAXIS1", "NAXIS2", "NAXIS3"):
            hdu.header[key] = value
    hdu.writeto(path, overwrite=True)
    return path



def forecast_sigma(plan: PlannedEpoch, line, geo: dict, extraction: ExtractionSettings, catalogue,
                   t_kin: u.Quantity, model: ComaModel, workdir: Path, shortest_baseline: u.Quantity | None = None,
                   correct_filtering: bool = True, n_realisations: int = 4, seed: int = 0) -> np.ndarray:
    """σ_Q (n_T, n_ap) that the planned observation of ``line`` would give: RMS over noise realisations of the
    σ the real measurement code returns for noise-only sub-cubes of the planned statistics.

    The sub-cubes are extracted with ``extraction`` and converted to Q units with
    :func:`pipeline.rates.q_units.stack_input` at the temperatures ``t_kin`` under the coma ``model``
    (and the interferometer's ``shortest_baseline``, when given), exactly as measured cubes are.
    """
    sig2 = []
    for k in range(n_realisations):
        path = write_noise_subcube(workdir / f"{plan.label}_{line.line_id}_{k}.fits", plan, line, geo, seed + k)
        hdul = extract_spectra(path, extraction, offsource=False)
        inp, _ = stack_input(hdul, catalogue, t_kin, model, shortest_baseline, correct_filtering)
        sig2.append(inp.sigma_q**2)
    return np.sqrt(np.mean(sig2, axis=0))
