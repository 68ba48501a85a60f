"""Per-cube observing geometry: where the target was and how it moved during the exposure.

Either an ephemeris table (already seen from the cube's observer) is interpolated,
or osculating elements are propagated for that observer (:mod:`pipeline.geometry.orbit`,
:mod:`pipeline.geometry.observers`). The result is a one-row table per cube, the input
of every later stage; it also carries the Doppler factor between the cube's spectral
frame and the observer's, so no later stage needs the observer.
"""

from __future__ import annotations

import logging
import warnings

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.table import QTable
from astropy.time import Time

from pipeline.io.cubes import CubeInfo
from pipeline.io.times import observation_times
from pipeline.geometry.ephemeris import Ephemeris
from pipeline.geometry.frames import observer_frame_factor
from pipeline.geometry.observers import Observer
from pipeline.errors import DriftWarning, ConfigError, CoverageError, MotionWarning
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import two_body_drift, OrbitalElements, observe

__all__ = ["target_geometry", "cube_geometry"]

log = logging.getLogger(__name__)


def target_geometry(times: Time, what: str, ephemeris: Ephemeris | None = None,
                    elements: OrbitalElements | None = None,
                    observer: Observer | None = None) -> dict[str, u.Quantity]:
    """Geometry at ``times`` from a table or from elements (exactly one must be given), seen from ``observer``.

    Returns a dict of Quantities: ra, dec, r_h, delta, delta_dot, phase (when known).
    """
    if (ephemeris is None) == (elements is None):
        found = "neither" if ephemeris is None else "both"
        msg = (f"{what}: the target geometry needs exactly one of an ephemeris table or orbital elements "
               f"(config key 'target'), found {found}")
        raise ConfigError(msg)
    if ephemeris is not None:
        return ephemeris.at(times, what=what)
    with future_time_tolerated():
        table = observe(elements, Time(times).reshape(-1), observer)
    cols = ("ra", "dec", "r_h", "delta", "delta_dot", "phase")
    return {c: (table[c] if np.ndim(times) else table[c][0]) for c in cols}


def _warn_drift(elements: OrbitalElements, mid: Time, info: CubeInfo, cube_id: str) -> None:
    """A DriftWarning when the rough two-body drift from the elements' epoch exceeds a tenth of the beam."""
    dt = (mid - elements.epoch).to(u.day)
    drift = two_body_drift(dt)
    size = info.beam_minor if info.beam_minor is not None else 2 * info.pixel_scale
    if drift > 0.1 * size:
        warnings.warn(f"cube {cube_id}: its mid-time is {abs(dt.to_value(u.day)):.0f} days from the orbital elements' "
                      f"epoch ({elements.epoch.isot}); two-body propagation may then be off by about "
                      f"{drift.to_value(u.arcsec):.2g} arcsec (rule of thumb), more than a tenth of the "
                      f"{size.to_value(u.arcsec):.2g} arcsec beam; expected elements osculating near the "
                      "observations (or an ephemeris table)", DriftWarning, stacklevel=3)


def cube_geometry(info: CubeInfo, cube_id: str, epoch: str, time_override: str | None = None,
                  ephemeris: Ephemeris | None = None, elements: OrbitalElements | None = None,
                  observer: Observer | None = None, tracked: bool = True, position: str = "auto",
                  offset: tuple[float, float] = (0.0, 0.0), duration: u.Quantity | None = None) -> QTable:
    """One-row table with the geometry of the target for one cube.

    Columns: cube_id, epoch, time_start/time_mid/time_end (UTC), time_source (the header cards or config keys
    the times came from, :func:`pipeline.io.times.observation_times`; ``duration`` completes a header that
    gives only a start), ra, dec, r_h,
    delta, delta_dot, phase, motion (sky motion during the exposure),
    delta_dot_change (change of the radial velocity during the exposure),
    x_pix, y_pix (0-based pixel position of the target at mid-time), specsys,
    frame_factor (D with f in the SPECSYS frame = D * f in the observer's frame, towards the target at
    mid-time; 1 for TOPOCENT and SOURCE), observer (who observed: geocentre, site or spacecraft, and its name),
    beam_major, beam_minor, freq_min, freq_max.

    ``observer`` is the cube's observer (:class:`~pipeline.geometry.observers.Observer`; None for the
    geocentre); an ephemeris table must already be seen from it.

    ``tracked`` says the cube was made tracking the target's ephemeris (the
    usual way for moving targets), so its motion does not smear the coma;
    for an untracked cube a :class:`MotionWarning` is given when the target
    moved by more than a quarter of the beam.

    ``position`` chooses where the target is on the sky: ``'ephemeris'`` (its
    predicted RA/Dec at mid-time), ``'phase_centre'`` (the cube's reference
    position, for cubes made in the target's frame) or ``'auto'`` (the phase
    centre when SPECSYS = SOURCE, else the ephemeris; the choice is logged).
    ``offset`` (arcsec, east and north) is added to either.

    Raises
    ------
    EphemerisError
        When the table does not cover the cube's time.
    CoverageError
        When the target lies outside the cube's field.
    """
    exposure = observation_times(info.header, info.path, time_override, duration)
    start, mid, end = exposure
    times = Time([start, mid, end])
    geo = target_geometry(times, what=f"cube {cube_id} ({info.path})", ephemeris=ephemeris,
                          elements=elements, observer=observer)
    sky = SkyCoord(geo["ra"], geo["dec"], frame="icrs")
    motion = sky[0].separation(sky[2]).to(u.arcsec)
    if elements is not None and elements.epoch is not None:
        _warn_drift(elements, mid, info, cube_id)
    mode = position
    if mode == "auto":
        mode = "phase_centre" if info.specsys == "SOURCE" else "ephemeris"
        log.info("cube %s: target position from the %s (automatic choice, SPECSYS = %s)", cube_id,
                 mode.replace("_", " "), info.specsys)
    if mode == "phase_centre":
        ra0, dec0 = info.celestial_wcs.wcs.crval
        base = SkyCoord(ra0 * u.deg, dec0 * u.deg, frame="icrs")
    elif mode == "ephemeris":
        base = sky[1]
    else:
        msg = f"cube {cube_id}: config key 'position' = {position!r}; expected 'auto', 'ephemeris' or 'phase_centre'"
        raise ConfigError(msg)
    target = base.spherical_offsets_by(offset[0] * u.arcsec, offset[1] * u.arcsec) if any(offset) else base
    x, y = info.celestial_wcs.world_to_pixel(target)
    ny, nx = info.shape[1:]
    if not (-0.5 <= x <= nx - 0.5 and -0.5 <= y <= ny - 0.5):
        msg = (f"{info.path}: the target (RA {geo['ra'][1].to_value(u.deg):.5f} deg, Dec "
               f"{geo['dec'][1].to_value(u.deg):.5f} deg at {mid.isot}) falls at pixel ({x:.1f}, {y:.1f}), "
               f"outside the {nx} x {ny} field; expected the target inside the field (check the ephemeris, the "
               "cube's CRVAL1/CRVAL2 and the cube's 'position' and 'offset_arcsec' keys)")
        raise CoverageError(msg)
    if not tracked and info.beam_major is not None and motion > 0.25 * info.beam_minor:
        warnings.warn(f"cube {cube_id}: the target moved {motion:.2f} during the exposure, more than a "
                      f"quarter of the beam ({info.beam_minor.to(u.arcsec):.2f}), and the cube was not made "
                      "tracking it: the coma is smeared", MotionWarning, stacklevel=2)
    log.info("cube %s: mid-time %s, r_h %.4f au, delta %.4f au, delta_dot %+.4f km/s, moved %.3f arcsec",
             cube_id, mid.isot, geo["r_h"][1].to_value(u.au), geo["delta"][1].to_value(u.au),
             geo["delta_dot"][1].to_value(u.km / u.s), motion.to_value(u.arcsec))
    observer = observer if observer is not None else Observer()
    factor = 1.0 if info.specsys == "SOURCE" else observer_frame_factor(info.specsys, mid, observer, geo["ra"][1],
                                                                          geo["dec"][1])
    row = {
        "cube_id": [cube_id], "epoch": [epoch],
        "time_start": Time([start.isot], scale="utc"), "time_mid": Time([mid.isot], scale="utc"),
        "time_end": Time([end.isot], scale="utc"), "time_source": [exposure.source],
        "ra": [geo["ra"][1].to_value(u.deg)] * u.deg, "dec": [geo["dec"][1].to_value(u.deg)] * u.deg,
        "r_h": [geo["r_h"][1].to_value(u.au)] * u.au, "delta": [geo["delta"][1].to_value(u.au)] * u.au,
        "delta_dot": [geo["delta_dot"][1].to_value(u.km / u.s)] * (u.km / u.s),
        "phase": [geo["phase"][1].to_value(u.deg) if "phase" in geo else np.nan] * u.deg,
        "motion": [motion.to_value(u.arcsec)] * u.arcsec,
        "delta_dot_change": [(geo["delta_dot"][2] - geo["delta_dot"][0]).to_value(u.km / u.s)] * (u.km / u.s),
        "x_pix": [float(x)], "y_pix": [float(y)], "specsys": [info.specsys], "frame_factor": [float(factor)],
        "observer": [f"{observer.kind}: {observer.name}"], "tracked": [tracked],
        "position": [mode], "offset_east": [float(offset[0])] * u.arcsec, "offset_north": [float(offset[1])] * u.arcsec,
        "ra_target": [target.ra.deg] * u.deg, "dec_target": [target.dec.deg] * u.deg,
        "beam_major": [info.beam_major.to_value(u.arcsec) if info.beam_major is not None else np.nan] * u.arcsec,
        "beam_minor": [info.beam_minor.to_value(u.arcsec) if info.beam_minor is not None else np.nan] * u.arcsec,
        "freq_min": [info.frequencies.min().to_value(u.GHz)] * u.GHz,
        "freq_max": [info.frequencies.max().to_value(u.GHz)] * u.GHz,
    }
    return QTable(row)
