"""Injection-recovery: would a coma of a given production rate have been seen in these data?

A model coma (:func:`pipeline.coma.image.model_line_cube`) of production rate
Q is added to a line's real sub-cube at several places: on the nucleus and on
a ring around it, each at velocities away from every catalogue line, so the
real coma does not contribute. Each injection is extracted and measured
exactly as the real line is (same apertures, window, baseline and empirical
noise), and the recovered Q and its significance are reported. The spread
over placements shows how much the answer depends on where the noise happens
to be.

The measurement is linear in the data, so the recovered rate of an injection
of rate q is a + q b: a the data measured at the placement (noise; no line is
there), b the measurement of the model coma (with minus without it, so the
data's blank voxels act on it as on the data) per unit rate. :func:`unit_injections` measures a, b and the data's
noise once per placement and temperature, so that any rate (the limit or the
rate the push needs, known only once every epoch is combined) costs nothing
more.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from pipeline.spectra.apertures import flux_conversion, offsource_positions, radius_in_pixels
from pipeline.catalogue.entries import Line, Species
from pipeline.coma.image import line_cube_from_map, line_profile_on_channels, model_line_map
from pipeline.io.products import LineSpectra, SubCube
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra, separable_spectra
from pipeline.spectra.noise import window_sums
from pipeline.coma.response import ComaModel

__all__ = ["Placement", "placements", "inject_spectra", "placement_kind", "PLACEMENT_KINDS", "Q_UNIT",
           "UnitInjection", "unit_injections"]

#: What each kind of placement is (index 0 is the nucleus, 1.. the ring), for tables and the report.
PLACEMENT_KINDS = {"nucleus": "on the nucleus", "ring": "on a ring of sky positions around the nucleus"}


def placement_kind(index: int) -> str:
    """'nucleus' for placement index 0, 'ring' for the ring positions 1.. (millimetre and infrared alike)."""
    return "nucleus" if int(index) == 0 else "ring"


@dataclass(frozen=True)
class Placement:
    """Where an injected coma goes: a sky position index and pixel, and a velocity centre."""

    index: int            # 0 = on the nucleus, 1.. = ring positions
    x: float
    y: float
    v_centre: float       # km/s

    @property
    def kind(self) -> str:
        """'nucleus' or 'ring' (:func:`placement_kind`)."""
        return placement_kind(self.index)


def _free_velocities(vel: np.ndarray, avoid: np.ndarray, window: float, n: int = 2) -> list[float]:
    """Up to ``n`` window centres (km/s) whose windows lie in the band and stay 3 windows from every line."""
    dv = float(np.abs(np.median(np.diff(vel))))
    lo, hi = vel.min() + window + 4 * dv, vel.max() - window - 4 * dv
    out = []
    for mag in np.arange(4 * window, max(abs(lo), abs(hi)), 2 * window):
        for v in (-mag, mag):
            if lo <= v <= hi and np.all(np.abs(v - avoid) > 3 * window) and \
                    all(abs(v - o) > 3 * window for o in out):
                out.append(float(v))
            if len(out) == n:
                return out
    return out


def placements(sub: SubCube, settings: ExtractionSettings, n_ring: int = 4,
               n_velocity: int = 2) -> list[Placement]:
    """The injection placements of a sub-cube: nucleus plus up to ``n_ring`` ring positions, times velocities."""
    info = sub.info()
    x, y = sub.meta.target_x, sub.meta.target_y
    delta = sub.meta.delta
    r_max = max(radius_in_pixels(r, delta, info.pixel_scale) for r in settings.radii)
    beam_pix = float((np.sqrt(info.beam_major * info.beam_minor) / info.pixel_scale).decompose()) \
        if info.beam_major is not None else 1.0
    # ring close enough to fit small fields: the velocity offset, not distance, keeps the real coma out
    # only where the data are (a blank border or a mask is no place for an injection)
    footprint = np.all(np.isfinite(sub.data), axis=0) if not np.all(np.isfinite(sub.data)) else None
    ring = offsource_positions(info.shape[1:], x, y, r_max, 1.2 * r_max + beam_pix, footprint)
    step = max(1, len(ring) // n_ring) if ring else 1
    sky = [(x, y)] + ring[::step][:n_ring]
    vel = sub.velocity
    avoid = np.concatenate([[0.0], settings.other_lines.to_value(u.km / u.s)])
    vels = _free_velocities(vel, avoid, settings.window.to_value(u.km / u.s), n_velocity)
    return [Placement(i, px, py, v) for i, (px, py) in enumerate(sky) for v in vels]


def _no_blank_in_apertures(spectra: LineSpectra, finite: np.ndarray) -> bool:
    """Whether every pixel of the placement's largest aperture is finite in every channel."""
    radius = float(np.max(np.asarray(spectra.apertures["radius_pix"], dtype=float)))
    x, y = spectra.centre
    yy, xx = np.mgrid[0:finite.shape[0], 0:finite.shape[1]]
    near = np.hypot(xx - x, yy - y) <= radius + 1.0              # every pixel the aperture overlaps, and a margin
    return bool(np.all(finite[near]))


class _ModelComae:
    """Model comae of one line in one sub-cube, in the cube's unit, placed anywhere (the conversion made once).

    The model is in Jy/beam: Jy per pixel = Jy/beam x pixel/beam area; the cube unit per pixel from
    flux_conversion (the model is convolved with the cube's one, or median, beam; the cube's unit may refer to
    each channel's beam). The coma's map is made once per sky position and temperature and spread at each velocity.
    """

    def __init__(self, sub: SubCube, line: Line, species: Species, model: ComaModel, parent: Species | None):
        info = sub.info()
        self.sub, self.line, self.species, self.model, self.parent = sub, line, species, model, parent
        self.shape = info.shape[1:]
        self.pix = info.pixel_scale.to_value(u.arcsec)
        self.beam = (info.beam_major.to_value(u.arcsec), info.beam_minor.to_value(u.arcsec),
                     info.beam_pa.to_value(u.deg))
        per_pixel = (info.pixel_solid_angle() / info.beam_solid_angle()).decompose().value
        self.to_cube_unit = per_pixel / flux_conversion(info.bunit, info.pixel_solid_angle(),
                                                        info.channel_beam_solid_angles(), info.frequencies)
        self._maps: dict[tuple[float, float, float], np.ndarray] = {}
        self._profiles: dict[tuple[float, float], np.ndarray] = {}

    def map(self, t_kin: u.Quantity, p: Placement) -> np.ndarray:
        """The coma's map for Q = 1/s at ``t_kin`` centred on placement ``p`` (Jy/beam km/s per pixel)."""
        meta = self.sub.meta
        key = (p.x, p.y, float(u.Quantity(t_kin, u.K).value))
        if key not in self._maps:
            self._maps[key] = model_line_map(self.shape, p.x, p.y, self.pix, self.line, self.species, t_kin,
                                             meta.r_h, meta.delta, self.beam, self.model, self.parent)
        return self._maps[key]

    def profile(self, t_kin: u.Quantity, p: Placement) -> np.ndarray:
        """The coma's spectral factor at placement ``p`` in the cube's unit per unit map (the cube is
        ``q * profile[:, None, None] * map[None]``); made once per temperature and velocity (placements at other
        sky positions share it)."""
        key = (float(u.Quantity(t_kin, u.K).value), float(p.v_centre))
        if key not in self._profiles:
            prof = line_profile_on_channels(self.sub.velocity, self.species, t_kin, self.sub.meta.r_h, self.model,
                                            v_centre=p.v_centre, spectral_response=self.sub.meta.spectral_response)
            self._profiles[key] = prof * self.to_cube_unit
            self._profiles[key].flags.writeable = False
        return self._profiles[key]

    def cube(self, q: float, t_kin: u.Quantity, p: Placement) -> np.ndarray:
        """The coma of rate ``q`` [1/s] at ``t_kin``, centred on placement ``p``, in the cube's unit."""
        meta = self.sub.meta
        cube = line_cube_from_map(q * self.map(t_kin, p), self.sub.velocity, self.species, t_kin, meta.r_h,
                                  self.model, v_centre=p.v_centre, spectral_response=meta.spectral_response)
        return cube * self.to_cube_unit[:, None, None]


def inject_spectra(sub: SubCube, settings: ExtractionSettings, line: Line, species: Species, q: float,
                   t_kin: u.Quantity, model: ComaModel, where: list[Placement],
                   parent: Species | None = None) -> list[LineSpectra]:
    """Aperture spectra (as :func:`extract_spectra` makes them) of the sub-cube with a coma of ``q`` injected."""
    comae = _ModelComae(sub, line, species, model, parent)
    real = np.asarray(sub.data, dtype=np.float64)
    return [extract_spectra(sub, settings, data=real + comae.cube(q, t_kin, p), centre=(p.x, p.y),
                            v_centre=p.v_centre, offsource=False).injected(q, p.index) for p in where]


#: The production rate [1/s] of the model injected to measure b (any rate: the measurement is linear).
Q_UNIT = 1e27


@dataclass(frozen=True)
class UnitInjection:
    """One placement in one line's sub-cube, measured in Q units at each temperature of the sweep.

    Arrays (n_T, n_ap): ``q_data`` the data measured at the placement (no injection), ``q_per_q`` the measurement
    of the model coma alone (made at that row's temperature) per unit injected rate, ``sigma_q`` the data's
    noise there. The recovered rate of an injection of rate q at temperature index i is
    ``q_data[i] + q * q_per_q[i]``, with error ``sigma_q[i]``.
    """

    placement: Placement
    velocity_slot: int
    q_data: np.ndarray
    q_per_q: np.ndarray
    sigma_q: np.ndarray
    radius_km: np.ndarray
    apertures: tuple[str, ...]


def unit_injections(sub: SubCube, settings: ExtractionSettings, line: Line, species: Species, t_kin: u.Quantity,
                    model: ComaModel, where: list[Placement], to_q_units, parent: Species | None = None
                    ) -> list[UnitInjection]:
    """Every placement of one line's sub-cube measured once: the data, and the model at each temperature.

    ``to_q_units`` turns a :class:`LineSpectra` into a stack input in Q units at the sweep ``t_kin``
    (:func:`pipeline.rates.q_units.stack_input` with the stage's settings). The model is the coma of rate
    :data:`Q_UNIT` (as :func:`inject_spectra` makes it); its part is the measurement with it minus the
    measurement without it (the data's noise checks need the data; the difference is the model's measurement,
    blank voxels and all).
    """
    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    comae = _ModelComae(sub, line, species, model, parent)
    real = np.asarray(sub.data, dtype=np.float64)
    finite = np.isfinite(real).all(axis=0)             # pixels never blank: where the separable route is exact
    slots = sorted({p.v_centre for p in where})
    out = []
    for p in where:
        spectra = extract_spectra(sub, settings, data=real, centre=(p.x, p.y), v_centre=p.v_centre, offsource=False)
        data_inp, rows = to_q_units(spectra)
        per_q = np.full_like(data_inp.q, np.nan)
        if _no_blank_in_apertures(spectra, finite):
            # the extraction is linear and the model cube separable: the model's own measurement, all temperatures
            flux = separable_spectra(sub, settings, [Q_UNIT * comae.map(t, p) for t in t_kin],
                                     [comae.profile(t, p) for t in t_kin], (p.x, p.y),
                                     np.asarray(spectra.channels["line_free"], dtype=bool))     # (n_T, n_ap, n_chan)
            window = window_sums(flux, np.asarray(spectra.channels["window_weight"], dtype=float),
                                 float(np.abs(np.median(np.diff(spectra.velocity)))))
            scale = np.array([r["scale"] for r in rows], dtype=float).reshape(per_q.shape)
            per_q = window / scale / Q_UNIT
        else:
            for i, t in enumerate(t_kin):       # with blank pixels: the data with and without the model, measured
                with_model, _ = to_q_units(extract_spectra(sub, settings, data=real + comae.cube(Q_UNIT, t, p),
                                                           centre=(p.x, p.y), v_centre=p.v_centre, offsource=False))
                per_q[i] = (with_model.q[i] - data_inp.q[i]) / Q_UNIT
        out.append(UnitInjection(placement=p, velocity_slot=slots.index(p.v_centre), q_data=data_inp.q,
                                 q_per_q=per_q, sigma_q=data_inp.sigma_q, radius_km=data_inp.radius_km,
                                 apertures=data_inp.labels))
    return out
