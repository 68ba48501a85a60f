"""Per-line sub-cubes on a velocity axis in the target's rest frame.

For each catalogue line a cube covers, the channels within ``half_width`` of
the line's Doppler-predicted position are cut out (no resampling: the channels
stay the observed ones) and relabelled with the radio velocity relative to the
line's rest frequency in the target's frame (SPECSYS = SOURCE). The sky is
cropped to a box around the target's predicted position that holds the largest
aperture and its off-source companions.
"""

from __future__ import annotations

from dataclasses import replace

import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import Line
from pipeline.io.cubes import CubeInfo, flagged, open_data, open_quality
from pipeline.io.products import ProductMeta, SubCube
from pipeline.geometry.frames import linear_axis, radio_velocity, to_target_frame

__all__ = ["target_frame_frequencies", "target_frame_velocities", "cut_subcube", "crop_box"]


def target_frame_frequencies(info: CubeInfo, geometry) -> u.Quantity:
    """Frequency of every channel of ``info`` in the target's rest frame.

    ``geometry`` is the cube's one-row geometry table (or a row of it,
    :func:`pipeline.geometry.observing.cube_geometry`). A SPECSYS = SOURCE axis
    is already in that frame; any other is brought to the observer's frame with
    the table's ``frame_factor``, then the target's radial velocity seen by that
    observer is removed (relativistic Doppler).
    """
    if info.specsys == "SOURCE":
        return info.frequencies
    observed = (u.Quantity(info.frequencies, u.Hz) / float(geometry["frame_factor"])).to(u.Hz)
    return to_target_frame(observed, u.Quantity(geometry["delta_dot"]))


def target_frame_velocities(info: CubeInfo, geometry, line: Line) -> u.Quantity:
    """Radio velocity of every channel of ``info`` relative to ``line`` in the target's frame.

    ``geometry`` is the cube's one-row geometry table (or a row of it).
    """
    return radio_velocity(target_frame_frequencies(info, geometry), line.freq)


def crop_box(shape: tuple[int, int], x: float, y: float, half_size: float) -> tuple[slice, slice]:
    """Pixel slices (y, x) of a square box of ``half_size`` pixels around (x, y), clipped to the image."""
    ny, nx = shape
    h = int(np.ceil(half_size))
    xc, yc = int(round(x)), int(round(y))
    return slice(max(0, yc - h), min(ny, yc + h + 1)), slice(max(0, xc - h), min(nx, xc + h + 1))


def cut_subcube(info: CubeInfo, geometry, line: Line, half_width: u.Quantity,
                window: u.Quantity, crop_half_size: float,
                spectral_response: str = "hanning",
                dq_bad_bits: int = 0) -> SubCube:
    """Cut the sub-cube of ``line`` from the cube.

    Parameters
    ----------
    info : CubeInfo
    geometry : row of the cube's geometry table
    line : catalogue line
    half_width : Quantity [speed]
        Half-width of the velocity range kept (for the line-free noise channels).
    window : Quantity [speed]
        Half-width of the integration window that must be fully covered.
    crop_half_size : float
        Half-size of the sky box in pixels.
    spectral_response : str
        The spectrometer's channel response ('hanning' or 'none'), carried to the extraction and the response.
    dq_bad_bits : int
        Voxels whose DQ flags (extension DQ) hold any of these bits are blanked (NaN) in the sub-cube.

    Returns
    -------
    SubCube
        Not covered (with the reason) when the integration window is not fully inside the band.
    """
    cube_id, epoch = geometry["cube_id"], geometry["epoch"]
    vel = target_frame_velocities(info, geometry, line).to_value(u.km / u.s)
    hw, win = half_width.to_value(u.km / u.s), window.to_value(u.km / u.s)
    step = abs(vel[1] - vel[0])
    meta = ProductMeta(cube_id=str(cube_id), epoch=str(epoch), line_id=line.line_id, species=line.species,
                       spectral_response=spectral_response)
    lo, hi = vel.min(), vel.max()
    if not (lo - 0.5 * step <= -win and hi + 0.5 * step >= win):
        reason = (f"the integration window +-{win:.2f} km/s of line {line.line_id} is not fully inside "
                  f"the band (which spans {lo:+.1f} to {hi:+.1f} km/s around the line)")
        return SubCube(meta=replace(meta, covered=False, reason=reason))
    keep = np.flatnonzero(np.abs(vel) <= hw)
    c0, c1 = int(keep.min()), int(keep.max()) + 1
    ys, xs = crop_box(info.shape[1:], float(geometry["x_pix"]), float(geometry["y_pix"]), crop_half_size)
    with open_data(info.path) as data:
        sub = np.array(data[c0:c1, ys, xs], dtype=np.float32)
    n_flagged = 0
    if dq_bad_bits:
        with open_quality(info.path) as quality:
            if quality is not None:                    # flagged voxels become blank, as the extraction expects
                bad = flagged(quality[c0:c1, ys, xs], dq_bad_bits)
                n_flagged = int(bad.sum())
                sub[bad] = np.nan
    _, _, deviation = linear_axis(vel[c0:c1])
    meta = replace(meta, covered=True, linear=bool(deviation < 1e-3), first_channel=c0, n_flagged=n_flagged,
                   target_x=float(geometry["x_pix"]) - xs.start, target_y=float(geometry["y_pix"]) - ys.start,
                   delta_au=float(u.Quantity(geometry["delta"]).to_value(u.au)),
                   r_h_au=float(u.Quantity(geometry["r_h"]).to_value(u.au)),
                   delta_dot_km_s=float(u.Quantity(geometry["delta_dot"]).to_value(u.km / u.s)),
                   freq0_hz=float(info.frequencies[c0].to_value(u.Hz)),
                   dfreq_hz=float((info.frequencies[1] - info.frequencies[0]).to_value(u.Hz)))
    h = info.header
    beams = None
    if info.channel_beams is not None:                 # the channels' own beams; the median one for the model coma
        beams = tuple(b[c0:c1] for b in info.channel_beams)
        beam = tuple(float(np.median(b).to_value(u.deg)) for b in beams)
    elif "BMAJ" in h and "BMIN" in h:
        beam = (float(h["BMAJ"]), float(h["BMIN"]), float(h.get("BPA", 0.0)))
    elif info.beam_major is not None:                  # the config's beam_arcsec
        beam = (info.beam_major.to_value(u.deg), info.beam_minor.to_value(u.deg), info.beam_pa.to_value(u.deg))
    else:
        beam = None
    return SubCube.build(meta, sub, vel[c0:c1], info.celestial_wcs[ys, xs], info.header["BUNIT"], line.freq, beam,
                         name=f"{info.path} ({line.line_id})", beams=beams)
