"""The private FITS header cards gasledger writes into its products: every name and comment in one place.

Products (:mod:`pipeline.io.products`, the bands and stack files, provenance records) store their
metadata in cards named ``GL...``. Code elsewhere uses the keys of :data:`CARDS` through :func:`put`
and :func:`get`, never a card name.
"""

from __future__ import annotations

from typing import Any

from astropy.io import fits

from pipeline.errors import CubeError

__all__ = ["CARDS", "put", "get", "has"]

#: key -> (card name, comment)
CARDS: dict[str, tuple[str, str]] = {
    # identity
    "cube_id": ("GLCUBE", "cube id"),
    "epoch": ("GLEPOCH", "epoch label"),
    "line_id": ("GLLINE", "catalogue line id"),
    "species": ("GLSPEC", "species"),
    "regime": ("GLREGIME", "cube regime"),
    "covered": ("GLCOVER", "integration window covered by the band"),
    "reason": ("GLREASON", "why the line is not used"),
    "spectral_response": ("GLSPRESP", "channel response of the spectrometer"),
    # geometry of the target in the product
    "target_x": ("GLXPIX", "target x pixel (0-based) in this sub-cube"),
    "target_y": ("GLYPIX", "target y pixel (0-based) in this sub-cube"),
    "r_h": ("GLRH", "[au] heliocentric distance"),
    "delta": ("GLDELTA", "[au] observer-target distance"),
    "delta_dot": ("GLDDOT", "[km/s] topocentric range rate"),
    # where the sub-cube came from
    "linear": ("GLVLIN", "linear WCS exact (else see the VELOCITY table)"),
    "first_channel": ("GLCHAN0", "first channel taken from the cube (0-based)"),
    "freq0": ("GLFREQ0", "[Hz] labelled frequency of the first channel"),
    "dfreq": ("GLDFREQ", "[Hz] labelled channel step"),
    "n_flagged": ("GLNFLAG", "voxels blanked by their data-quality flags"),
    # how the spectra were extracted
    "window": ("GLWIN", "[km/s] integration window half-width"),
    "v_centre": ("GLVCEN", "[km/s] integration window centre"),
    "aperture_x": ("GLAPX", "aperture centre x (0-based pixel)"),
    "aperture_y": ("GLAPY", "aperture centre y (0-based pixel)"),
    "pixel_scale": ("GLPIXSC", "[arcsec] pixel scale"),
    "grid_nx": ("GLNX", "width of the sub-cube [pixels]"),
    "grid_ny": ("GLNY", "height of the sub-cube [pixels]"),
    "injected_q": ("GLINJQ", "[1/s] injected production rate"),
    "injected_index": ("GLINJI", "injection sky position (0 = nucleus)"),
    # infrared bands files
    "resolving_power": ("GLRPOW", "resolving power used"),
    "resolving_power_source": ("GLRPSRC", "where the resolving power came from"),
    "doppler": ("GLDOPP", "observed / rest wavelength of the target"),
    "sigma_source": ("GLSIGSRC", "per-channel sigma from"),
    "bands": ("GLBANDS", "bands measured"),
    # stack files
    "n_inputs": ("GLNIN", "number of spectra stacked"),
    "group": ("GLGROUP", "epoch group of this stack"),
    # provenance (pipeline.io.provenance)
    "version": ("GLVERS", "gasledger version"),
    "stage": ("GLSTAGE", "gasledger stage that wrote this file"),
    "provenance": ("GLPROV", "provenance record (JSON)"),
}


def put(header: fits.Header, key: str, value: Any) -> None:
    """Write the card of ``key`` with its comment (long strings as FITS CONTINUE cards)."""
    name, comment = CARDS[key]
    if isinstance(value, str) and len(value) > 60:
        header[name] = value
    else:
        header[name] = (value, comment)


def has(header: fits.Header, key: str) -> bool:
    """Whether the card of ``key`` is in ``header``."""
    return CARDS[key][0] in header


def get(header: fits.Header, key: str, default: Any = ..., where: str = "product") -> Any:
    """The value of the card of ``key``; ``default`` when it is absent (CubeError when no default is given)."""
    name = CARDS[key][0]
    if name in header:
        return header[name]
    if default is ...:
        msg = f"{where}: header card {name} ({CARDS[key][1]}) is missing; expected a file written by gasledger"
        raise CubeError(msg)
    return default
