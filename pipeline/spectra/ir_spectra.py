"""Aperture spectra of infrared integral-field cubes, in flux density per unit wavelength.

An infrared cube's pixels hold a surface brightness, per unit frequency (MJy/sr)
or per unit wavelength (W m^-2 um^-1 sr^-1, erg s^-1 cm^-2 A^-1 sr^-1). The
aperture sum of a channel, times the pixel solid angle, is a flux density; it is
brought to F_lambda in W m^-2 um^-1 with astropy's ``spectral_density``
equivalency at the channel's observed wavelength, so a band integral over
observed wavelength is the band's energy flux at the telescope.

The error extension (ERR), when the cube has one, gives each pixel's 1-sigma; the
aperture's error per channel is sqrt(sum w^2 ERR^2), which holds for independent
pixels. Resampled integral-field cubes have correlated pixels, so the band
measurement also measures its noise empirically (:mod:`pipeline.spectra.band_measure`).
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.wcs import WCS
from astropy.wcs.utils import proj_plane_pixel_area

from pipeline.coma.image import projected_coma_image
from pipeline.io.cubes import CubeInfo, flagged, open_data, open_error, open_quality
from pipeline.spectra.apertures import (ApertureWeights, aperture_spectra, aperture_weights,
                                        corrected_aperture_spectra)
from pipeline.errors import CubeError

__all__ = ["F_LAMBDA", "SURFACE_BRIGHTNESS_KINDS", "pixel_solid_angle", "flux_density_factor", "IRSpectra",
           "extract_ir_spectra"]

#: The unit of every infrared aperture spectrum.
F_LAMBDA = u.W / u.m**2 / u.um
#: Surface-brightness units an infrared cube may carry (any prefix or equivalent spelling).
SURFACE_BRIGHTNESS_KINDS = (u.Jy / u.sr, u.W / u.m**2 / u.um / u.sr)


def pixel_solid_angle(wcs: WCS) -> u.Quantity:
    """Solid angle of one pixel of a celestial WCS (sr), from its projection-plane pixel area.

    Uses :func:`astropy.wcs.utils.proj_plane_pixel_area` (the determinant of the
    pixel-to-world matrix at the reference point, so skewed and rotated pixels are
    handled); exact for small fields of any projection at the reference point.
    """
    area = proj_plane_pixel_area(wcs.celestial)  # in the square of the WCS's angular unit
    unit = u.Unit(wcs.celestial.wcs.cunit[0] or "deg")
    return (area * unit**2).to(u.sr)


def flux_density_factor(bunit: u.UnitBase, pixel_area: u.Quantity, wavelengths: u.Quantity,
                        path: str = "cube") -> u.Quantity:
    """Factor per channel turning a sum of pixel values (in ``bunit``) into F_lambda (W m^-2 um^-1).

    Parameters
    ----------
    bunit : unit
        The cube's BUNIT: a surface brightness per frequency (e.g. MJy/sr) or per
        wavelength (e.g. W m^-2 um^-1 sr^-1).
    pixel_area : `~astropy.units.Quantity` [solid angle]
        Solid angle of one pixel.
    wavelengths : `~astropy.units.Quantity` [length]
        Observed wavelength of each channel (where F_nu becomes F_lambda).

    Notes
    -----
    F = I Omega_pix per pixel; F_lambda = F_nu c / lambda^2 (astropy ``spectral_density``).
    """
    unit = u.Unit(bunit)
    if not any(unit.is_equivalent(kind) for kind in SURFACE_BRIGHTNESS_KINDS):
        msg = (f"{path}: header card BUNIT = '{unit}' is not a surface brightness; expected an infrared cube in "
               "MJy/sr, W/m2/um/sr or erg/s/cm2/A/sr")
        raise CubeError(msg)
    per_pixel = (1.0 * unit * u.Quantity(pixel_area, u.sr)).decompose()
    lam = u.Quantity(wavelengths, u.um)
    return (per_pixel * np.ones(lam.shape)).to(F_LAMBDA, equivalencies=u.spectral_density(lam)) / (1.0 * unit)


@dataclass(frozen=True)
class IRSpectra:
    """Aperture spectra of one infrared cube: shapes (n_apertures, n_chan), F_lambda units."""

    flux: u.Quantity              # W m^-2 um^-1
    sigma: u.Quantity | None      # from the ERR extension; None when the cube has none
    n_blank: np.ndarray           # blank pixels inside each aperture per channel
    radius_pix: np.ndarray        # (n_apertures,)
    area_pix: np.ndarray          # (n_apertures,) sum of the exact overlap weights
    factor: u.Quantity            # (n_chan,) F_lambda per unit aperture sum of BUNIT values
    masked_share: np.ndarray | None = None   # (n_apertures, n_chan) coma share made up for blank pixels


def _square_weights(ap: ApertureWeights) -> ApertureWeights:
    return ApertureWeights(ys=ap.ys, xs=ap.xs, weights=ap.weights**2, radius_pix=ap.radius_pix)


def extract_ir_spectra(info: CubeInfo, x: float, y: float, radii_pix: list[float], dq_bad_bits: int = 0,
                       max_masked_share: float | None = None) -> IRSpectra:
    """Sum the cube over circular apertures centred on (x, y) (0-based pixels), channel by channel.

    The sums use exact pixel-overlap weights (photutils, as in the millimetre path); the error
    spectra propagate the ERR extension through the same weights, sqrt(sum w^2 ERR^2). Voxels whose DQ
    flags hold any of ``dq_bad_bits`` are blank; with ``max_masked_share`` blank pixels inside an aperture
    are made up for with a projected coma's share of them
    (:func:`pipeline.spectra.apertures.corrected_aperture_spectra`; the error of the valid pixels is scaled
    the same way), and a channel where that share exceeds ``max_masked_share`` is left blank.
    """
    shape = info.shape[1:]
    aps = [aperture_weights(shape, x, y, r, what=f"{info.path}: aperture of {r:.1f} px") for r in radii_pix]
    factor = flux_density_factor(info.bunit, pixel_solid_angle(info.celestial_wcs), info.wavelengths,
                                 str(info.path))
    with open_data(info.path) as data, open_quality(info.path) as quality:
        use_quality = quality if (quality is not None and dq_bad_bits) else None
        if max_masked_share is not None:
            psf = ((info.beam_major / info.pixel_scale).decompose().value,
                   (info.beam_minor / info.pixel_scale).decompose().value,
                   info.beam_pa.to_value(u.deg)) if info.beam_major is not None else None
            model = projected_coma_image(shape, x, y, psf)
            sums, n_blank, share = corrected_aperture_spectra(data, aps, model, max_masked_share, use_quality,
                                                              dq_bad_bits)
        else:
            sums, n_blank = aperture_spectra(data, aps)
            share = np.zeros_like(sums)
        lost = None
        if use_quality is not None or np.any(n_blank):
            lost = ~np.isfinite(np.asarray(data, dtype=np.float64))
            if use_quality is not None:
                lost |= flagged(use_quality, dq_bad_bits)
    sigma = None
    if info.error_hdu is not None:
        with open_error(info.path) as err:
            err = np.asarray(err, dtype=np.float64)
            if np.nanmin(err) < 0:
                msg = (f"{info.path}: the ERR extension holds negative values (down to {np.nanmin(err):.3g}); "
                       "expected 1-sigma errors >= 0")
                raise CubeError(msg)
            if lost is not None:                       # the valid pixels' errors, scaled as their sum was
                err = np.where(lost, 0.0, err)
            var, _ = aperture_spectra(np.square(err), [_square_weights(a) for a in aps])
            if lost is not None:
                var = var / np.square(1.0 - share)
                var[~np.isfinite(sums)] = np.nan
        sigma = np.sqrt(var) * factor.value[None, :] * F_LAMBDA
    return IRSpectra(flux=sums * factor.value[None, :] * F_LAMBDA, sigma=sigma, n_blank=n_blank,
                     radius_pix=np.array(radii_pix, dtype=float), area_pix=np.array([a.area for a in aps]),
                     factor=factor, masked_share=share)
