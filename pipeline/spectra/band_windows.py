"""Where the infrared bands are in a cube: resolving power, Doppler factor, integration windows, continuum ranges.

Also the per-channel noise of a cube without an ERR extension (the scatter of
line-free channel differences).
"""

from __future__ import annotations

import astropy.units as u
import numpy as np

from pipeline.catalogue import Band, Catalogue
from pipeline.dust.solar import solar_flux_density
from pipeline.errors import CoverageError
from pipeline.geometry.comoving import target_frame_frequencies
from pipeline.io.cubes import CubeInfo
from pipeline.spectra.band_measure import continuum_mask, integration_window

__all__ = ["resolving_power_of", "doppler_factor", "scatter_sigma", "band_windows", "band_setup"]


def resolving_power_of(info: CubeInfo, given: float | None) -> tuple[float, str]:
    """The resolving power to use and where it came from (config, or Nyquist sampling of the channels)."""
    if given is not None:
        return float(given), "config"
    lam = info.wavelengths.to_value(u.um)
    return float(np.median(lam[1:] / (2 * np.abs(np.diff(lam))))), "Nyquist sampling, lambda / (2 dlambda)"


def doppler_factor(info: CubeInfo, geometry) -> float:
    """Observed over rest wavelength of the target (one factor for all channels); ``geometry`` is the cube's row."""
    rest = target_frame_frequencies(info, geometry)
    return float(np.median((rest / info.frequencies).decompose().value))


def scatter_sigma(wavelength: np.ndarray, flux: np.ndarray, free: np.ndarray) -> np.ndarray:
    """Per-channel sigma of a spectrum without an ERR extension: std of first differences / sqrt(2), line-free.

    Differencing removes a smooth continuum; for white noise the difference of two channels has variance 2 sigma^2.
    """
    diffs = np.diff(np.where(free, flux, np.nan))
    diffs = diffs[np.isfinite(diffs)]
    if diffs.size < 5:
        msg = f"only {diffs.size} line-free channel pairs to estimate the noise (no ERR extension); expected 5 or more"
        raise CoverageError(msg)
    return np.full(wavelength.shape, float(np.std(diffs, ddof=1) / np.sqrt(2.0)))


def _band_windows(bands: list[Band], factor: float, resolving_power: float, margin: float):
    """Observed-frame (extent_lo, extent_hi, window_lo, window_hi) of each band, in um."""
    out = {}
    for band in bands:
        lo, hi = band.extent_lo * factor, band.extent_hi * factor
        wlo, whi = integration_window(lo, hi, resolving_power, margin)
        out[band.band_id] = (lo, hi, wlo, whi)
    return out


def band_windows(obs: u.Quantity, catalogue: Catalogue, band_ids: list[str], factor: float, resolving_power: float,
                 margin_fwhm: float) -> dict:
    """Windows of every catalogue band in the cube's range and of ``band_ids`` (observed frame, um).

    Each window is the band's extent at the observed wavelengths (``factor`` = observed / rest) widened by
    ``margin_fwhm`` line-spread FWHM (lambda / ``resolving_power``) on each side.
    """
    margin = float(margin_fwhm)
    in_range = [b for b in catalogue.bands if b.extent_hi * factor >= obs.min() and b.extent_lo * factor <= obs.max()]
    wanted = [catalogue.get_band(b) for b in band_ids if b not in {x.band_id for x in in_range}]
    return _band_windows(in_range + wanted, factor, resolving_power, margin)


def band_setup(band_id: str, windows: dict, obs: u.Quantity, continuum_factor: float,
               continuum_shape: str) -> tuple[np.ndarray, np.ndarray | None]:
    """The continuum mask of one band (other bands' windows excluded) and the continuum shape (None = flat).

    ``continuum_factor`` is the width of the continuum ranges on each side in units of the window width;
    ``continuum_shape`` 'solar' makes the continuum the solar spectrum times the polynomial, 'flat' the
    polynomial alone.
    """
    wlo, whi = windows[band_id][2:]
    exclude = [(w[2], w[3]) for k, w in windows.items() if k != band_id]
    free = continuum_mask(obs, wlo, whi, float(continuum_factor), exclude)
    shape = None
    if continuum_shape == "solar":  # reflected sunlight: the polynomial is the reflectance
        sun = solar_flux_density(obs).value
        shape = sun / np.mean(sun)
    return free, shape
