"""Stage 'comoving': one line's sub-cube in the target's rest frame, as FITS."""

from __future__ import annotations

import logging

import astropy.units as u
import numpy as np

from pipeline.spectra.apertures import radius_in_pixels
from pipeline.io.atomic import write_fits
from pipeline.geometry.comoving import cut_subcube
from pipeline.io.cubes import read_cube_info
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.response import outflow_speed
from pipeline.settings import Settings
from pipeline.io.tables import read_table

__all__ = ["run", "crop_half_size"]

log = logging.getLogger(__name__)


def crop_half_size(radii_pix: list[float], beam_pix: float) -> float:
    """Half-size of the sky box: room for the largest aperture and its off-source ring."""
    r = max(radii_pix)
    return 4.0 * r + 3.0 * beam_pix


def run(geometry_path: str, line_id: str, settings: Settings, out_path: str) -> None:
    """Cut and write the sub-cube of ``line_id`` from the settings' cube."""
    cube_path = settings.cube.path
    spectral_response = settings.cube.spectral_response
    info = read_cube_info(cube_path, settings.cube.beam_arcsec)
    geo = read_table(geometry_path)[0]
    line = settings.catalogue().get_line(line_id)
    v_out = outflow_speed(settings.coma, geo["r_h"])
    window = settings.limits.window_factor * v_out
    delta = u.Quantity(geo["delta"])
    radii_pix = [radius_in_pixels(r, delta, info.pixel_scale) for r in settings.apertures_of()]
    beam_pix = float((np.sqrt(info.beam_major * info.beam_minor) / info.pixel_scale).decompose()) \
        if info.beam_major is not None else 1.0
    sub = cut_subcube(info, geo, line, settings.half_width, window, crop_half_size(radii_pix, beam_pix),
                      spectral_response, settings.quality.dq_bad_bits)
    if sub.meta.covered:
        log.info("line %s in cube %s: %d channels, %d x %d pixels", line_id, geo["cube_id"], *sub.data.shape)
    else:
        log.warning("line %s in cube %s is not used: %s", line_id, geo["cube_id"], sub.meta.reason)
    hdul = sub.to_fits()
    add_to_header(hdul[0].header, provenance_record(settings, [cube_path, geometry_path], "comoving"))
    write_fits(hdul, out_path)
