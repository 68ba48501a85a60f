"""Stage 'extract': aperture spectra of one line's sub-cube, as FITS."""

from __future__ import annotations

import logging
from typing import Any

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.io import fits

from pipeline.io.atomic import write_fits
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.response import outflow_speed
from pipeline.workflow.common import aperture_radii, catalogue_from_config, coma_model

__all__ = ["run", "other_line_velocities", "extraction_settings"]

log = logging.getLogger(__name__)


def other_line_velocities(catalogue, line, half_width: u.Quantity) -> u.Quantity:
    """Radio velocities, on ``line``'s axis, of every other catalogue line within ``half_width``."""
    c = const.c.to_value(u.km / u.s)
    f0 = line.freq.to_value(u.GHz)
    vel = [c * (1 - other.freq.to_value(u.GHz) / f0) for other in catalogue.lines if other.line_id != line.line_id]
    vel = np.array([v for v in vel if abs(v) <= half_width.to_value(u.km / u.s)])
    return vel * u.km / u.s


def extraction_settings(header: fits.Header, config: dict[str, Any], catalogue) -> ExtractionSettings:
    """Apertures, window and the other lines' positions for one sub-cube, from the config."""
    line = catalogue.get_line(header["GLLINE"])
    v_out = outflow_speed(coma_model(config), float(header["GLRH"]) * u.au)
    half = config["comoving"]["half_width_km_s"] * u.km / u.s
    return ExtractionSettings(radii=aperture_radii(config), window=config["limits"]["window_factor"] * v_out,
                              other_lines=other_line_velocities(catalogue, line, half + 5 * u.km / u.s))


def run(subcube_path: str, config: dict[str, Any], out_path: str) -> None:
    """Extract and write the aperture spectra of one sub-cube."""
    header = fits.getheader(subcube_path)
    record = provenance_record(config, [subcube_path], "extract")
    if not header.get("GLCOVER", False):
        log.info("%s: no data (%s); writing an empty spectra file", subcube_path, header.get("GLREASON"))
        out = fits.PrimaryHDU()
        for key, val in header.items():
            if key.startswith("GL") and key != "GLPROV":
                out.header[key] = val
        add_to_header(out.header, record)
        write_fits(fits.HDUList([out]), out_path)
        return
    settings = extraction_settings(header, config, catalogue_from_config(config))
    hdul = extract_spectra(subcube_path, settings)
    add_to_header(hdul[0].header, record)
    write_fits(hdul, out_path)
