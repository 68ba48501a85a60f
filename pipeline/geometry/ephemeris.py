"""Ephemeris tables: reading, checking and interpolating the target's geometry.

A table has one row per time with the columns ``time`` (UTC), ``ra``, ``dec``
[deg], ``r_h``, ``delta`` [au], ``delta_dot`` [km/s] and optionally ``phase``
[deg]. Columns without units get these defaults. A table is taken as seen from
the campaign's observatory (topocentric), or from the geocentre.

:func:`read_ephemeris` also reads, unchanged, a table written by a common
ephemeris-service client and the service's plain-text export (CSV option);
:mod:`pipeline.geometry._service_tables` maps their columns and time scales
onto these.  :func:`check_spacing` says how far the interpolation of a table
may err, for short tables too.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time
from scipy.interpolate import CubicSpline

from pipeline.errors import EphemerisError, SpacingWarning
from pipeline.geometry._service_tables import (EXPECTED_LAYOUTS, from_client, is_service_export, layout_of,
                                               read_qtable, read_service_export, refuse_masked)

__all__ = ["EPHEMERIS_COLUMNS", "Ephemeris", "read_ephemeris", "interpolation_error", "check_spacing", "GAP_FACTOR"]


#: A table step longer than this many times the median step of the rows nearby is a gap.
GAP_FACTOR = 5.0
_GAP_NEIGHBOURS = 5   # steps on each side whose median is the local spacing

#: Required columns and their default units.
EPHEMERIS_COLUMNS = {"ra": u.deg, "dec": u.deg, "r_h": u.au, "delta": u.au, "delta_dot": u.km / u.s}
_OPTIONAL = {"phase": u.deg, "ra_rate": u.arcsec / u.h, "dec_rate": u.arcsec / u.h,
             "delta_dot_geocentric": u.km / u.s}


@dataclass(frozen=True)
class Ephemeris:
    """An ephemeris table ready for interpolation."""

    source: str
    jd: np.ndarray                       # UTC Julian dates, strictly increasing
    columns: dict[str, u.Quantity]

    @property
    def span(self) -> tuple[Time, Time]:
        """First and last time of the table (UTC)."""
        return Time(self.jd[0], format="jd", scale="utc"), Time(self.jd[-1], format="jd", scale="utc")

    def at(self, times: Time, what: str = "time") -> dict[str, u.Quantity]:
        """Interpolated geometry at ``times`` (cubic splines; RA unwrapped across 0/360).

        Raises
        ------
        EphemerisError
            When a time lies outside the table, or inside a gap of it (a step
            more than :data:`GAP_FACTOR` times the median step of the rows
            nearby); ``what`` names the thing asked for (e.g. the cube) in the
            message.
        """
        t = Time(times).utc
        jd = np.atleast_1d(t.jd)
        lo, hi = self.span
        if np.any(jd < self.jd[0]) or np.any(jd > self.jd[-1]):
            bad = Time(jd[(jd < self.jd[0]) | (jd > self.jd[-1])][0], format="jd", scale="utc")
            msg = (f"{what}: time {bad.isot} lies outside the ephemeris {self.source} "
                   f"(which spans {lo.isot} to {hi.isot}); expected a table covering the whole exposure")
            raise EphemerisError(msg)
        self._check_gaps(jd, what)
        out = {}
        x = self.jd - self.jd[0]
        for name, col in self.columns.items():
            values = col.value
            if name == "ra":
                values = np.unwrap(values, period=360.0)
            if len(x) >= 4:
                interp = CubicSpline(x, values)(jd - self.jd[0])
            else:
                interp = np.interp(jd - self.jd[0], x, values)
            if name == "ra":
                interp = np.mod(interp, 360.0)
            out[name] = (interp if np.ndim(times) else interp[0]) * col.unit
        return out

    def _check_gaps(self, jd: np.ndarray, what: str) -> None:
        """Refuse times that fall in a step much longer than the table's spacing around it."""
        steps = np.diff(self.jd)
        if steps.size < 3:
            return
        index = np.clip(np.searchsorted(self.jd, jd, side="right") - 1, 0, steps.size - 1)
        for k, i in zip(jd, index):
            near = np.concatenate([steps[max(0, i - _GAP_NEIGHBOURS):i], steps[i + 1:i + 1 + _GAP_NEIGHBOURS]])
            typical = float(np.median(near))
            if steps[i] > GAP_FACTOR * typical:
                when = Time(k, format="jd", scale="utc").isot
                t0, t1 = (Time(self.jd[j], format="jd", scale="utc").isot for j in (i, i + 1))
                msg = (f"{what}: time {when} falls in a gap of the ephemeris {self.source}: no row between {t0} "
                       f"and {t1} ({steps[i] * 24:.3g} h, more than {GAP_FACTOR:g} times the {typical * 1440:.3g} min "
                       "spacing of the rows nearby); expected rows at the usual spacing across the cube's time")
                raise EphemerisError(msg)


def read_ephemeris(path: str | Path) -> Ephemeris:
    """Read and check an ephemeris table in any of the layouts users have.

    Three layouts are read unchanged: the project's own (ECSV, or CSV with a
    header line; the columns of the module docstring), a table written by a
    common ephemeris-service client (astroquery's JPL Horizons layout:
    ``datetime_jd``, ``RA``, ``DEC``, ``r``, ``delta``, ``delta_rate``,
    ``alpha``, ...; ECSV with units, or CSV without, when the service's
    documented units apply) and the service's plain-text export made with its
    CSV option (a ``.txt`` file, or any file with a ``$$SOE`` line).  The
    mapping of the other layouts' columns and time scales onto the project's
    is tabulated in :mod:`pipeline.geometry._service_tables`.

    Raises
    ------
    EphemerisError
        The file is missing or unreadable, mixes the project's and the
        client's column names, lacks a column or quantity, has a unit of the
        wrong kind, times are unparsable, not increasing or repeated.

    References
    ----------
    .. [1] astroquery documentation, "JPL Horizons Queries
       (astroquery.jplhorizons)": ``ephemerides()`` column names and units.
    .. [2] JPL Horizons System manual, "Definition of Observer Table
       Quantities" (CSV export, $$SOE / $$EOE markers).
    """
    path = Path(path)
    if not path.is_file():
        msg = f"ephemeris file {str(path)!r} does not exist"
        raise EphemerisError(msg)
    if is_service_export(path):
        table = read_service_export(path)
    else:
        fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
        try:
            table = read_qtable(path, fmt)
        except Exception as exc:  # astropy raises several types for malformed tables
            msg = f"ephemeris file {str(path)!r} is not a readable {fmt} table: {exc}"
            raise EphemerisError(msg) from exc
        if layout_of(table, str(path)) == "client":
            table = from_client(table, str(path))
    for alias, fmt_t in (("jd", "jd"), ("mjd", "mjd")):
        if "time" not in table.colnames and alias in table.colnames:
            table["time"] = Time(np.asarray(table[alias], dtype=float), format=fmt_t, scale="utc")
    missing = [c for c in ("time", *EPHEMERIS_COLUMNS) if c not in table.colnames]
    if missing:
        msg = (f"ephemeris file {str(path)!r} lacks the column(s) {', '.join(missing)} (found "
               f"{', '.join(table.colnames) or 'none'}); expected {EXPECTED_LAYOUTS}")
        raise EphemerisError(msg)
    try:
        col = table["time"]
        if isinstance(col, Time):
            times = col
        elif np.issubdtype(np.asarray(col).dtype, np.number):
            values = np.asarray(col, dtype=float)
            times = Time(values, format="jd" if np.all(values > 2_400_000) else "mjd", scale="utc")
        else:
            times = Time(list(col), scale="utc")
    except ValueError as exc:
        msg = f"ephemeris file {str(path)!r}: column 'time' holds values that are not times ({exc})"
        raise EphemerisError(msg) from exc
    jd = np.asarray(times.utc.jd, dtype=float)
    if len(jd) < 2:
        msg = f"ephemeris file {str(path)!r} has {len(jd)} row(s); expected at least 2"
        raise EphemerisError(msg)
    if np.any(np.diff(jd) <= 0):
        i = int(np.argmax(np.diff(jd) <= 0))
        msg = (f"ephemeris file {str(path)!r}: column 'time' is not strictly increasing "
               f"(row {i + 2} at {times[i + 1].utc.isot} follows {times[i].utc.isot})")
        raise EphemerisError(msg)
    columns = {}
    for name, unit in {**EPHEMERIS_COLUMNS, **_OPTIONAL}.items():
        if name not in table.colnames:
            continue
        col = table[name]
        refuse_masked(col, name, str(path))
        if isinstance(col, u.Quantity):
            if not col.unit.is_equivalent(unit):
                msg = (f"ephemeris file {str(path)!r}: column {name!r} has unit {col.unit}, "
                       f"expected a unit convertible to {unit}")
                raise EphemerisError(msg)
            q = col.to(unit)
        else:
            q = np.asarray(col, dtype=float) * unit
        if not np.all(np.isfinite(q.value)):
            msg = f"ephemeris file {str(path)!r}: column {name!r} has non-finite values"
            raise EphemerisError(msg)
        columns[name] = q
    for name in ("r_h", "delta"):
        if np.any(columns[name] <= 0):
            msg = f"ephemeris file {str(path)!r}: column {name!r} must be positive"
            raise EphemerisError(msg)
    return Ephemeris(source=str(path), jd=jd, columns=columns)


def interpolation_error(ephem: Ephemeris) -> dict[str, u.Quantity]:
    """Estimated worst interpolation error of the sky position and the range rate.

    Notes
    -----
    A cubic spline's error falls as h^4 with the spacing h. A spline through
    every other row, evaluated at the rows it skipped, errs by about 16 times
    the full table's error, so the full table's error is estimated as the
    largest of those misses divided by 16 (Richardson's argument).
    """
    if ephem.jd.size < 9:
        return {"position": np.nan * u.arcsec, "delta_dot": np.nan * u.km / u.s}
    x = ephem.jd - ephem.jd[0]
    even, odd = slice(0, None, 2), slice(1, -1, 2)

    def miss(values):
        return np.max(np.abs(CubicSpline(x[even], values[even])(x[odd]) - values[odd])) / 16.0

    ra = np.unwrap(ephem.columns["ra"].to_value(u.deg), period=360.0)
    dec = ephem.columns["dec"].to_value(u.deg)
    cosd = np.cos(np.deg2rad(np.max(np.abs(dec))))
    pos = np.hypot(miss(ra) * cosd, miss(dec)) * 3600
    return {"position": pos * u.arcsec, "delta_dot": miss(ephem.columns["delta_dot"].to_value(u.km / u.s)) * u.km / u.s}


def check_spacing(ephem: Ephemeris, position: u.Quantity = 0.05 * u.arcsec,
                  delta_dot: u.Quantity = 0.01 * u.km / u.s) -> dict[str, u.Quantity]:
    """Warn (:class:`SpacingWarning`) when the table is too coarse for the accuracy asked for."""
    import warnings

    err = interpolation_error(ephem)
    if err["position"] > position or err["delta_dot"] > delta_dot:
        warnings.warn(f"ephemeris {ephem.source}: its spacing gives interpolation errors of about "
                      f"{err['position'].to_value(u.arcsec):.3g} arcsec and "
                      f"{err['delta_dot'].to(u.m / u.s).value:.3g} m/s, more than the {position} and "
                      f"{delta_dot.to(u.m / u.s)} asked for; use a finer table", SpacingWarning, stacklevel=2)
    return err
