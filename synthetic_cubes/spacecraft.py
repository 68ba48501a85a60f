"""The invented space telescope's orbit and its state-vector table.

The fictional telescope of the infrared cubes sits about 1.5 million km beyond
the Earth on the Sun-Earth line (near the L2 point) and moves on a slow halo
around it:

    r(t) = r_E(t) + d u(t) + A_y sin(phi) e_y(t) + A_z cos(phi) e_z(t),   phi = 2 pi (t - t_0) / P + phi_0,

with u the Sun-to-Earth unit vector, e_z the unit normal of the Earth's
heliocentric orbit (r_E - r_S) x (v_E - v_S), e_y = e_z x u, and r_E, r_S the
Earth's and Sun's barycentric positions from astropy's built-in solar-system
ephemeris (``get_body_barycentric_posvel``). The velocity is the time
derivative of that model: the Earth's velocity plus the offset's rate of change
(a central difference over +-60 s; the offset changes on time scales of months,
so the difference is exact to far better than a millimetre per second).

This is a kinematic stand-in, not a dynamical orbit: all the pipeline needs is
a smooth, self-consistent state table of a plausible observer.
"""

from __future__ import annotations

import io
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.coordinates import get_body_barycentric_posvel, solar_system_ephemeris
from astropy.table import Table
from astropy.time import Time, TimeDelta

from pipeline.io.atomic import write_text
from pipeline.offline import future_time_tolerated

__all__ = ["spacecraft_states", "state_table", "write_state_table"]

_DIFF_S = 60.0      # half-step of the central difference of the offset [s]


def _earth_sun(times: Time) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Barycentric position [km] and velocity [km/s] of the Earth and the Sun, ICRS axes, shape (3, N) each."""
    with solar_system_ephemeris.set("builtin"), future_time_tolerated():
        pe, ve = get_body_barycentric_posvel("earth", times)
        ps, vs = get_body_barycentric_posvel("sun", times)
    return (pe.xyz.to_value(u.km), ve.xyz.to_value(u.km / u.s), ps.xyz.to_value(u.km), vs.xyz.to_value(u.km / u.s))


def _offset(times: Time, spacecraft: dict, t0: Time) -> np.ndarray:
    """The spacecraft's position relative to the Earth [km], shape (3, N)."""
    pe, ve, ps, vs = _earth_sun(times)
    r, w = pe - ps, ve - vs
    along = r / np.linalg.norm(r, axis=0)
    normal = np.cross(r, w, axis=0)
    normal /= np.linalg.norm(normal, axis=0)
    across = np.cross(normal, along, axis=0)
    with future_time_tolerated():
        days = (times.tdb - t0.tdb).to_value(u.day)
    phi = 2 * np.pi * days / spacecraft["halo_period_days"] + np.deg2rad(spacecraft["halo_phase_deg"])
    a_y, a_z = spacecraft["halo_km"]
    return spacecraft["distance_km"] * along + a_y * np.sin(phi) * across + a_z * np.cos(phi) * normal


def spacecraft_states(times: Time, spacecraft: dict, t0: Time) -> tuple[np.ndarray, np.ndarray]:
    """Barycentric position [km] and velocity [km/s] of the spacecraft at ``times``, ICRS axes, shape (3, N).

    ``spacecraft`` holds ``distance_km``, ``halo_km`` (A_y, A_z), ``halo_period_days`` and ``halo_phase_deg``;
    ``t0`` is the time of the halo's phase ``halo_phase_deg``.
    """
    times = Time(times).reshape(-1)
    pe, ve, _, _ = _earth_sun(times)
    with future_time_tolerated():
        step = TimeDelta(_DIFF_S, format="sec")
        rate = (_offset(times + step, spacecraft, t0) - _offset(times - step, spacecraft, t0)) / (2 * _DIFF_S)
    return pe + _offset(times, spacecraft, t0), ve + rate


def state_table(start: Time, stop: Time, spacecraft: dict, t0: Time) -> Table:
    """The spacecraft's state vectors from ``start`` to ``stop`` (both covered) every ``state_step_h`` hours.

    Columns ``time`` (UTC, ISO), ``x``, ``y``, ``z`` [km], ``vx``, ``vy``, ``vz`` [km/s]; barycentric, ICRS axes
    (metadata ``centre: barycentre``, ``axes: icrs``), as :func:`pipeline.geometry.observers.read_states` reads
    the project's layout.
    """
    step = spacecraft["state_step_h"] * 3600.0
    with future_time_tolerated():
        n = int(np.ceil((stop - start).to_value(u.s) / step)) + 1
        times = start + TimeDelta(np.arange(n) * step, format="sec")
    pos, vel = spacecraft_states(times, spacecraft, t0)
    table = Table()
    with future_time_tolerated():
        table["time"] = [t.isot for t in times.utc]
    for k, axis in enumerate("xyz"):
        table[axis] = pos[k]
        table[axis].unit = u.km
    for k, axis in enumerate("xyz"):
        table[f"v{axis}"] = vel[k]
        table[f"v{axis}"].unit = u.km / u.s
    table.meta["spacecraft"] = spacecraft["name"]
    table.meta["centre"] = "barycentre"
    table.meta["axes"] = "icrs"
    table.meta["time_scale"] = "utc"
    table.meta["comment"] = ("invented kinematic orbit near the Sun-Earth L2 point (synthetic_cubes.spacecraft); "
                             "Earth and Sun from the astropy built-in ephemeris")
    return table


def write_state_table(table: Table, path: str | Path) -> None:
    """Write a state table as ECSV (full double precision), atomically."""
    out = io.StringIO()
    table.write(out, format="ascii.ecsv")
    write_text(out.getvalue(), Path(path))
