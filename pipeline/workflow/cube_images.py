"""Stage 'cube_images': one cube's integrated-line (or band) and continuum images around the target, as a PNG.

Reads only the cube's header, its geometry row and a box of sky around the predicted position (a bounded number
of channels at a time); depends on nothing but the cube and its geometry, so it runs as soon as the geometry is
known and never waits for the campaign's limits.
"""

from __future__ import annotations

import logging

import astropy.units as u

from pipeline.coma.response import outflow_speed
from pipeline.io.atomic import atomic_path
from pipeline.io.cubes import read_cube_info
from pipeline.io.tables import read_table
from pipeline.report.cube_figures import plot_cube_images
from pipeline.report.figures import to_png
from pipeline.settings import Settings
from pipeline.spectra.apertures import aperture_label
from pipeline.spectra.band_windows import band_windows, doppler_factor, resolving_power_of
from pipeline.spectra.cube_images import image_frame, image_statistics, infrared_images, millimetre_images

__all__ = ["run"]

log = logging.getLogger(__name__)


def run(geometry_path: str, line_ids: list[str], band_ids: list[str], settings: Settings, out_png: str) -> None:
    """Draw the images of the settings' cube (lines ``line_ids`` or, for an infrared cube, bands ``band_ids``)."""
    cube = settings.cube
    info = read_cube_info(cube.path, cube.beam_arcsec)
    geo = read_table(geometry_path)[0]
    catalogue = settings.catalogue()
    radii = list(settings.apertures_of())
    delta = u.Quantity(geo["delta"])
    frame = image_frame(info, float(geo["x_pix"]), float(geo["y_pix"]), radii, [aperture_label(r) for r in radii],
                        delta)
    dq = settings.quality.dq_bad_bits
    if info.regime == "infrared":
        rpow, _ = resolving_power_of(info, cube.resolving_power)
        windows = band_windows(info.wavelengths, catalogue, band_ids, doppler_factor(info, geo), rpow,
                               settings.infrared.margin_fwhm)
        images = infrared_images(info, frame, catalogue, band_ids, windows, settings.infrared.continuum_factor,
                                 settings.infrared.continuum_shape, settings.infrared.continuum_order, dq)
    else:
        window = settings.limits.window_factor * outflow_speed(settings.coma, u.Quantity(geo["r_h"]))
        images = millimetre_images(info, geo, frame, catalogue, line_ids, window, dq)
    stats = [image_statistics(im.data, frame) if im.data is not None else None for im in images]
    for im, st in zip(images, stats):
        what = im.name if im.kind == "continuum" else f"{im.kind} {im.name}"
        if st is None:
            log.warning("cube %s: no image of the %s (%s)", geo["cube_id"], what, im.note)
        else:
            log.info("cube %s, %s: %d channels, rms %.3g %s, peak %.1f sigma at %.2f arcsec from the predicted "
                     "position", geo["cube_id"], what, im.n_channels, st["noise"], im.data.unit, st["snr"],
                     st["offset_arcsec"])
    beam = (f"beam {frame.beam.major.to_value(u.arcsec):.2f}″ × {frame.beam.minor.to_value(u.arcsec):.2f}″ "
            f"PA {frame.beam.pa.to_value(u.deg):.0f}° ("
            + ("median of the per-channel BEAMS table" if info.channel_beams is not None else info.beam_source)
            + ")" if frame.beam is not None else "no beam")
    title = (f"{geo['cube_id']}  ·  epoch {geo['epoch']}  ·  {geo['observer']}  ·  mid-time {geo['time_mid'].isot[:16]}"
             f"\nr$_h$ {u.Quantity(geo['r_h']).to_value(u.au):.3f} au, Δ {delta.to_value(u.au):.3f} au  ·  {beam}")
    png = to_png(plot_cube_images(title, frame, images, stats))
    with atomic_path(out_png) as tmp:
        tmp.write_bytes(png)
