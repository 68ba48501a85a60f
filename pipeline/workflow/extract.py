"""Stage 'extract': aperture spectra of one line's sub-cube, as FITS."""

from __future__ import annotations

import logging

from pipeline.io.atomic import write_fits
from pipeline.io.products import LineSpectra, SubCube
from pipeline.io.provenance import add_to_header, provenance_record
from pipeline.coma.response import outflow_speed
from pipeline.settings import Settings
from pipeline.spectra.line_spectra import extract_spectra, extraction_settings

__all__ = ["run"]

log = logging.getLogger(__name__)


def run(subcube_path: str, settings: Settings, out_path: str) -> None:
    """Extract and write the aperture spectra of one sub-cube."""
    sub = SubCube.from_fits(subcube_path)
    record = provenance_record(settings, [subcube_path], "extract")
    if not sub.meta.covered:
        log.info("%s: no data (%s); writing an empty spectra file", subcube_path, sub.meta.reason)
        spectra = LineSpectra(meta=sub.meta)
    else:
        catalogue = settings.catalogue()
        line = catalogue.get_line(sub.meta.line_id)
        v_out = outflow_speed(settings.coma, sub.meta.r_h)
        what = extraction_settings(line, catalogue, settings.apertures_of(), settings.limits.window_factor * v_out,
                                   settings.half_width, settings.quality.max_masked_share)
        spectra = extract_spectra(sub, what)
    hdul = spectra.to_fits()
    add_to_header(hdul[0].header, record)
    write_fits(hdul, out_path)
