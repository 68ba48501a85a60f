"""Aperture spectra of a line's sub-cube, in Jy, with their measured noise.

For each aperture radius: the flux density per channel inside a circle on the
target's predicted position (exact overlap weights), a low-order baseline
removed over line-free channels, the channel noise, the empirical noise of the
integration-window sum, and the channel noise seen in off-source apertures of
the same size.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.table import Table

from pipeline.coma.image import projected_coma_image
from pipeline.spectra.apertures import (aperture_label, aperture_spectra, aperture_weights, corrected_aperture_spectra,
                                        flux_conversion, offsource_positions,
                        radius_in_pixels)
from pipeline.io.cubes import CubeInfo
from pipeline.io.products import LineSpectra, SubCube
from pipeline.errors import CoverageError
from pipeline.spectra.noise import (baseline_polynomial, channel_sigma, fit_baseline, line_free_mask, window_sum_noise,
                                   window_weights)

__all__ = ["ExtractionSettings", "extraction_settings", "other_line_velocities", "extract_spectra", "separable_spectra"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class ExtractionSettings:
    """What to extract from a sub-cube."""

    radii: list[u.Quantity]          # aperture radii, lengths at the target or sky angles
    window: u.Quantity               # half-width of the integration window (speed)
    other_lines: u.Quantity          # velocities of other catalogue lines on this axis (speed)
    baseline_order: int = 1
    exclude_margin_channels: int = 3
    max_masked_share: float | None = None   # make up for blank pixels up to this share of the coma (None: NaN)


def _noise_offsource(data, info: CubeInfo, x, y, r_pix, beam_pix, free, factor,
                     footprint: np.ndarray | None) -> tuple[float, int]:
    dist = max(2.5 * r_pix, r_pix + 2.0 * beam_pix)
    positions = offsource_positions(info.shape[1:], x, y, r_pix, dist, footprint)
    if len(positions) < 3:
        return float("nan"), len(positions)
    aps = [aperture_weights(info.shape[1:], px, py, r_pix) for px, py in positions]
    sums, _ = aperture_spectra(data, aps)
    sums = sums * factor
    per_chan = np.nanstd(sums[:, free], axis=0, ddof=1)
    return float(np.nanmedian(per_chan)), len(positions)


def other_line_velocities(catalogue, line, half_width: u.Quantity) -> u.Quantity:
    """Radio velocities, on ``line``'s axis, of every other catalogue line within ``half_width``."""
    c = const.c.to_value(u.km / u.s)
    f0 = line.freq.to_value(u.GHz)
    vel = [c * (1 - other.freq.to_value(u.GHz) / f0) for other in catalogue.lines if other.line_id != line.line_id]
    vel = np.array([v for v in vel if abs(v) <= half_width.to_value(u.km / u.s)])
    return vel * u.km / u.s


def extraction_settings(line, catalogue, radii: list[u.Quantity], window: u.Quantity,
                        half_width: u.Quantity, max_masked_share: float | None = None) -> ExtractionSettings:
    """What to extract for ``line``: the apertures, the integration window and the other lines' positions.

    Parameters
    ----------
    line : Line
        The catalogue line of the sub-cube.
    catalogue : Catalogue
        Its other lines within ``half_width`` (plus 5 km/s) are kept out of the noise and baseline channels.
    radii : list of Quantity [length or angle]
        Aperture radii at the target or on the sky.
    window : Quantity [speed]
        Half-width of the integration window (the window factor times the outflow speed).
    half_width : Quantity [speed]
        Half-width of the sub-cube's velocity axis.
    max_masked_share : float, optional
        Blank or flagged pixels inside an aperture are made up for with a projected coma's share of them up to
        this share (:func:`pipeline.spectra.apertures.corrected_aperture_spectra`); None leaves such channels
        blank.
    """
    return ExtractionSettings(radii=list(radii), window=window,
                              other_lines=other_line_velocities(catalogue, line, half_width + 5 * u.km / u.s),
                              max_masked_share=max_masked_share)


def extract_spectra(sub: SubCube, settings: ExtractionSettings, data: np.ndarray | None = None,
                    centre: tuple[float, float] | None = None, v_centre: float = 0.0,
                    offsource: bool = True) -> LineSpectra:
    """Aperture spectra and noise of one (covered) sub-cube.

    By default the apertures sit on the target (the sub-cube's target pixel) and
    the window on the line (0 km/s). Injection-recovery passes the sub-cube's
    data with a model added (``data``), another sky position (``centre``, 0-based
    pixels) and a window centre ``v_centre`` [km/s]; the real line's channels
    then stay out of the noise estimate too.

    Parameters
    ----------
    sub : SubCube
        Its data, exact velocities, celestial WCS, BUNIT and beam; nothing is read from a file here.
    settings : ExtractionSettings
        Apertures, window and the other lines' positions.

    Returns
    -------
    LineSpectra
        Flux density [Jy] per aperture and channel with a baseline removed, blank-pixel counts, the noise
        figures of each aperture (channel sigma, empirical window-sum sigma and its naive sqrt(N) form,
        off-source sigma) and the channels' line-free flags and window weights.

    Raises
    ------
    CoverageError
        When an aperture does not fit in the sub-cube, or too few line-free
        channels remain for the noise.
    """
    with sub.in_use():
        return _extract(sub, settings, data, centre, v_centre, offsource)


def _flux_factor(info: CubeInfo) -> np.ndarray:
    """Jy per pixel-sum of the cube's unit, per channel (with a per-channel beam table)."""
    return flux_conversion(info.bunit, info.pixel_solid_angle(),
                           info.channel_beam_solid_angles() if info.beam_major is not None else None,
                           info.frequencies)


def _apertures(sub: SubCube, settings: ExtractionSettings, x: float, y: float) -> tuple[list[float], list]:
    """The apertures' radii in pixels and their exact-overlap weights at (x, y)."""
    info = sub.info()
    radii_pix = [radius_in_pixels(r, sub.meta.delta, info.pixel_scale) for r in settings.radii]
    aps = [aperture_weights(info.shape[1:], x, y, rp, what=f"{sub.name}: aperture {r}")
           for r, rp in zip(settings.radii, radii_pix)]
    return radii_pix, aps


def separable_spectra(sub: SubCube, settings: ExtractionSettings, images: np.ndarray, profiles: np.ndarray,
                      centre: tuple[float, float], line_free: np.ndarray) -> np.ndarray:
    """The baseline-subtracted aperture spectra [Jy] that :func:`extract_spectra` gives for separable cubes
    ``profiles[k][:, None, None] * images[k][None]`` (the cube's unit), without building them.

    For such a cube each aperture's sum is the image's aperture sum times the profile, and the extraction is
    linear from there (flux conversion, the baseline fitted on the ``line_free`` channels, which are those of the
    cube the model is added to): so the measurement of a model coma added to data with no blank pixel in the
    apertures is the data's plus this (what injection-recovery uses; :func:`extract_spectra` is the reference).

    Returns
    -------
    ndarray (n_profiles, n_apertures, n_channels)
    """
    vel = np.asarray(sub.velocity, dtype=float)
    _, aps = _apertures(sub, settings, *centre)
    images = np.asarray(images, dtype=np.float64).reshape(-1, *sub.info().shape[1:])
    sums, _ = aperture_spectra(images, aps)                                                 # (n_ap, n_prof)
    factor = _flux_factor(sub.info())
    profiles = np.atleast_2d(np.asarray(profiles, dtype=np.float64))
    flux = sums.T[:, :, None] * (profiles * factor[None, :])[:, None, :]                    # (n_prof, n_ap, n_chan)
    for k in range(flux.shape[0]):
        for i in range(flux.shape[1]):
            flux[k, i] = flux[k, i] - baseline_polynomial(vel, flux[k, i], line_free & np.isfinite(flux[k, i]),
                                                          settings.baseline_order)
    return flux


def _extract(sub: SubCube, settings: ExtractionSettings, data: np.ndarray | None,
             centre: tuple[float, float] | None, v_centre: float, offsource: bool) -> LineSpectra:
    info = sub.info()
    meta = sub.meta
    vel = np.asarray(sub.velocity, dtype=float)
    dv = float(np.abs(np.median(np.diff(vel))))
    x, y = (meta.target_x, meta.target_y) if centre is None else centre
    delta = meta.delta
    win = settings.window.to_value(u.km / u.s)
    wweights = window_weights(vel, win, centre=v_centre)
    exclude = win + settings.exclude_margin_channels * dv
    others = settings.other_lines.to_value(u.km / u.s)
    factor = _flux_factor(info)
    radii_pix, aps = _apertures(sub, settings, x, y)
    beam_pix = (np.sqrt(info.beam_major * info.beam_minor) / info.pixel_scale).decompose().value \
        if info.beam_major is not None else 1.0
    rows = []
    if data is None:
        data = sub.data
    if settings.max_masked_share is not None:    # blank pixels made up for with a projected coma's share of them
        model = projected_coma_image(info.shape[1:], x, y, (beam_pix, beam_pix, 0.0))
        sums, n_blank, share = corrected_aperture_spectra(data, aps, model, settings.max_masked_share)
    else:
        sums, n_blank = aperture_spectra(data, aps)
        share = np.zeros_like(sums)
    flux = sums * factor
    valid_all = np.all(np.isfinite(sums), axis=0)
    free = line_free_mask(vel, np.concatenate([[0.0, v_centre], others]), exclude, valid=valid_all)
    if free.sum() < 10:
        msg = (f"{sub.name}: only {int(free.sum())} line-free channels remain outside +-{exclude:.2f} "
               "km/s of the catalogue lines; expected at least 10 (widen comoving.half_width_km_s)")
        raise CoverageError(msg)
    finite = np.isfinite(data).all(axis=0) if offsource else None       # off-source apertures only on data
    footprint = None if finite is None or finite.all() else finite
    for i, (r, rp) in enumerate(zip(settings.radii, radii_pix)):
        base = fit_baseline(vel, flux[i], free, settings.baseline_order)
        flux[i] = flux[i] - base
        sig = channel_sigma(flux[i], free)
        wn = window_sum_noise(flux[i], free, wweights)
        s_off, n_off = (_noise_offsource(data, info, x, y, rp, beam_pix, free, factor, footprint) if offsource
                        else (float("nan"), 0))
        rk = u.Quantity(r)
        rows.append({
            "aperture": aperture_label(rk),
            "radius_km": (rk if rk.unit.physical_type == "length"
                          else (rk.to_value(u.rad) * delta)).to_value(u.km),
            "radius_arcsec": (rp * info.pixel_scale).to_value(u.arcsec),
            "radius_pix": rp, "area_pix": aps[i].area,
            "sigma_chan": sig, "sigma_window": wn.sigma * dv, "sigma_window_naive": wn.sigma_naive * dv,
            "n_windows": wn.n_windows, "n_independent": wn.n_independent,
            "sigma_chan_offsource": s_off, "n_offsource": n_off,
            "n_blank_chan": int(np.sum(n_blank[i] > 0)),
            "max_masked_share": float(np.max(share[i])) if share.shape[1] else 0.0,
        })
        log.info("aperture %.0f km: sigma_chan %.3g Jy, window sigma %.3g Jy km/s (naive %.3g), "
                 "%d independent windows, off-source sigma %.3g Jy (%d apertures), %d blank channels",
                 rows[-1]["radius_km"], sig, wn.sigma * dv, wn.sigma_naive * dv, wn.n_independent,
                 s_off, n_off, rows[-1]["n_blank_chan"])
    units = {"radius_km": "km", "radius_arcsec": "arcsec", "radius_pix": "pix", "area_pix": "pix",
             "sigma_chan": "Jy", "sigma_window": "Jy km / s", "sigma_window_naive": "Jy km / s",
             "sigma_chan_offsource": "Jy"}
    table = Table(rows=rows)
    for name, unit in units.items():
        table[name].unit = unit
    chans = Table({"velocity": vel * u.km / u.s, "line_free": free, "window_weight": wweights})
    beam = ((info.beam_major.to_value(u.deg), info.beam_minor.to_value(u.deg), info.beam_pa.to_value(u.deg))
            if info.beam_major is not None else None)
    return LineSpectra(meta=meta, flux=flux.astype(np.float64), blank=n_blank.astype(np.int32), apertures=table,
                       channels=chans, window=win, v_centre=v_centre, centre=(x, y),
                       pixel_scale_arcsec=float(info.pixel_scale.to_value(u.arcsec)),
                       grid_shape=(info.shape[1], info.shape[2]), beam_deg=beam,
                       rest_frequency_hz=float(sub.header.get("RESTFRQ", np.nan)))
