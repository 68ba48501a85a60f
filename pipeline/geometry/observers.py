"""Observers: where a cube was observed from (the geocentre, a site on Earth, or a spacecraft).

An :class:`Observer` gives its barycentric position and velocity at any time,
which is all the target geometry (:func:`pipeline.geometry.orbit.observe`) and
the spectral frames (:mod:`pipeline.geometry.frames`) need:

* the geocentre: the Earth from astropy's built-in solar-system ephemeris;
* a site: the Earth plus the site's GCRS position and velocity (astropy);
* a spacecraft: a table of its state vectors (:class:`StateTable`), read from
  the project's own layout or a common ephemeris-service client's vector table,
  interpolated with cubic Hermite polynomials through positions and velocities.

A state table must say which centre (``barycentre``, ``geocentre`` or ``sun``)
and which axes (``icrs``, or ``ecliptic``: mean ecliptic and equinox of J2000,
the service's default for vectors) its vectors are given in, in its metadata or
in the config (``observatory.centre``, ``observatory.axes``); a table that
states neither is refused rather than guessed.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import astropy.units as u
import numpy as np
from astropy.coordinates import (CartesianDifferential, CartesianRepresentation, EarthLocation, ICRS, ITRS,
                                 get_body_barycentric_posvel, solar_system_ephemeris)
from astropy.table import QTable
from astropy.time import Time

from pipeline.errors import ConfigError, EphemerisError, GasledgerTypeError
from pipeline.offline import future_time_tolerated

__all__ = ["Observer", "StateTable", "read_states", "body_barycentric", "STATE_CENTRES", "STATE_AXES",
           "OBLIQUITY_J2000", "observer_from_config"]

#: Mean obliquity of the ecliptic at J2000.0 (IAU 1976 and IAU 2006 value).
OBLIQUITY_J2000 = (84381.448 * u.arcsec).to(u.deg)
#: Centres a state table may be given relative to (the service's codes in brackets in the messages).
STATE_CENTRES = ("barycentre", "geocentre", "sun")
#: Axes a state table may be given in.
STATE_AXES = ("icrs", "ecliptic")

_CENTRE_ALIASES = {"barycentre": "barycentre", "barycenter": "barycentre", "ssb": "barycentre", "@0": "barycentre",
                   "500@0": "barycentre", "geocentre": "geocentre", "geocenter": "geocentre", "500": "geocentre",
                   "500@399": "geocentre", "sun": "sun", "@sun": "sun", "@10": "sun", "500@10": "sun",
                   "heliocentre": "sun", "heliocenter": "sun"}
_AXES_ALIASES = {"icrs": "icrs", "icrf": "icrs", "equatorial": "icrs", "frame": "icrs", "earth": "icrs",
                 "ecliptic": "ecliptic", "eclip": "ecliptic"}
# client (astroquery vectors()) and project column names -> (project name, documented unit of the client)
_CLIENT_VECTORS = {"x": u.au, "y": u.au, "z": u.au, "vx": u.au / u.day, "vy": u.au / u.day, "vz": u.au / u.day}
_PROJECT_UNITS = {"x": u.km, "y": u.km, "z": u.km, "vx": u.km / u.s, "vy": u.km / u.s, "vz": u.km / u.s}


def body_barycentric(body: str, times: Time) -> tuple[np.ndarray, np.ndarray]:
    """Barycentric position [km] and velocity [km/s] of a solar-system body (astropy built-in), shape (3, N)."""
    with solar_system_ephemeris.set("builtin"), future_time_tolerated():
        pos, vel = get_body_barycentric_posvel(body, times)
    return (np.atleast_2d(pos.xyz.to_value(u.km).T).T.reshape(3, -1),
            np.atleast_2d(vel.xyz.to_value(u.km / u.s).T).T.reshape(3, -1))


def _ecliptic_to_icrs() -> np.ndarray:
    eps = OBLIQUITY_J2000.to_value(u.rad)
    ce, se = math.cos(eps), math.sin(eps)
    return np.array([[1.0, 0.0, 0.0], [0.0, ce, -se], [0.0, se, ce]])


@dataclass(frozen=True)
class StateTable:
    """A spacecraft's state vectors relative to ``centre``, on ICRS axes, ready for interpolation."""

    source: str
    jd_tdb: np.ndarray          # TDB Julian dates, strictly increasing
    position: np.ndarray        # km, shape (3, N)
    velocity: np.ndarray        # km/s, shape (3, N)
    centre: str

    def at(self, times: Time, what: str = "time") -> tuple[np.ndarray, np.ndarray]:
        """Position [km] and velocity [km/s] relative to the table's centre at ``times``, shape (3, N).

        The position is a cubic Hermite polynomial through the rows' positions and velocities; the velocity a
        cubic spline through the rows' velocities (linear for fewer than 4 rows).

        Raises
        ------
        EphemerisError
            When a time lies outside the table (``what`` names what was asked for).
        """
        with future_time_tolerated():
            jd = np.atleast_1d(Time(times).tdb.jd).astype(float)
        if np.any(jd < self.jd_tdb[0]) or np.any(jd > self.jd_tdb[-1]):
            bad = jd[(jd < self.jd_tdb[0]) | (jd > self.jd_tdb[-1])][0]
            span = [Time(v, format="jd", scale="tdb").utc.isot for v in (self.jd_tdb[0], self.jd_tdb[-1])]
            msg = (f"{what}: time {Time(bad, format='jd', scale='tdb').utc.isot} (UTC) lies outside the observer's "
                   f"state table {self.source} (which spans {span[0]} to {span[1]}); expected a table covering "
                   "the whole exposure")
            raise EphemerisError(msg)
        x = (self.jd_tdb - self.jd_tdb[0]) * 86400.0
        t = (jd - self.jd_tdb[0]) * 86400.0
        from scipy.interpolate import CubicHermiteSpline, CubicSpline   # where used: the graph builder needs none

        pos = CubicHermiteSpline(x, self.position, self.velocity, axis=1)(t)
        if x.size >= 4:
            vel = CubicSpline(x, self.velocity, axis=1)(t)
        else:
            vel = np.array([np.interp(t, x, row) for row in self.velocity])
        return pos, vel


def _normalised(value: Any, aliases: dict[str, str], what: str, source: str, allowed: tuple[str, ...]) -> str:
    key = str(value).strip().lower()
    if key not in aliases:
        msg = (f"observer state table {source}: {what} {value!r} is not understood; expected one of "
               f"{', '.join(allowed)}")
        raise EphemerisError(msg)
    return aliases[key]


def read_states(path: str | Path, centre: str | None = None, axes: str | None = None) -> StateTable:
    """Read a spacecraft's state-vector table.

    Two layouts are read unchanged:

    * the project's own (ECSV, or CSV with a header line): ``time`` (ISO or
      Julian date, UTC unless the metadata ``time_scale`` says ``tdb``/``tt``),
      ``x``, ``y``, ``z`` [km] and ``vx``, ``vy``, ``vz`` [km/s] (units in the
      ECSV header are honoured), metadata ``centre`` and ``axes``;
    * a common ephemeris-service client's vector table (astroquery's JPL
      Horizons ``vectors()`` saved as ECSV or CSV): ``datetime_jd`` (TDB, as the
      service gives vectors), ``x``, ``y``, ``z`` [au], ``vx``, ``vy``, ``vz``
      [au/d].

    ``centre`` and ``axes`` (the config's ``observatory.centre`` and
    ``observatory.axes``) complete a table whose metadata does not say; one of
    the two must say each, and a config key contradicting the metadata is
    refused.

    Raises
    ------
    EphemerisError
        Missing file, unreadable table, missing column, unit of the wrong kind, non-finite values,
        times not increasing, fewer than 2 rows, the centre or axes stated nowhere, or stated differently by
        the table and the config.
    """
    path = Path(path)
    source = repr(str(path))
    if not path.is_file():
        msg = f"observer state table {source} does not exist"
        raise EphemerisError(msg)
    fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
    try:
        with future_time_tolerated():
            table = QTable.read(path, format=fmt)
    except Exception as exc:  # astropy raises several types for malformed tables
        msg = f"observer state table {source} is not a readable {fmt} table: {exc}"
        raise EphemerisError(msg) from exc
    client = "datetime_jd" in table.colnames and "time" not in table.colnames
    missing = [c for c in ("datetime_jd" if client else "time", *_PROJECT_UNITS) if c not in table.colnames]
    if missing:
        msg = (f"observer state table {source} lacks the column(s) {', '.join(missing)} (found "
               f"{', '.join(table.colnames)}); expected time, x, y, z [km], vx, vy, vz [km/s] (or the client layout "
               "datetime_jd, x, y, z [au], vx, vy, vz [au/d])")
        raise EphemerisError(msg)
    for what, given, key, aliases in (("centre", centre, "observatory.centre", _CENTRE_ALIASES),
                                      ("axes", axes, "observatory.axes", _AXES_ALIASES)):
        meta = table.meta.get(what)
        if given is not None and meta is not None and aliases.get(str(given).strip().lower()) != aliases.get(
                str(meta).strip().lower()):
            msg = (f"observer state table {source} states {what} {meta!r} (metadata {what!r}) but the config key "
                   f"{key!r} says {given!r}; expected one answer (remove the config key, or correct the table)")
            raise EphemerisError(msg)
    stated_centre = centre if centre is not None else table.meta.get("centre")
    stated_axes = axes if axes is not None else table.meta.get("axes")
    for what, value, key in (("centre", stated_centre, "observatory.centre"), ("axes", stated_axes, "observatory.axes")):
        if value is None:
            allowed = STATE_CENTRES if what == "centre" else STATE_AXES
            msg = (f"observer state table {source} does not state its {what} (metadata {what!r}) and the config "
                   f"gives none; expected one of {', '.join(allowed)}, set with the config key {key!r}")
            raise EphemerisError(msg)
    centre_n = _normalised(stated_centre, _CENTRE_ALIASES, "centre", source, STATE_CENTRES)
    axes_n = _normalised(stated_axes, _AXES_ALIASES, "axes", source, STATE_AXES)
    try:
        if client:
            times = Time(np.asarray(table["datetime_jd"], dtype=float), format="jd", scale="tdb")
        else:
            scale = str(table.meta.get("time_scale", "utc")).lower()
            col = table["time"]
            if isinstance(col, Time):
                times = col
            elif np.issubdtype(np.asarray(col).dtype, np.number):
                times = Time(np.asarray(col, dtype=float), format="jd", scale=scale)
            else:
                times = Time(list(col), scale=scale)
        with future_time_tolerated():
            jd = np.asarray(times.tdb.jd, dtype=float)
    except ValueError as exc:
        msg = f"observer state table {source}: its time column holds values that are not times ({exc})"
        raise EphemerisError(msg) from exc
    if jd.size < 2 or np.any(np.diff(jd) <= 0):
        msg = (f"observer state table {source}: expected at least 2 rows with strictly increasing times, found "
               f"{jd.size} row(s)" + ("" if jd.size < 2 else " with times out of order or repeated"))
        raise EphemerisError(msg)
    values = {}
    for name, unit in _PROJECT_UNITS.items():
        col = table[name]
        default = _CLIENT_VECTORS[name] if client else unit
        q = col if isinstance(col, u.Quantity) else np.asarray(col, dtype=float) * default
        if not q.unit.is_equivalent(unit):
            msg = f"observer state table {source}: column {name!r} has unit {q.unit}, expected one convertible to {unit}"
            raise EphemerisError(msg)
        values[name] = q.to_value(unit)
        if not np.all(np.isfinite(values[name])):
            msg = f"observer state table {source}: column {name!r} has non-finite values"
            raise EphemerisError(msg)
    pos = np.array([values["x"], values["y"], values["z"]])
    vel = np.array([values["vx"], values["vy"], values["vz"]])
    if axes_n == "ecliptic":
        rot = _ecliptic_to_icrs()
        pos, vel = rot @ pos, rot @ vel
    return StateTable(source=str(path), jd_tdb=jd, position=pos, velocity=vel, centre=centre_n)


@functools.lru_cache(maxsize=16)
def _cached_states(path: str, centre: str | None, axes: str | None) -> StateTable:
    return read_states(path, centre, axes)


@dataclass(frozen=True)
class Observer:
    """Where a cube was observed from.

    ``location`` set: a site on Earth; ``states`` (a path) set: a spacecraft with that state table; neither:
    the geocentre.
    """

    name: str = "geocentre"
    location: EarthLocation | None = None
    states: str | None = None
    centre: str | None = None      # the state table's centre, when the config states it
    axes: str | None = None        # the state table's axes, when the config states it

    @property
    def kind(self) -> str:
        """``'geocentre'``, ``'site'`` or ``'spacecraft'``."""
        if self.states is not None:
            return "spacecraft"
        return "geocentre" if self.location is None else "site"

    def state_table(self) -> StateTable:
        """The spacecraft's state table (read once per process)."""
        if self.states is None:
            msg = f"observer {self.name!r} is a {self.kind}, not a spacecraft: it has no state table"
            raise ConfigError(msg)
        return _cached_states(self.states, self.centre, self.axes)

    def barycentric(self, times: Time, what: str = "time") -> tuple[np.ndarray, np.ndarray]:
        """Barycentric position [km] and velocity [km/s] of the observer at ``times``, ICRS axes, shape (3, N)."""
        times = Time(times).reshape(-1)
        with future_time_tolerated():
            t_tdb = times.tdb
        if self.kind == "spacecraft":
            table = self.state_table()
            pos, vel = table.at(t_tdb, what=f"{what} (observer {self.name})")
            if table.centre != "barycentre":
                cpos, cvel = body_barycentric("earth" if table.centre == "geocentre" else "sun", t_tdb)
                pos, vel = pos + cpos, vel + cvel
            return pos, vel
        pos, vel = body_barycentric("earth", t_tdb)
        if self.location is not None:
            with future_time_tolerated():
                gpos, gvel = self.location.get_gcrs_posvel(times.utc)
            pos = pos + gpos.xyz.to_value(u.km).reshape(3, -1)
            vel = vel + gvel.xyz.to_value(u.km / u.s).reshape(3, -1)
        return pos, vel

    def frame(self, time: Time):
        """The observer at ``time`` as an astropy frame with a velocity (for :class:`~astropy.coordinates.SpectralCoord`)."""
        if self.kind == "spacecraft":
            pos, vel = self.barycentric(time)
            rep = CartesianRepresentation(pos[:, 0] * u.km,
                                          differentials=CartesianDifferential(vel[:, 0] * u.km / u.s))
            return ICRS(rep)
        loc = self.location if self.location is not None else EarthLocation.from_geocentric(0, 0, 0, unit=u.m)
        itrs = loc.get_itrs(obstime=time)
        return ITRS(itrs.cartesian.with_differentials(CartesianDifferential([0, 0, 0] * u.km / u.s)), obstime=time)

    def describe(self) -> str:
        """A few words for messages and the report."""
        if self.kind == "geocentre":
            return "the geocentre"
        if self.kind == "site":
            return (f"the site {self.name!r} (lon {self.location.lon.to_value(u.deg):.4f} deg, lat "
                    f"{self.location.lat.to_value(u.deg):.4f} deg)")
        return f"the spacecraft {self.name!r} (state vectors from {self.states})"

    def metadata(self) -> Any:
        """How an ephemeris table seen from this observer states it (its metadata ``observer``)."""
        if self.kind == "geocentre":
            return "geocentre"
        if self.kind == "site":
            return {"lon_deg": float(self.location.lon.to_value(u.deg)),
                    "lat_deg": float(self.location.lat.to_value(u.deg)),
                    "height_m": float(self.location.height.to_value(u.m))}
        return {"spacecraft": self.name}


def observer_from_config(entry: Any) -> Observer:
    """An :class:`Observer` from a validated config ``observatory`` entry (the word geocentre, a site or a spacecraft)."""
    if entry in (None, "geocentre"):
        return Observer()
    if not isinstance(entry, dict):
        msg = f"config key 'observatory' = {entry!r}; expected 'geocentre', a site or a spacecraft mapping"
        raise GasledgerTypeError(msg)
    if "states" in entry:
        return Observer(name=str(entry.get("name", "spacecraft")), states=str(entry["states"]),
                        centre=entry.get("centre"), axes=entry.get("axes"))
    location = EarthLocation.from_geodetic(lon=entry["lon_deg"] * u.deg, lat=entry["lat_deg"] * u.deg,
                                           height=entry["height_m"] * u.m)
    return Observer(name=str(entry.get("name", "observatory")), location=location)
