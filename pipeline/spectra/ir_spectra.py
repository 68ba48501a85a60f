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

from pipeline.spectra.apertures import ApertureWeights, aperture_spectra, aperture_weights
from pipeline.io.cubes import CubeInfo, open_data, open_error
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


def _square_weights(ap: ApertureWeights) -> ApertureWeights:
    return ApertureWeights(ys=ap.ys, xs=ap.xs, weights=ap.weights**2, radius_pix=ap.radius_pix)


def extract_ir_spectra(info: CubeInfo, x: float, y: float, radii_pix: list[float]) -> IRSpectra:
    """Sum the cube over circular apertures centred on (x, y) (0-based pixels), channel by channel.

    The sums use exact pixel-overlap weights (photutils, as in the millimetre path); the error
    spectra propagate the ERR extension through the same weights, sqrt(sum w^2 ERR^2).
    """
    shape = info.shape[1:]
    aps = [aperture_weights(shape, x, y, r, what=f"{info.path}: aperture of {r:.1f} px") for r in radii_pix]
    factor = flux_density_factor(info.bunit, pixel_solid_angle(info.celestial_wcs), info.wavelengths,
                                 str(info.path))
    with open_data(info.path) as data:
        sums, n_blank = aperture_spectra(data, aps)
    sigma = None
    if info.error_hdu is not None:
        with open_error(info.path) as err:
            err = np.asarray(err, dtype=np.float64)
            if np.nanmin(err) < 0:
                msg = (f"{info.path}: the ERR extension holds negative values (down to {np.nanmin(err):.3g}); "
                       "expected 1-sigma errors >= 0")
                raise CubeError(msg)
            var, _ = aperture_spectra(np.square(err), [_square_weights(a) for a in aps])
        sigma = np.sqrt(var) * factor.value[None, :] * F_LAMBDA
    return IRSpectra(flux=sums * factor.value[None, :] * F_LAMBDA, sigma=sigma, n_blank=n_blank,
                     radius_pix=np.array(radii_pix, dtype=float), area_pix=np.array([a.area for a in aps]),
                     factor=factor)
