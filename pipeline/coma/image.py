"""Model images and cubes of a Haser coma as an instrument sees it.

Used to inject a model coma into real data (injection-recovery) and by the demo
generator. The column density is integrated over each pixel exactly near the
nucleus (closed form of ∫∫ dA/ρ) times the Haser factor at sub-pixel centres,
converted to flux with the LTE flux per molecule, convolved with the
elliptical Gaussian beam, and spread over channels with the isotropic-outflow
line profile and the spectrometer's channel response.
"""

from __future__ import annotations

import functools

import astropy.units as u
import numpy as np

from pipeline.spectra.apertures import aperture_spectra, aperture_weights
from pipeline.catalogue.entries import Line, Species
from pipeline.coma.departure import ColumnWeight
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.haser import daughter_column_density, parent_column_density
from pipeline.coma.line_profile import channel_fractions, thermal_dispersion
from pipeline.coma.response import SPECTRAL_RESPONSES, ComaModel, line_column_weight_of, outflow_speed, scale_lengths

__all__ = ["pixel_column_integral", "coma_molecules_image", "projected_coma_image", "beam_kernel",
           "apply_spectral_response", "model_line_map", "line_cube_from_map", "model_line_cube",
           "aperture_count_on_grid"]


def _convolved(image: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """``image`` convolved with ``kernel``, the result cut to the image's shape and centred as
    ``scipy.signal.fftconvolve(image, kernel, mode='same')`` does, by real FFTs of numpy (scipy.signal alone
    costs about half a second to import, in every job that draws a model coma)."""
    image = np.asarray(image, dtype=float)
    kernel = np.asarray(kernel, dtype=float)
    full = [a + b - 1 for a, b in zip(image.shape, kernel.shape)]
    size = [int(2 ** np.ceil(np.log2(n))) if n > 32 else n for n in full]
    product = np.fft.rfft2(image, size) * np.fft.rfft2(kernel, size)
    result = np.fft.irfft2(product, size)[: full[0], : full[1]]
    start = [(f - n) // 2 for f, n in zip(full, image.shape)]
    return result[start[0]: start[0] + image.shape[0], start[1]: start[1] + image.shape[1]]


def _g(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """∫_0^x ∫_0^y dx' dy' / sqrt(x'^2 + y'^2) for x, y >= 0 (closed form)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(x > 0, x * np.arcsinh(np.divide(y, x, out=np.zeros_like(y), where=x > 0)), 0.0)
        b = np.where(y > 0, y * np.arcsinh(np.divide(x, y, out=np.zeros_like(x), where=y > 0)), 0.0)
    return a + b


def _pieces(lo: np.ndarray, hi: np.ndarray):
    """Split [lo, hi] into signed pieces [0, p] so that ∫_lo^hi f(|x|) = Σ s ∫_0^p f."""
    straddle = (lo < 0) & (hi > 0)
    pos = lo >= 0
    p1 = np.where(straddle, -lo, np.where(pos, hi, -lo))
    s1 = np.ones_like(lo)
    p2 = np.where(straddle, hi, np.where(pos, lo, -hi))
    s2 = np.where(straddle, 1.0, -1.0)
    return (p1, s1), (p2, s2)


def pixel_column_integral(x_lo, x_hi, y_lo, y_hi) -> np.ndarray:
    """∫∫ dx dy / ρ over rectangles (any position relative to the origin), exact.

    Notes
    -----
    Antiderivative G(x, y) = x asinh(y/x) + y asinh(x/y) of 1/sqrt(x² + y²) in
    the first quadrant; other quadrants by symmetry.
    """
    total = 0.0
    for px, sx in _pieces(np.asarray(x_lo, float), np.asarray(x_hi, float)):
        for py, sy in _pieces(np.asarray(y_lo, float), np.asarray(y_hi, float)):
            total = total + sx * sy * _g(px, py)
    return total


def coma_molecules_image(shape: tuple[int, int], x0: float, y0: float, pixel_km: float, speed: u.Quantity,
                         length: u.Quantity, length_daughter: u.Quantity | None = None, sub: int = 3,
                         weight: ColumnWeight | None = None) -> np.ndarray:
    """Molecules per pixel (line-of-sight column integrated over the pixel) for Q = 1/s.

    Haser distribution centred on pixel (x0, y0), 0-based; ``pixel_km`` is the
    pixel side at the target. With ``length_daughter`` the molecules are a
    daughter produced by a parent of scale length ``length``. With ``weight`` (a line's non-LTE column
    factor f(rho), :func:`pipeline.coma.departure.line_column_weight`) each sub-pixel's molecules are multiplied
    by f at its centre's projected distance: the molecules an LTE flux per molecule turns into the non-LTE flux.

    The image is read-only and shared: one process asks for the same coma many times (every line of a cube,
    every injection level, the response at each placement), so the last images made are kept
    (:func:`_molecules_image`, keyed by the arguments' values in fixed units).
    """
    daughter = None if length_daughter is None else float(u.Quantity(length_daughter).to_value(u.km))
    return _molecules_image((int(shape[0]), int(shape[1])), float(x0), float(y0), float(pixel_km),
                            float(u.Quantity(speed).to_value(u.km / u.s)), float(u.Quantity(length).to_value(u.km)),
                            daughter, int(sub), weight)


@functools.lru_cache(maxsize=64)
def _molecules_image(shape: tuple[int, int], x0: float, y0: float, pixel_km: float, v: float, length_km: float,
                     daughter_km: float | None, sub: int, weight: ColumnWeight | None = None) -> np.ndarray:
    """:func:`coma_molecules_image` with plain values (speed km/s, lengths km), computed once per set of values."""
    ny, nx = shape
    if weight is None:       # LTE: the sub-pixels are not kept (as many per-cube jobs ask for one image only)
        molecules, _ = _sub_pixel_molecules.__wrapped__(shape, x0, y0, pixel_km, v, length_km, daughter_km, sub)
    else:
        molecules, rho = _sub_pixel_molecules(shape, x0, y0, pixel_km, v, length_km, daughter_km, sub)
        molecules = molecules * weight(rho)
    image = molecules.reshape(ny, sub, nx, sub).sum(axis=(1, 3))
    image.flags.writeable = False
    return image


@functools.lru_cache(maxsize=2)
def _sub_pixel_molecules(shape: tuple[int, int], x0: float, y0: float, pixel_km: float, v: float, length_km: float,
                         daughter_km: float | None, sub: int) -> tuple[np.ndarray, np.ndarray]:
    """Molecules per sub-pixel (Q = 1/s) and the sub-pixel centres' projected distances [km], read-only (kept: the
    non-LTE images of every line and temperature weight the same sub-pixels)."""
    ny, nx = shape
    speed = v * u.km / u.s
    xi = (np.arange(nx * sub) + 0.5) / sub - 0.5
    yi = (np.arange(ny * sub) + 0.5) / sub - 0.5
    xc, yc = np.meshgrid(xi, yi)
    half = 0.5 / sub
    area_over_rho = pixel_column_integral((xc - half - x0) * pixel_km, (xc + half - x0) * pixel_km,
                                          (yc - half - y0) * pixel_km, (yc + half - y0) * pixel_km)   # km
    rho = np.maximum(np.hypot(xc - x0, yc - y0) * pixel_km, 1e-6 * pixel_km)
    # Haser factor: the column relative to its L -> infinity form Q/(4 v rho)
    column = (parent_column_density(rho * u.km, 1 / u.s, speed, length_km * u.km) if daughter_km is None
              else daughter_column_density(rho * u.km, 1 / u.s, speed, length_km * u.km, daughter_km * u.km))
    factor = (column * 4 * speed * rho * u.km * u.s).decompose().value
    molecules = area_over_rho * factor / (4 * v)
    molecules.flags.writeable = False
    rho.flags.writeable = False
    return molecules, rho


def projected_coma_image(shape: tuple[int, int], x0: float, y0: float,
                         beam_pix: tuple[float, float, float] | None = None) -> np.ndarray:
    """A coma in projection, 1/ρ brightness integrated exactly over each pixel and convolved with the beam.

    The column density of a steady, isotropic outflow of long-lived molecules (Haser's inner limit) or dust
    falls as 1/ρ; this image (arbitrary scale, centred on pixel (x0, y0), 0-based) is what the extraction uses
    to make up for blank or flagged pixels inside an aperture (the share of the aperture's coma they held),
    whatever the species. Closed form of ∫∫ dA/ρ per pixel: :func:`pixel_column_integral`.
    """
    ny, nx = shape
    xc, yc = np.meshgrid(np.arange(nx, dtype=float), np.arange(ny, dtype=float))
    img = pixel_column_integral(xc - 0.5 - x0, xc + 0.5 - x0, yc - 0.5 - y0, yc + 0.5 - y0)
    if beam_pix is not None:
        img = _convolved(img, beam_kernel(*beam_pix))
    return np.clip(img, 0.0, None)


def beam_kernel(bmaj_pix: float, bmin_pix: float, bpa_deg: float) -> np.ndarray:
    """Elliptical Gaussian kernel (sum 1); BPA east of north, with x = -RA and y = Dec."""
    smaj, smin = bmaj_pix / np.sqrt(8 * np.log(2)), bmin_pix / np.sqrt(8 * np.log(2))
    half = int(np.ceil(4 * smaj))
    y, x = np.mgrid[-half:half + 1, -half:half + 1].astype(float)
    pa = np.deg2rad(bpa_deg)
    u_maj = -x * np.sin(pa) + y * np.cos(pa)
    u_min = x * np.cos(pa) + y * np.sin(pa)
    k = np.exp(-0.5 * ((u_maj / smaj) ** 2 + (u_min / smin) ** 2))
    return k / k.sum()


def apply_spectral_response(cube: np.ndarray, response: str = "hanning") -> np.ndarray:
    """Convolve along the first axis with the channel response (edges reflect)."""
    kernel = SPECTRAL_RESPONSES[response]
    if kernel.size == 1:
        return cube.copy()
    padded = np.concatenate([cube[:1], cube, cube[-1:]], axis=0)
    return kernel[0] * padded[:-2] + kernel[1] * padded[1:-1] + kernel[2] * padded[2:]


def model_line_map(shape: tuple[int, int], x0: float, y0: float, pixel_arcsec: float, line: Line, species: Species,
                   t_kin: u.Quantity, r_h: u.Quantity, delta: u.Quantity, beam_arcsec: tuple[float, float, float],
                   model: ComaModel, parent: Species | None = None) -> np.ndarray:
    """The velocity-integrated model line of a coma with Q = 1/s, beam-convolved, in Jy/beam km/s per pixel-to-beam
    area (the map :func:`model_line_cube` spreads over the channels), shape (n_y, n_x).

    The cube is linear in Q and separable (this map times the line profile), so a caller placing the same coma at
    several velocities computes the map once.
    """
    v = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v)
    pix_km = (pixel_arcsec * u.arcsec).to_value(u.rad) * u.Quantity(delta).to_value(u.km)
    weight = line_column_weight_of(line, species, parent, t_kin, r_h, model)      # None under LTE
    molecules = coma_molecules_image(shape, x0, y0, pix_km, v, length, daughter, weight=weight)
    flux_img = molecules * flux_per_molecule(line, species, t_kin, delta).to_value(u.Jy * u.km / u.s)
    bmaj, bmin, bpa = beam_arcsec
    sky = _convolved(flux_img, beam_kernel(bmaj / pixel_arcsec, bmin / pixel_arcsec, bpa))
    beam_over_pix = np.pi / (4 * np.log(2)) * bmaj * bmin / pixel_arcsec**2
    return sky * beam_over_pix


def line_profile_on_channels(velocity: np.ndarray, species: Species, t_kin: u.Quantity, r_h: u.Quantity,
                             model: ComaModel, v_centre: float = 0.0,
                             spectral_response: str | None = "hanning") -> np.ndarray:
    """The line's outflow and thermal profile on the channels [per km/s], centred at ``v_centre`` [km/s], with the
    channel response applied (None leaves it out): the spectral factor of a separable model cube."""
    v = outflow_speed(model, r_h)
    sigma_th = thermal_dispersion(t_kin, species.mass).to_value(u.km / u.s)
    vel = np.asarray(velocity, dtype=float)
    prof = channel_fractions(vel - v_centre, v.to_value(u.km / u.s), sigma_th) / np.abs(np.median(np.diff(vel)))
    if spectral_response:     # the response acts along the spectral axis only: on the profile of a separable cube
        prof = apply_spectral_response(prof, spectral_response)
    return prof


def line_cube_from_map(line_map: np.ndarray, velocity: np.ndarray, species: Species, t_kin: u.Quantity,
                       r_h: u.Quantity, model: ComaModel, v_centre: float = 0.0,
                       spectral_response: str | None = "hanning") -> np.ndarray:
    """``line_map`` (:func:`model_line_map` times Q) spread over the channels with the outflow and thermal profile
    centred at ``v_centre`` [km/s], and the channel response applied (None leaves it out)."""
    prof = line_profile_on_channels(velocity, species, t_kin, r_h, model, v_centre, spectral_response)
    return prof[:, None, None] * line_map[None, :, :]


def model_line_cube(shape: tuple[int, int], x0: float, y0: float, pixel_arcsec: float, velocity: np.ndarray,
                    line: Line, species: Species, q: float, t_kin: u.Quantity, r_h: u.Quantity,
                    delta: u.Quantity, beam_arcsec: tuple[float, float, float], model: ComaModel,
                    v_centre: float = 0.0, spectral_response: str | None = "hanning",
                    parent: Species | None = None) -> np.ndarray:
    """A model coma of production rate ``q`` [1/s] in one line, in Jy/beam, shape (n_chan, n_y, n_x).

    ``velocity`` [km/s] are the channels' velocities in the target's frame;
    the line is centred at ``v_centre``. ``spectral_response`` None leaves the
    channel response out (apply it once to signal and noise together instead).
    """
    line_map = model_line_map(shape, x0, y0, pixel_arcsec, line, species, t_kin, r_h, delta, beam_arcsec, model,
                              parent)
    return line_cube_from_map(q * line_map, velocity, species, t_kin, r_h, model, v_centre, spectral_response)


def aperture_count_on_grid(shape: tuple[int, int], x: float, y: float, radii_pix: list[float], pixel_km: float,
                           beam_pix: tuple[float, float, float] | None, speed: u.Quantity,
                           length: u.Quantity, length_daughter: u.Quantity | None = None,
                           weight: ColumnWeight | None = None) -> np.ndarray:
    """Molecules (for Q = 1/s) that each aperture counts on the actual pixel grid of the data.

    The model image of :func:`coma_molecules_image` is convolved with the
    elliptical beam (``beam_pix`` = FWHM major, minor in pixels and PA in deg)
    and summed with the same exact-overlap weights the extraction uses, so
    pixelisation, the beam's ellipticity and the field edge enter the response
    exactly as they enter the data. (The analytic circular-beam count of
    :func:`pipeline.coma.haser.convolved_aperture_count` is its external check.) ``weight`` as in
    :func:`coma_molecules_image` (a line's non-LTE column factor; None: the molecules themselves).
    """
    daughter = None if length_daughter is None else float(u.Quantity(length_daughter).to_value(u.km))
    beam = None if beam_pix is None else tuple(float(b) for b in beam_pix)
    counts = _aperture_counts((int(shape[0]), int(shape[1])), float(x), float(y), tuple(float(r) for r in radii_pix),
                              float(pixel_km), beam, float(u.Quantity(speed).to_value(u.km / u.s)),
                              float(u.Quantity(length).to_value(u.km)), daughter, weight)
    return counts.copy()


@functools.lru_cache(maxsize=256)
def _aperture_counts(shape: tuple[int, int], x: float, y: float, radii_pix: tuple[float, ...], pixel_km: float,
                     beam_pix: tuple[float, float, float] | None, v: float, length_km: float,
                     daughter_km: float | None, weight: ColumnWeight | None = None) -> np.ndarray:
    """:func:`aperture_count_on_grid` with plain values, computed once per set of values (the response of every
    line of a cube, and of each injection placement, counts the same coma)."""
    img = coma_molecules_image(shape, x, y, pixel_km, v * u.km / u.s, length_km * u.km,
                               None if daughter_km is None else daughter_km * u.km, weight=weight)
    if beam_pix is not None:
        img = _convolved(img, beam_kernel(*beam_pix))
    weights = [aperture_weights(shape, x, y, r) for r in radii_pix]
    sums, _ = aperture_spectra(img[None], weights)
    return sums[:, 0]
