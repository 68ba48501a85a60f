"""Synthetic infrared integral-field cubes of the invented campaign.

Sky model per channel: the dust continuum of a steady 1/rho coma whose Afrho
follows a linear reflectance with the chosen colour (reflected sunlight from the
pipeline's solar model), plus each band of a species with Q > 0 (Haser parent
coma times the band flux per molecule, spread in wavelength by the band
template at the instrument's resolving power), both convolved with a circular
Gaussian point-spread function. Noise is Gaussian and independent per pixel,
with the sigma written to an ERR extension; the data go to a SCI extension in
the setup's BUNIT. Like the millimetre generator it reuses the pipeline's
physics, so recovery is a consistency check; each function has its own
external checks in tests/.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.time import Time
from astropy.wcs import WCS, FITSFixedWarning
from scipy.signal import fftconvolve

from pipeline.io.atomic import write_fits
from pipeline.spectra.band_measure import binned_band_template
from pipeline.coma.image import beam_kernel, coma_molecules_image, pixel_column_integral
from pipeline.coma.conversion import band_flux_from_molecules
from pipeline.spectra.ir_spectra import F_LAMBDA
from pipeline.coma.response import ComaModel, outflow_speed, scale_lengths
from pipeline.dust.solar import solar_flux_density

from .sky import sky_header

__all__ = ["InfraredSetup", "write_ir_cube", "afrho_model"]


@dataclass(frozen=True)
class InfraredSetup:
    """One infrared integral-field setting (a grating range) observed at some epochs."""

    name: str
    epochs: tuple[str, ...]
    lam_min_um: float
    lam_max_um: float
    channel_um: float
    resolving_power: float
    pixel_arcsec: float
    npix: int
    psf_fwhm_arcsec: float
    noise_w_m2_um_sr: float          # 1-sigma per pixel and channel
    bunit: str = "W/m2/um/sr"        # or 'MJy/sr'


def afrho_model(wavelength: u.Quantity, afrho_ref: u.Quantity, lam_ref: u.Quantity, slope_per_100nm: float):
    """Afrho of a linear reflectance: Afrho_ref (1 + S' (lambda - lambda_ref)), S' in per cent per 100 nm."""
    s = slope_per_100nm / 100.0 / (100 * u.nm)
    return afrho_ref * (1 + (s * (wavelength - lam_ref)).decompose().value)


def write_ir_cube(path: Path, sc, setup: InfraredSetup, mid: Time, geo, catalogue,
                  rng: np.random.Generator) -> dict:
    """Build and write one infrared cube (SCI + ERR extensions); return a summary."""
    ra, dec = geo["ra"], geo["dec"]
    delta, r_h, ddot = geo["delta"], geo["r_h"], geo["delta_dot"]
    n = setup.npix
    lam_obs = (setup.lam_min_um + setup.channel_um * np.arange(
        int(round((setup.lam_max_um - setup.lam_min_um) / setup.channel_um)) + 1)) * u.um
    beta = (ddot / const.c).decompose().value
    doppler = float(np.sqrt((1 + beta) / (1 - beta)))          # observed / rest wavelength (relativistic)
    pix = setup.pixel_arcsec * u.arcsec
    pix_km = (pix.to_value(u.rad) * delta).to_value(u.km)
    omega_pix = pix.to_value(u.rad) ** 2                         # sr
    header = sky_header(ra, dec, sc.extra.get("ir_pointing_offset_arcsec", (0.4, -0.3)), pix, n, "TAN")
    header["CTYPE3"], header["CUNIT3"] = "WAVE", "um"
    header["CRVAL3"], header["CDELT3"], header["CRPIX3"] = lam_obs[0].to_value(u.um), setup.channel_um, 1.0
    header["SPECSYS"] = "TOPOCENT"
    header["RADESYS"] = "ICRS"
    header["BUNIT"] = setup.bunit
    fwhm = setup.psf_fwhm_arcsec
    header["BMAJ"], header["BMIN"], header["BPA"] = fwhm / 3600, fwhm / 3600, 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        wcs = WCS(header).celestial
    x0, y0 = (float(v) for v in wcs.world_to_pixel(SkyCoord(ra, dec, frame="icrs")))
    kernel = beam_kernel(fwhm / setup.pixel_arcsec, fwhm / setup.pixel_arcsec, 0.0)

    # dust: a 1/rho coma whose aperture sum is rho (sum of dA / (2 pi rho)), scaled by Afrho F_sun / (4 r_h^2 Delta^2)
    sub = 3
    xi = (np.arange(n * sub) + 0.5) / sub - 0.5
    xc, yc = np.meshgrid(xi, xi)
    half = 0.5 / sub
    dA_over_rho = pixel_column_integral((xc - half - x0) * pix_km, (xc + half - x0) * pix_km,
                                        (yc - half - y0) * pix_km, (yc + half - y0) * pix_km)
    dust_image = (dA_over_rho.reshape(n, sub, n, sub).sum(axis=(1, 3)) / (2 * np.pi))          # km per pixel
    dust_image = fftconvolve(dust_image, kernel, mode="same")
    dust = sc.extra["dust"]
    afrho = afrho_model(lam_obs / doppler, dust["afrho_cm"] * u.cm, dust["lam_ref_um"] * u.um, dust["slope"])
    r_au = r_h.to_value(u.au)
    dust_flux = (afrho.to(u.km) * solar_flux_density(lam_obs) / (4 * r_au**2 * delta.to(u.km) ** 2)).to_value(
        F_LAMBDA / u.km)                                                                          # per km of rho
    signal = dust_flux[:, None, None] * dust_image[None]                                      # W m^-2 um^-1 / pixel

    model = ComaModel(outflow="law", solar_activity="quiet")
    v_out = outflow_speed(model, r_h)
    widths = np.gradient(lam_obs.to_value(u.um))
    bands = []
    for band in catalogue.bands:
        q = sc.production_rates.get(band.species)
        if not q:
            continue
        lo, hi = band.extent_lo * doppler, band.extent_hi * doppler
        if hi < lam_obs.min() or lo > lam_obs.max():
            continue
        species = catalogue.get_species(band.species)
        length, daughter = scale_lengths(species, None, model, r_h, v_out)
        molecules = q * coma_molecules_image((n, n), x0, y0, pix_km, v_out, length, daughter)
        molecules = fftconvolve(molecules, kernel, mode="same")
        per_molecule = band_flux_from_molecules(1.0 * u.one, band.wavelength, band.g_1au, r_h, delta).to_value(
            u.W / u.m**2)
        spread = np.asarray(binned_band_template(lam_obs, lo, hi, setup.resolving_power)) / widths   # 1/um
        signal += (per_molecule * spread)[:, None, None] * molecules[None]
        bands.append(band.band_id)
    sigma = setup.noise_w_m2_um_sr
    cube_si = signal / omega_pix + rng.normal(0.0, sigma, signal.shape)                       # W m^-2 um^-1 sr^-1
    err_si = np.full(signal.shape, sigma)
    to_unit = (1.0 * u.W / u.m**2 / u.um / u.sr).to(u.Unit(setup.bunit, format="fits"),
                                                   equivalencies=u.spectral_density(lam_obs))
    scale = np.broadcast_to(np.asarray(to_unit.value, dtype=float), lam_obs.shape)[:, None, None] * np.ones((1, n, n))
    prim = fits.PrimaryHDU()
    half_exp = sc.exposure_s / 2 * u.s
    prim.header["DATE-OBS"] = (mid - half_exp).isot
    prim.header["DATE-END"] = (mid + half_exp).isot
    prim.header["EXPTIME"] = sc.exposure_s
    prim.header["OBJECT"] = sc.target_name
    prim.header["TELESCOP"] = sc.extra.get("ir_facility", "fictional infrared telescope")
    prim.header["ORIGIN"] = "gasledger synthetic_cubes (invented data)"
    sci = fits.ImageHDU((cube_si * scale).astype(np.float32), header=header, name="SCI")
    err = fits.ImageHDU((err_si * scale).astype(np.float32), header=header, name="ERR")
    write_fits(fits.HDUList([prim, sci, err]), path)
    return {"path": str(path), "bands": bands, "x_pix": x0, "y_pix": y0, "nchan": int(lam_obs.size)}
