"""Synthetic infrared integral-field cubes of the invented campaign, from the fictional space telescope.

Sky model per channel: the dust continuum of a steady 1/rho coma whose Afrho
follows a linear reflectance with the chosen colour (reflected sunlight from the
pipeline's solar model), plus each band of a species with Q > 0 (Haser parent
coma times the band flux per molecule, spread in wavelength by the band
template at the instrument's resolving power), both convolved with a circular
Gaussian point-spread function. Noise is Gaussian and independent per pixel,
with the sigma written to an ERR extension; the data go to a SCI extension in
the setup's BUNIT. The facility layout adds what a space IFU's product holds:
DQ flags (a blank border around the field, a few flagged voxels inside it),
a weight map, a rotated field and a barycentric wavelength axis, with the
observation's time cards in an empty primary HDU. Like the millimetre generator it reuses the pipeline's
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

from pipeline.geometry.frames import observer_frame_factor
from pipeline.geometry.observers import Observer
from pipeline.io.atomic import write_fits
from pipeline.spectra.band_measure import binned_band_template
from pipeline.coma.image import beam_kernel, coma_molecules_image, pixel_column_integral
from pipeline.coma.conversion import band_flux_from_molecules
from pipeline.spectra.ir_spectra import F_LAMBDA
from pipeline.coma.response import ComaModel, outflow_speed, scale_lengths
from pipeline.dust.solar import solar_flux_density

from .sky import sky_header

__all__ = ["InfraredSetup", "write_ir_cube", "afrho_model", "rotated_pc", "DO_NOT_USE", "OUTSIDE_FIELD",
           "BAD_DETECTOR_PIXEL"]

#: Data-quality bits of the facility layout: bit 0 'do not use' (the space-IFU pipelines' convention, which the
#: pipeline's quality.dq_bad_bits default reads); the two reasons are invented assignments of higher bits.
DO_NOT_USE = 1
BAD_DETECTOR_PIXEL = 1 << 4
OUTSIDE_FIELD = 1 << 9
#: Dither positions of each exposure (the weight map's value where every one covers a voxel; invented).
DITHERS = 4
#: On-source share of the wall-clock exposure (XPOSURE; readout overheads, invented).
ON_SOURCE_SHARE = 0.94


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
    rotation_deg: float = 30.0       # facility layout: rotation of the field on the sky (PC matrix)
    border_pix: int = 3              # facility layout: blank (NaN, flagged) pixels around the field
    flagged_share: float = 5e-4      # facility layout: share of interior voxels flagged DO_NOT_USE


def afrho_model(wavelength: u.Quantity, afrho_ref: u.Quantity, lam_ref: u.Quantity, slope_per_100nm: float):
    """Afrho of a linear reflectance: Afrho_ref (1 + S' (lambda - lambda_ref)), S' in per cent per 100 nm."""
    s = slope_per_100nm / 100.0 / (100 * u.nm)
    return afrho_ref * (1 + (s * (wavelength - lam_ref)).decompose().value)


def rotated_pc(angle_deg: float, cdelt1: float, cdelt2: float) -> dict[str, float]:
    """PC matrix of a field rotated by ``angle_deg`` (the CROTA2 convention: Calabretta & Greisen 2002,
    A&A 395, 1077, eq. 189, PCi_j = CDi_j / CDELTi)."""
    rho = np.deg2rad(angle_deg)
    return {"PC1_1": float(np.cos(rho)), "PC1_2": float(-np.sin(rho) * cdelt2 / cdelt1),
            "PC2_1": float(np.sin(rho) * cdelt1 / cdelt2), "PC2_2": float(np.cos(rho))}


def write_ir_cube(path: Path, sc, setup: InfraredSetup, mid: Time, geo, catalogue, rng: np.random.Generator,
                  layout: str = "native", observer: Observer | None = None) -> dict:
    """Build and write one infrared cube; return a summary.

    ``geo`` is the target's geometry seen from the cube's observer at ``mid`` (ra, dec, r_h, delta, delta_dot).
    ``layout`` 'native': primary (times) + SCI + ERR, SPECSYS = TOPOCENT (the observer's frame), BMAJ/BMIN = the
    PSF. 'facility': the space IFU's product -- an empty primary holding the observation cards (DATE-OBS date
    and TIME-OBS, DATE-BEG/DATE-END, MJD-BEG/MJD-END, EXPSTART/EXPMID/EXPEND, TIMESYS), SCI, ERR, DQ and WMAP
    extensions, the field rotated by ``setup.rotation_deg`` (a PC matrix), wavelengths labelled in the
    barycentric frame (SPECSYS = BARYCENT, which needs ``observer``), a blank border of
    ``setup.border_pix`` pixels and a share ``setup.flagged_share`` of interior voxels flagged DO_NOT_USE
    (NaN in SCI and ERR).
    """
    if layout not in ("facility", "native"):
        msg = f"layout {layout!r} is not one of facility, native"
        raise ValueError(msg)
    facility = layout == "facility"
    ra, dec = geo["ra"], geo["dec"]
    delta, r_h, ddot = geo["delta"], geo["r_h"], geo["delta_dot"]
    n = setup.npix
    lam_label = (setup.lam_min_um + setup.channel_um * np.arange(
        int(round((setup.lam_max_um - setup.lam_min_um) / setup.channel_um)) + 1)) * u.um
    specsys = "BARYCENT" if facility else "TOPOCENT"
    if facility and observer is None:
        msg = "the facility layout labels wavelengths in the barycentric frame and needs the cube's observer"
        raise ValueError(msg)
    # f(SPECSYS) = D f(observer) (pipeline.geometry.frames), so lambda(observer) = D lambda(SPECSYS)
    lam_obs = lam_label * observer_frame_factor(specsys, mid, observer, ra, dec)
    beta = (ddot / const.c).decompose().value
    doppler = float(np.sqrt((1 + beta) / (1 - beta)))          # observed / rest wavelength (relativistic)
    pix = setup.pixel_arcsec * u.arcsec
    pix_km = (pix.to_value(u.rad) * delta).to_value(u.km)
    omega_pix = pix.to_value(u.rad) ** 2                         # sr
    header = sky_header(ra, dec, sc.extra.get("ir_pointing_offset_arcsec", (0.4, -0.3)), pix, n, "TAN")
    if facility:
        for card, value in rotated_pc(setup.rotation_deg, header["CDELT1"], header["CDELT2"]).items():
            header[card] = value
    header["CTYPE3"], header["CUNIT3"] = "WAVE", "um"
    header["CRVAL3"], header["CDELT3"], header["CRPIX3"] = lam_label[0].to_value(u.um), setup.channel_um, 1.0
    header["SPECSYS"] = specsys
    header["RADESYS"] = "ICRS"
    header["BUNIT"] = setup.bunit
    fwhm = setup.psf_fwhm_arcsec
    if not facility:
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
                                                   equivalencies=u.spectral_density(lam_label))
    scale = np.broadcast_to(np.asarray(to_unit.value, dtype=float), lam_label.shape)[:, None, None] * np.ones((1, n, n))
    sci_data = (cube_si * scale).astype(np.float32)
    err_data = (err_si * scale).astype(np.float32)
    start, end = mid - sc.ir_exposure_s / 2 * u.s, mid + sc.ir_exposure_s / 2 * u.s
    prim = fits.PrimaryHDU()
    if facility:
        dq, weight = _quality(sci_data.shape, setup, rng)
        sci_data[dq != 0] = np.nan
        err_data[dq != 0] = np.nan
        date, time_of_day = start.isot.split("T")
        prim.header["DATE-OBS"] = (date, "UTC date at the start of the exposure")
        prim.header["TIME-OBS"] = (time_of_day, "UTC time at the start of the exposure")
        prim.header["DATE-BEG"] = (start.isot, "start of the exposure")
        prim.header["DATE-END"] = (end.isot, "end of the exposure")
        prim.header["MJD-BEG"] = (start.mjd, "[d] start of the exposure")
        prim.header["MJD-END"] = (end.mjd, "[d] end of the exposure")
        prim.header["EXPSTART"] = (start.mjd, "[d] exposure start (MJD)")
        prim.header["EXPMID"] = (mid.mjd, "[d] exposure mid-point (MJD)")
        prim.header["EXPEND"] = (end.mjd, "[d] exposure end (MJD)")
        prim.header["TIMESYS"] = ("UTC", "time scale of the time cards")
        prim.header["XPOSURE"] = (round(sc.ir_exposure_s * ON_SOURCE_SHARE, 3), "[s] on-source (effective) time")
        prim.header["INSTRUME"] = sc.spacecraft.get("instrument", "integral-field unit")
    else:
        prim.header["DATE-OBS"] = start.isot
        prim.header["DATE-END"] = end.isot
        prim.header["EXPTIME"] = sc.ir_exposure_s
    prim.header["OBJECT"] = sc.target_name
    prim.header["TELESCOP"] = sc.spacecraft["name"]
    prim.header["ORIGIN"] = "gasledger synthetic_cubes (invented data)"
    hdus = [prim, fits.ImageHDU(sci_data, header=header, name="SCI")]
    err_header = header.copy()
    hdus.append(fits.ImageHDU(err_data, header=err_header, name="ERR"))
    if facility:
        dq_header = header.copy()
        del dq_header["BUNIT"]
        hdus.append(fits.ImageHDU(dq, header=dq_header, name="DQ"))
        hdus.append(fits.ImageHDU(weight, header=dq_header.copy(), name="WMAP"))
    write_fits(fits.HDUList(hdus), path)
    return {"path": str(path), "bands": bands, "x_pix": x0, "y_pix": y0, "nchan": int(lam_label.size)}


def _quality(shape: tuple[int, int, int], setup: InfraredSetup, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    """DQ flags and the weight map of a space-IFU cube: a blank border, and a share of interior voxels flagged."""
    b = setup.border_pix
    dq = np.zeros(shape, dtype=np.int32)
    border = np.ones(shape[1:], dtype=bool)
    border[b:shape[1] - b, b:shape[2] - b] = False
    dq[:, border] = DO_NOT_USE | OUTSIDE_FIELD
    interior = ~border[None] & (rng.random(shape) < setup.flagged_share)
    dq[interior] = DO_NOT_USE | BAD_DETECTOR_PIXEL
    weight = np.where(dq == 0, float(DITHERS), 0.0).astype(np.float32)    # dithers covering each voxel
    return dq, weight
