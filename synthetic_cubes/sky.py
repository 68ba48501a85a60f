"""The celestial part of a synthetic cube's header, shared by the millimetre and infrared generators."""

from __future__ import annotations

import astropy.units as u
from astropy.coordinates import SkyCoord
from astropy.io import fits

__all__ = ["sky_header"]


def sky_header(ra: u.Quantity, dec: u.Quantity, offset_arcsec: tuple[float, float], pixel: u.Quantity, n: int,
               projection: str) -> fits.Header:
    """RA/Dec axes of an n x n image whose reference pixel (the centre) lies ``offset_arcsec`` from (ra, dec)."""
    centre = SkyCoord(ra, dec, frame="icrs").spherical_offsets_by(offset_arcsec[0] * u.arcsec,
                                                                  offset_arcsec[1] * u.arcsec)
    header = fits.Header()
    header["CTYPE1"], header["CUNIT1"] = f"RA---{projection}", "deg"
    header["CRVAL1"], header["CDELT1"], header["CRPIX1"] = centre.ra.deg, -pixel.to_value(u.deg), n / 2 + 0.5
    header["CTYPE2"], header["CUNIT2"] = f"DEC--{projection}", "deg"
    header["CRVAL2"], header["CDELT2"], header["CRPIX2"] = centre.dec.deg, pixel.to_value(u.deg), n / 2 + 0.5
    return header
