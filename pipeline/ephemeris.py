"""Ephemeris tables: reading, checking and interpolating the target's geometry.

A table has one row per time with the columns ``time`` (UTC), ``ra``, ``dec``
[deg], ``r_h``, ``delta`` [au], ``delta_dot`` [km/s] and optionally ``phase``
[deg]. Columns without units get these defaults. A table is taken as seen from
the campaign's observatory (topocentric), or from the geocentre.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time
from scipy.interpolate import CubicSpline

from .errors import EphemerisError

__all__ = ["EPHEMERIS_COLUMNS", "Ephemeris", "read_ephemeris"]

#: Required columns and their default units.
EPHEMERIS_COLUMNS = {"ra": u.deg, "dec": u.deg, "r_h": u.au, "delta": u.au, "delta_dot": u.km / u.s}
_OPTIONAL = {"phase": u.deg}


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
            When a time lies outside the table; ``what`` names the thing asked
            for (e.g. the cube) in the message.
        """
        t = Time(times).utc
        jd = np.atleast_1d(t.jd)
        lo, hi = self.span
        if np.any(jd < self.jd[0]) or np.any(jd > self.jd[-1]):
            bad = Time(jd[(jd < self.jd[0]) | (jd > self.jd[-1])][0], format="jd", scale="utc")
            msg = (f"{what}: time {bad.isot} lies outside the ephemeris {self.source} "
                   f"(which spans {lo.isot} to {hi.isot})")
            raise EphemerisError(msg)
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


def read_ephemeris(path: str | Path) -> Ephemeris:
    """Read and check an ephemeris table (ECSV, or CSV with a header line).

    Raises
    ------
    EphemerisError
        The file is missing or unreadable, a column is missing or has a unit
        of the wrong kind, times are unparsable, not increasing or repeated.
    """
    path = Path(path)
    if not path.is_file():
        msg = f"ephemeris file {str(path)!r} does not exist"
        raise EphemerisError(msg)
    fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
    try:
        table = QTable.read(path, format=fmt)
    except Exception as exc:  # astropy raises several types for malformed tables
        msg = f"ephemeris file {str(path)!r} is not a readable {fmt} table: {exc}"
        raise EphemerisError(msg) from exc
    missing = [c for c in ("time", *EPHEMERIS_COLUMNS) if c not in table.colnames]
    if missing:
        msg = (f"ephemeris file {str(path)!r} lacks the column(s) {', '.join(missing)}; expected "
               f"time, {', '.join(EPHEMERIS_COLUMNS)} (phase optional)")
        raise EphemerisError(msg)
    try:
        col = table["time"]
        times = col if isinstance(col, Time) else Time(list(col), scale="utc")
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
