"""Stage 'extract': aperture spectra of one line's sub-cube, as FITS."""

from __future__ import annotations

import logging

import astropy.units as u
from astropy.io import fits

from pipeline.io.atomic import write_fits
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.response import outflow_speed
from pipeline.settings import Settings
from pipeline.spectra.line_spectra import extract_spectra, extraction_settings

__all__ = ["run"]

log = logging.getLogger(__name__)


def run(subcube_path: str, settings: Settings, out_path: str) -> None:
    """Extract and write the aperture spectra of one sub-cube."""
    header = fits.getheader(subcube_path)
    record = provenance_record(settings, [subcube_path], "extract")
    if not header.get("GLCOVER", False):
        log.info("%s: no data (%s); writing an empty spectra file", subcube_path, header.get("GLREASON"))
        out = fits.PrimaryHDU()
        for key, val in header.items():
            if key.startswith("GL") and key != "GLPROV":
                out.header[key] = val
        add_to_header(out.header, record)
        write_fits(fits.HDUList([out]), out_path)
        return
    catalogue = settings.catalogue()
    line = catalogue.get_line(header["GLLINE"])
    v_out = outflow_speed(settings.coma, float(header["GLRH"]) * u.au)
    what = extraction_settings(line, catalogue, settings.apertures, settings.limits.window_factor * v_out,
                               settings.half_width)
    hdul = extract_spectra(subcube_path, what)
    add_to_header(hdul[0].header, record)
    write_fits(hdul, out_path)
