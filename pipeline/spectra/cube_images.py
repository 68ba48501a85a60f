"""Images of a cube around the target: the integrated line (or infrared band), the continuum, and what to draw on them.

The first thing an observer checks: is there emission where the ephemeris puts
the target, inside the apertures, and how large is the beam. For every cube this
module makes, from a square box of sky around the target's predicted position
(only that box is read, a bounded number of channels at a time):

- millimetre cubes: for each configured species, the integral of the brightness
  over the union of its lines' integration windows (the same window as the
  extraction, +- window_factor x outflow speed about each line's rest frequency
  in the target's frame), in the cube's unit times km/s;
- infrared cubes: for each band, the integral over the band's integration window
  of the brightness minus a continuum fitted pixel by pixel over the band's
  continuum ranges (the same ranges and continuum shape as the band measurement),
  in W m^-2 sr^-1 (or per pixel / beam, as the cube's unit is);
- the continuum: the mean of the channels free of every catalogue line's window
  (millimetre) or of every band window (infrared), in the cube's unit.

The geometry drawn on them is computed here too: the predicted position in the
box, the apertures' radii in pixels, the beam's ellipse and the directions of
north and east in pixel coordinates, all from the cube's celestial WCS.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.wcs import WCS

from pipeline.catalogue import Band, Catalogue, Line
from pipeline.errors import CoverageError
from pipeline.geometry.comoving import crop_box, target_frame_frequencies
from pipeline.geometry.frames import radio_velocity
from pipeline.io.cubes import CubeInfo, flagged, open_data, open_quality
from pipeline.spectra.apertures import radius_in_pixels
from pipeline.spectra.band_measure import _bin_edges, _window_fraction
from pipeline.spectra.band_windows import band_setup
from pipeline.spectra.noise import line_free_mask, window_weights

__all__ = ["SkyImage", "ImageFrame", "BeamEllipse", "sky_directions", "beam_ellipse", "image_frame",
           "line_window_weights", "line_free_channels", "integrated_line_image", "band_image", "continuum_image",
           "image_statistics", "box_half_size", "MIN_VALID_SHARE", "millimetre_images", "infrared_images", "CHUNK_CHANNELS"]

#: Channels read at a time (memory: this many channels of the box).
CHUNK_CHANNELS = 128
#: A pixel whose valid channels carry less than this share of a window's weight is left blank in its image.
MIN_VALID_SHARE = 0.5


@dataclass(frozen=True)
class BeamEllipse:
    """A beam (or point-spread function) as an ellipse in pixel coordinates, as matplotlib's Ellipse takes it."""

    width_pix: float      # full width at half maximum along the major axis
    height_pix: float     # along the minor axis
    angle_deg: float      # major axis, counter-clockwise from the +x pixel axis
    major: u.Quantity     # the FWHM axes and position angle on the sky (east of north), as read
    minor: u.Quantity
    pa: u.Quantity


@dataclass(frozen=True)
class ImageFrame:
    """The box of sky shown, and the geometry drawn on it (pixel coordinates are 0-based, in the box)."""

    ys: slice
    xs: slice
    target: tuple[float, float]                 # predicted position (x, y) in the box
    pixel_scale: u.Quantity                     # angle per pixel
    radii_pix: tuple[float, ...]                # aperture radii
    aperture_labels: tuple[str, ...]
    beam: BeamEllipse | None
    north: tuple[float, float]                  # unit vector towards north, pixel coordinates
    east: tuple[float, float]                   # unit vector towards east

    @property
    def shape(self) -> tuple[int, int]:
        return (self.ys.stop - self.ys.start, self.xs.stop - self.xs.start)


@dataclass(frozen=True)
class SkyImage:
    """One image of the box: an integrated line or band, or the continuum (or why there is none)."""

    kind: str                       # 'line', 'band' or 'continuum'
    name: str                       # species, band id, or 'continuum'
    data: u.Quantity | None         # (n_y, n_x) on the frame's box; None when not made (see ``note``)
    n_channels: int                 # channels that went in
    detail: str                     # what was integrated or averaged, for the figure's panel title
    note: str = ""                  # why there is no image


def _jacobian(wcs: WCS, x: float, y: float) -> np.ndarray:
    """d(east offset, north offset)/d(x, y) at pixel (x, y), in arcsec per pixel (2 x 2)."""
    centre = wcs.pixel_to_world(x, y)
    cols = []
    for dx, dy in ((1.0, 0.0), (0.0, 1.0)):
        lo = wcs.pixel_to_world(x - 0.5 * dx, y - 0.5 * dy)
        hi = wcs.pixel_to_world(x + 0.5 * dx, y + 0.5 * dy)
        e_lo, n_lo = centre.spherical_offsets_to(lo)
        e_hi, n_hi = centre.spherical_offsets_to(hi)
        cols.append([(e_hi - e_lo).to_value(u.arcsec), (n_hi - n_lo).to_value(u.arcsec)])
    return np.array(cols).T


def sky_directions(wcs: WCS, x: float, y: float) -> tuple[tuple[float, float], tuple[float, float]]:
    """Unit vectors (dx, dy) in pixel coordinates pointing north and east at pixel (x, y) of a celestial WCS."""
    inv = np.linalg.inv(_jacobian(wcs, x, y))
    north = inv @ np.array([0.0, 1.0])
    east = inv @ np.array([1.0, 0.0])
    return (tuple(float(v) for v in north / np.hypot(*north)),
            tuple(float(v) for v in east / np.hypot(*east)))


def beam_ellipse(major: u.Quantity, minor: u.Quantity, pa: u.Quantity, wcs: WCS, x: float, y: float) -> BeamEllipse:
    """The beam of FWHM axes ``major``, ``minor`` and position angle ``pa`` (east of north) in pixel coordinates.

    The sky direction of the major axis, (east, north) = (sin PA, cos PA), and of the minor axis are mapped to
    pixels through the WCS's local Jacobian at (x, y); the axes' lengths are the FWHM divided by the pixel size
    along those directions.
    """
    inv = np.linalg.inv(_jacobian(wcs, x, y))                  # pixels per arcsec
    theta = u.Quantity(pa).to_value(u.rad)
    d_major = inv @ np.array([np.sin(theta), np.cos(theta)])
    d_minor = inv @ np.array([np.cos(theta), -np.sin(theta)])
    width = float(np.hypot(*d_major) * u.Quantity(major).to_value(u.arcsec))
    height = float(np.hypot(*d_minor) * u.Quantity(minor).to_value(u.arcsec))
    angle = float(np.degrees(np.arctan2(d_major[1], d_major[0])))
    return BeamEllipse(width_pix=width, height_pix=height, angle_deg=angle, major=u.Quantity(major).to(u.arcsec),
                       minor=u.Quantity(minor).to(u.arcsec), pa=u.Quantity(pa).to(u.deg))


def box_half_size(radii_pix: list[float], beam_pix: float) -> float:
    """Half-size [pixels] of the box shown: three times the largest aperture, at least six beams beyond it."""
    r = max(radii_pix)
    return max(3.0 * r, r + 6.0 * beam_pix, 12.0)


def image_frame(info: CubeInfo, x: float, y: float, radii: list[u.Quantity], labels: list[str],
                delta: u.Quantity, beam: tuple[u.Quantity, u.Quantity, u.Quantity] | None = None) -> ImageFrame:
    """The box around the predicted position (x, y) (0-based pixels of the cube) and its drawn geometry.

    ``radii`` are the apertures (lengths at the target, at distance ``delta``, or sky angles); ``beam`` (major,
    minor FWHM, PA) defaults to the cube's (median) beam.
    """
    radii_pix = [radius_in_pixels(r, delta, info.pixel_scale) for r in radii]
    if beam is None and info.beam_major is not None:
        beam = (info.beam_major, info.beam_minor, info.beam_pa)
    beam_pix = float((np.sqrt(beam[0] * beam[1]) / info.pixel_scale).decompose()) if beam is not None else 1.0
    ny, nx = info.shape[1:]
    if not (-0.5 <= x <= nx - 0.5 and -0.5 <= y <= ny - 0.5):
        msg = (f"{info.path}: the target's predicted position ({x:.1f}, {y:.1f}) lies outside the {nx} x {ny} pixel "
               "field; expected the target inside the cube (check the cube's WCS and the target's ephemeris)")
        raise CoverageError(msg)
    ys, xs = crop_box((ny, nx), x, y, box_half_size(radii_pix, beam_pix))
    north, east = sky_directions(info.celestial_wcs, x, y)
    ellipse = beam_ellipse(*beam, info.celestial_wcs, x, y) if beam is not None else None
    return ImageFrame(ys=ys, xs=xs, target=(x - xs.start, y - ys.start), pixel_scale=info.pixel_scale.to(u.arcsec),
                      radii_pix=tuple(radii_pix), aperture_labels=tuple(labels), beam=ellipse, north=north,
                      east=east)


def line_window_weights(info: CubeInfo, geometry, lines: list[Line],
                        window: u.Quantity) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Each channel's weight in the union of the lines' integration windows, and its width in km/s.

    The window of a line is +- ``window`` about its rest frequency in the target's frame (``geometry``, the
    cube's geometry row, gives the Doppler shift); a channel's weight is the fraction of it inside the window
    (:func:`pipeline.spectra.noise.window_weights`), the largest over the lines where windows overlap (a channel
    counted once). A line whose window is not wholly inside the band is left out.

    Returns
    -------
    weights : ndarray (n_chan,)
    dv : ndarray (n_chan,) [km/s]
        Channel width on the velocity axis of the line that weights the channel (0 where none does).
    left_out : list of str
        Ids of the lines whose window the band does not cover.
    """
    freqs = target_frame_frequencies(info, geometry)
    win = u.Quantity(window).to_value(u.km / u.s)
    weights = np.zeros(info.shape[0])
    dv = np.zeros(info.shape[0])
    left_out = []
    for line in lines:
        vel = radio_velocity(freqs, line.freq).to_value(u.km / u.s)
        step = float(np.abs(np.median(np.diff(vel))))
        w = window_weights(vel, win)
        if w.sum() * step < 2 * win * (1 - 1e-6):        # the weights add up to the part of the window covered
            left_out.append(line.line_id)
            continue
        take = w > weights
        weights[take] = w[take]
        dv[take] = step
    return weights, dv, left_out


def line_free_channels(info: CubeInfo, geometry, catalogue: Catalogue, exclude: u.Quantity) -> np.ndarray:
    """Channels farther than ``exclude`` (a speed) from every catalogue line, in the target's frame
    (:func:`pipeline.spectra.noise.line_free_mask` on each line's velocity axis)."""
    freqs = target_frame_frequencies(info, geometry)
    half = u.Quantity(exclude).to_value(u.km / u.s)
    free = np.ones(info.shape[0], dtype=bool)
    lo, hi = freqs.min(), freqs.max()
    for line in catalogue.lines:
        v_edge = radio_velocity(u.Quantity([lo, hi]), line.freq).to_value(u.km / u.s)
        if v_edge.min() - half > 0 or v_edge.max() + half < 0:
            continue                                       # far outside the band
        free &= line_free_mask(radio_velocity(freqs, line.freq).to_value(u.km / u.s), np.zeros(1), half)
    return free


def _read(info: CubeInfo, frame: ImageFrame, c0: int, c1: int, dq_bad_bits: int) -> np.ndarray:
    """Channels c0:c1 of the box as float64, flagged voxels blank."""
    with open_data(info.path) as data:
        block = np.array(data[c0:c1, frame.ys, frame.xs], dtype=np.float64)
    if dq_bad_bits:
        with open_quality(info.path) as quality:
            if quality is not None:
                block[flagged(quality[c0:c1, frame.ys, frame.xs], dq_bad_bits)] = np.nan
    return block


def _runs(indices: np.ndarray, chunk: int) -> list[tuple[int, int]]:
    """Contiguous channel ranges [c0, c1) covering ``indices`` (sorted), each at most ``chunk`` long."""
    out = []
    if indices.size == 0:
        return out
    start = prev = int(indices[0])
    for i in indices[1:]:
        i = int(i)
        if i != prev + 1 or i - start >= chunk:
            out.append((start, prev + 1))
            start = i
        prev = i
    out.append((start, prev + 1))
    return out


def integrated_line_image(info: CubeInfo, frame: ImageFrame, weights: np.ndarray, dv: np.ndarray,
                          dq_bad_bits: int = 0, chunk: int = CHUNK_CHANNELS) -> u.Quantity:
    """sum_c w_c |dv_c| I_c over the channels of non-zero weight: the integrated line in BUNIT km/s.

    Blank voxels (NaN, or flagged with ``dq_bad_bits``) are made up for by the pixel's mean over its valid window
    channels (:func:`_filled_sum`); a pixel with less than :data:`MIN_VALID_SHARE` of the window valid is blank.
    """
    use = np.flatnonzero(weights > 0)
    if use.size == 0:
        msg = f"{info.path}: no channel inside the integration window; expected a window the band covers"
        raise CoverageError(msg)
    total, valid = _weighted_sums(info, frame, use, weights * dv, dq_bad_bits, chunk)
    return _filled_sum(total, valid, float(np.sum(weights * dv))) * info.bunit * u.km / u.s


def _weighted_sums(info: CubeInfo, frame: ImageFrame, use: np.ndarray, kernel: np.ndarray, dq_bad_bits: int,
                   chunk: int) -> tuple[np.ndarray, np.ndarray]:
    """Per pixel, sum_c k_c I_c over the valid voxels of the channels ``use`` and sum_c k_c over those voxels, read
    ``chunk`` channels at a time (blank: NaN or flagged with ``dq_bad_bits``)."""
    total = np.zeros(frame.shape)
    valid = np.zeros(frame.shape)
    for c0, c1 in _runs(use, chunk):
        block = _read(info, frame, c0, c1, dq_bad_bits)
        k = kernel[c0:c1]
        ok = np.isfinite(block)
        total += np.tensordot(k, np.where(ok, block, 0.0), axes=(0, 0))
        valid += np.tensordot(k, ok.astype(float), axes=(0, 0))
    return total, valid


def _filled_sum(total: np.ndarray, valid: np.ndarray, full: float) -> np.ndarray:
    """A weighted sum over the valid channels scaled to the whole kernel: total * full / valid (blank below
    :data:`MIN_VALID_SHARE` of the kernel)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        out = total * full / valid
    out[~(valid >= MIN_VALID_SHARE * full)] = np.nan
    return out


def continuum_image(info: CubeInfo, frame: ImageFrame, free: np.ndarray, dq_bad_bits: int = 0,
                    chunk: int = CHUNK_CHANNELS) -> u.Quantity:
    """Mean over the ``free`` channels of each pixel (blank voxels left out), in BUNIT."""
    use = np.flatnonzero(free)
    if use.size == 0:
        msg = f"{info.path}: no line-free channel for a continuum image; expected channels outside every window"
        raise CoverageError(msg)
    total, count = _weighted_sums(info, frame, use, np.ones(free.shape), dq_bad_bits, chunk)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    return mean * info.bunit


def _band_unit(bunit: u.UnitBase) -> tuple[u.UnitBase, str]:
    """The spectral step (Hz or um) that turns ``bunit`` into an energy flux (per sr, pixel or beam)."""
    for step, kind in ((u.um, "wavelength"), (u.Hz, "frequency")):
        for per in (u.sr, u.pix, u.beam):
            if (bunit * step).is_equivalent(u.W / u.m**2 / per):
                return step, kind
    msg = f"BUNIT {bunit} is neither a brightness per unit wavelength nor per unit frequency"
    raise CoverageError(msg)


def band_image(info: CubeInfo, frame: ImageFrame, band: Band, windows: dict, continuum_factor: float,
               continuum_shape: str, order: int, dq_bad_bits: int = 0) -> tuple[u.Quantity, int, int]:
    """The band's integrated emission over its window above a per-pixel continuum, an energy flux per sr (or pix).

    ``windows`` are the observed-frame band windows (:func:`pipeline.spectra.band_windows.band_windows`). In each
    pixel the continuum, a polynomial of ``order`` in wavelength (times the solar spectrum when
    ``continuum_shape`` is 'solar'), is fitted by least squares to the band's continuum channels
    (:func:`pipeline.spectra.band_windows.band_setup`); the image is sum_c f_c (I_c - C_c) |d_c| over the channels
    of the window, f_c the fraction of channel c inside it and d_c its width in wavelength or frequency (as the
    cube's unit is per um or per Hz). Blank voxels are left out of the fit and made up for in the sum as in
    :func:`integrated_line_image`.

    Returns the image, the number of window channels and of continuum channels.
    """
    obs = info.wavelengths
    lam = obs.to_value(u.um)
    wlo, whi = (float(u.Quantity(v).to_value(u.um)) for v in windows[band.band_id][2:])
    if wlo < lam.min() or whi > lam.max():
        msg = (f"{info.path}: the window {wlo:.4f}-{whi:.4f} um of band {band.band_id} is not inside the cube's "
               f"{lam.min():.4f}-{lam.max():.4f} um")
        raise CoverageError(msg)
    lower, upper = _bin_edges(lam)                                     # the band measurement's channel bins
    frac = _window_fraction(lower, upper, wlo, whi)
    free, shape = band_setup(band.band_id, windows, obs, continuum_factor, continuum_shape)
    inside = frac > 0
    if free.sum() <= order + 1:
        msg = (f"{info.path}: band {band.band_id} has {int(free.sum())} continuum channels; expected more than "
               f"{order + 1} for a continuum of order {order}")
        raise CoverageError(msg)
    used = np.flatnonzero(inside | free)
    c0, c1 = int(used.min()), int(used.max()) + 1
    block = _read(info, frame, c0, c1, dq_bad_bits)                      # one band: a bounded span of channels
    x = lam[c0:c1] - 0.5 * (wlo + whi)
    design = np.vander(x, order + 1, increasing=True)
    if shape is not None:
        design = design * shape[c0:c1, None]
    fit = free[c0:c1]
    pixels = block.reshape(c1 - c0, -1)                                # (n_chan, n_pix)
    ok = np.isfinite(pixels)
    # per-pixel weighted least squares over its valid continuum channels (normal equations, batched)
    wfit = (ok & fit[:, None]).astype(float)
    normal = np.einsum("cp,ci,cj->pij", wfit, design, design)
    rhs = np.einsum("cp,ci,cp->pi", wfit, design, np.where(ok, pixels, 0.0))
    solvable = np.linalg.matrix_rank(normal) == design.shape[1]
    coef = np.zeros(rhs.shape)
    coef[solvable] = np.linalg.solve(normal[solvable], rhs[solvable][..., None])[..., 0]
    residual = pixels - design @ coef.T
    step_unit, kind = _band_unit(info.bunit)
    if kind == "wavelength":
        width = (upper - lower)[c0:c1]
    else:
        f_lo, f_hi = _bin_edges(info.frequencies.to_value(u.Hz))
        width = (f_hi - f_lo)[c0:c1]
    kernel = frac[c0:c1] * width
    total = np.tensordot(kernel, np.where(ok, residual, 0.0), axes=(0, 0))
    valid = np.tensordot(kernel, ok.astype(float), axes=(0, 0))
    image = _filled_sum(total, valid, float(kernel.sum()))
    image[~solvable] = np.nan
    out = (image.reshape(frame.shape) * info.bunit * step_unit)
    for per in (u.sr, u.pix, u.beam):
        if out.unit.is_equivalent(u.W / u.m**2 / per):
            out = out.to(u.W / u.m**2 / per)
            break
    return out, int(inside.sum()), int(free.sum())


def image_statistics(image: u.Quantity, frame: ImageFrame) -> dict[str, float]:
    """Noise, peak and where the peak lies, for a panel's title and the sidecar table.

    The noise is the robust rms (1.4826 x median absolute deviation about the median) of the pixels outside the
    largest aperture plus one beam; the peak is the largest value inside the largest aperture, its offset from
    the predicted position in arcsec.
    """
    values = np.asarray(image.value, dtype=float)
    ny, nx = values.shape
    yy, xx = np.mgrid[0:ny, 0:nx]
    r = np.hypot(xx - frame.target[0], yy - frame.target[1])
    r_max = max(frame.radii_pix)
    beam = np.sqrt(frame.beam.width_pix * frame.beam.height_pix) if frame.beam is not None else 1.0
    outside = (r > r_max + beam) & np.isfinite(values)
    sample = values[outside] if outside.sum() >= 20 else values[np.isfinite(values)]
    noise = float(1.4826 * np.median(np.abs(sample - np.median(sample)))) if sample.size else float("nan")
    inner = (r <= r_max) & np.isfinite(values)
    if not inner.any():
        return {"noise": noise, "peak": float("nan"), "snr": float("nan"), "offset_arcsec": float("nan")}
    k = int(np.argmax(np.where(inner, values, -np.inf)))
    py, px = divmod(k, nx)
    peak = float(values[py, px])
    offset = float(np.hypot(px - frame.target[0], py - frame.target[1]) * frame.pixel_scale.to_value(u.arcsec))
    return {"noise": noise, "peak": peak, "snr": peak / noise if noise > 0 else float("nan"),
            "offset_arcsec": offset}


def millimetre_images(info: CubeInfo, geometry, frame: ImageFrame, catalogue: Catalogue, line_ids: list[str],
                      window: u.Quantity, dq_bad_bits: int = 0) -> list[SkyImage]:
    """One integrated-line image per species of ``line_ids`` (the union of its lines' windows), then the continuum.

    The continuum is the mean of the channels farther than the window plus three channels from every catalogue
    line; it is left out (with a note) when no such channel remains.
    """
    images = []
    species = list(dict.fromkeys(catalogue.get_line(i).species for i in line_ids))
    win = u.Quantity(window).to(u.km / u.s)
    for name in species:
        lines = [catalogue.get_line(i) for i in line_ids if catalogue.get_line(i).species == name]
        weights, dv, left_out = line_window_weights(info, geometry, lines, win)
        n_used = len(lines) - len(left_out)
        what = f"{n_used} line{'s' if n_used != 1 else ''}, ±{win.to_value(u.km / u.s):.2f} km/s"
        if n_used == 0:
            images.append(SkyImage("line", name, None, 0, what, note=f"window not covered ({', '.join(left_out)})"))
            continue
        image = integrated_line_image(info, frame, weights, dv, dq_bad_bits)
        images.append(SkyImage("line", name, image, int(np.sum(weights > 0)), what))
    step = float(np.abs(np.median(np.diff(radio_velocity(info.frequencies, info.frequencies[0])
                                          .to_value(u.km / u.s)))))
    free = line_free_channels(info, geometry, catalogue, win + 3 * step * u.km / u.s)
    if free.any():
        images.append(SkyImage("continuum", "continuum", continuum_image(info, frame, free, dq_bad_bits),
                               int(free.sum()), f"mean of {int(free.sum())} line-free channels"))
    else:
        images.append(SkyImage("continuum", "continuum", None, 0, "", note="no channel free of catalogue lines"))
    return images


def infrared_images(info: CubeInfo, frame: ImageFrame, catalogue: Catalogue, band_ids: list[str], windows: dict,
                    continuum_factor: float, continuum_shape: str, order: int,
                    dq_bad_bits: int = 0) -> list[SkyImage]:
    """One continuum-subtracted image per band of ``band_ids``, then the continuum (channels outside every window).

    ``windows`` are the observed-frame windows of every catalogue band in the cube's range
    (:func:`pipeline.spectra.band_windows.band_windows`).
    """
    images = []
    for band_id in band_ids:
        band = catalogue.get_band(band_id)
        lo, hi = (float(u.Quantity(v).to_value(u.um)) for v in windows[band_id][2:])
        try:
            image, n_win, n_cont = band_image(info, frame, band, windows, continuum_factor, continuum_shape, order,
                                              dq_bad_bits)
        except CoverageError as exc:
            images.append(SkyImage("band", band_id, None, 0, f"{lo:.3f}–{hi:.3f} µm", note=str(exc)))
            continue
        images.append(SkyImage("band", band_id, image, n_win,
                               f"{band.species}, {lo:.3f}–{hi:.3f} µm, continuum from {n_cont} channels"))
    obs = info.wavelengths
    free = np.ones(obs.shape, dtype=bool)
    for w in windows.values():
        free &= ~((obs >= w[2]) & (obs <= w[3]))
    if free.any():
        images.append(SkyImage("continuum", "continuum", continuum_image(info, frame, free, dq_bad_bits),
                               int(free.sum()), f"mean of {int(free.sum())} channels outside the band windows"))
    else:
        images.append(SkyImage("continuum", "continuum", None, 0, "", note="every channel lies in a band window"))
    return images
