"""Ephemeris tables: reading, checking and interpolating the target's geometry.

A table has one row per time with the columns ``time`` (UTC), ``ra``, ``dec``
[deg], ``r_h``, ``delta`` [au], ``delta_dot`` [km/s] and optionally ``phase``
[deg]. Columns without units get these defaults. A table is taken as seen from
the cube's observer (a site, the geocentre or a spacecraft,
:mod:`pipeline.geometry.observers`); a table may state its observer in its
metadata, checked by :func:`check_observer`.

:func:`read_ephemeris` also reads, unchanged, a table written by a common
ephemeris-service client and the service's plain-text export (CSV option);
:mod:`pipeline.geometry._service_tables` maps their columns and time scales
onto these.  :func:`check_spacing` says how far the interpolation of a table
may err, for short tables too.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.coordinates import EarthLocation
from astropy.time import Time
from scipy.interpolate import CubicSpline

from pipeline.errors import EphemerisError, SpacingWarning
from pipeline.geometry.observers import Observer
from pipeline.geometry._service_tables import (EXPECTED_LAYOUTS, from_client, is_service_export, layout_of,
                                               read_qtable, read_service_export, refuse_masked)

__all__ = ["EPHEMERIS_COLUMNS", "Ephemeris", "read_ephemeris", "interpolation_error", "check_spacing", "GAP_FACTOR", "check_observer"]


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
    observer: Any = None                 # the table's stated observer (metadata 'observer'), None if unstated

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
    return Ephemeris(source=str(path), jd=jd, columns=columns, observer=table.meta.get("observer"))


def check_observer(ephem: Ephemeris, location: "Observer | EarthLocation | None",
                   tolerance: u.Quantity = 1 * u.km) -> None:
    """Refuse a table whose stated observer (its metadata ``observer``) is not the observer it is used for.

    ``observer`` is ``'geocentre'``, a mapping with ``lon_deg``, ``lat_deg``, ``height_m`` (a site, as
    :func:`pipeline.geometry.orbit.ephemeris_from_elements` writes it) or ``{spacecraft: NAME}``; a table that
    states none is taken as seen from the cube's observer, as the config reference says. ``location`` is the
    cube's observer (an :class:`~pipeline.geometry.observers.Observer`, an EarthLocation, or None for the
    geocentre). A geocentric table used for a site is off by the diurnal parallax (up to ~6 arcsec and
    0.4 km/s at 1.4 au), and one used for a spacecraft 1.5 million km out by ~1000 arcsec, so neither is ever
    accepted silently.

    Raises
    ------
    EphemerisError
        When the table's observer and the cube's differ (by more than ``tolerance`` between two sites).
    """
    stated = ephem.observer
    if stated is None:
        return
    observer = location if isinstance(location, Observer) else Observer(name="site", location=location)
    here = observer.describe()
    if isinstance(stated, str) and stated.strip().lower() in ("geocentre", "geocenter", "geocentric", "500"):
        if observer.kind == "geocentre":
            return
        msg = (f"ephemeris file {ephem.source!r} states it is seen from the geocentre (metadata 'observer') but the "
               f"cube is observed from {here}; expected a table seen from that observer (the cube's 'ephemeris' "
               "key), or the observatory 'geocentre'")
        raise EphemerisError(msg)
    if isinstance(stated, dict) and {"lon_deg", "lat_deg", "height_m"} <= set(stated):
        site = EarthLocation.from_geodetic(float(stated["lon_deg"]) * u.deg, float(stated["lat_deg"]) * u.deg,
                                           float(stated["height_m"]) * u.m)
        if observer.kind == "site":
            gap = np.linalg.norm((u.Quantity(site.geocentric) - u.Quantity(observer.location.geocentric)).to_value(u.km))
            if gap * u.km <= tolerance:
                return
        msg = (f"ephemeris file {ephem.source!r} states it is seen from the site at lon {stated['lon_deg']} deg, lat "
               f"{stated['lat_deg']} deg (metadata 'observer') but the cube is observed from {here}; expected a table "
               "seen from that observer (the cube's 'ephemeris' key)")
        raise EphemerisError(msg)
    if isinstance(stated, dict) and set(stated) == {"spacecraft"}:
        if observer.kind == "spacecraft" and str(stated["spacecraft"]).strip().lower() == observer.name.strip().lower():
            return
        msg = (f"ephemeris file {ephem.source!r} states it is seen from the spacecraft {stated['spacecraft']!r} "
               f"(metadata 'observer') but the cube is observed from {here}; expected a table seen from that "
               "observer (the cube's 'ephemeris' key) or the spacecraft's name in 'observatory.name'")
        raise EphemerisError(msg)
    msg = (f"ephemeris file {ephem.source!r}: metadata 'observer' = {stated!r} is not understood; expected "
           "'geocentre', a mapping of lon_deg, lat_deg, height_m, or {spacecraft: NAME}")
    raise EphemerisError(msg)


#: How the spacing estimate is made, by number of rows (for the warning's sentence).
_BASIS = {2: "from the rates at both rows", 3: "from the rows' second difference",
          4: "an upper estimate from the rows' third difference", 5: "from the rows' fourth differences",
          9: "from a spline through every other row"}


def _basis(n: int) -> str:
    return _BASIS[max(k for k in _BASIS if k <= n)]


def _interpolant(x: np.ndarray, values: np.ndarray, t: np.ndarray) -> np.ndarray:
    """What :meth:`Ephemeris.at` does on these rows: a cubic spline from 4 rows, else linear."""
    return CubicSpline(x, values)(t) if x.size >= 4 else np.interp(t, x, values)


def _dense(x: np.ndarray, per_step: int = 64) -> np.ndarray:
    """``per_step`` points in every step of ``x`` and its last point."""
    return np.concatenate([np.linspace(a, b, per_step, endpoint=False) for a, b in zip(x[:-1], x[1:])] + [x[-1:]])


def _divided(x: np.ndarray, values: np.ndarray, order: int) -> np.ndarray:
    """Divided differences f[x_k, ..., x_k+order] of every run of ``order + 1`` rows."""
    d = np.asarray(values, dtype=float)
    for k in range(1, order + 1):
        d = (d[1:] - d[:-1]) / (x[k:] - x[:-k])
    return d


def _leading_term(x: np.ndarray, values: np.ndarray) -> float:
    """Leading error term of the interpolant of 3 or 5-8 rows (see :func:`interpolation_error`)."""
    p = 2 if x.size < 4 else 4
    t, centre = _dense(x), 0.5 * (x[0] + x[-1])
    kernel = np.max(np.abs(_interpolant(x, (x - centre) ** p, t) - (t - centre) ** p))
    return float(np.max(np.abs(_divided(x, values, p))) * kernel)


def _quadratic_term(x: np.ndarray, values: np.ndarray) -> float:
    """Upper estimate for 4 rows: the cubic against the nearer quadratic through three adjacent rows."""
    t = _dense(x)
    products = [np.abs(np.prod(t[:, None] - x[None, j:j + 3], axis=1)) for j in (0, 1)]
    return float(abs(_divided(x, values, 3)[0]) * np.max(np.minimum(*products)))


def _two_row_errors(ephem: Ephemeris) -> tuple[float, float]:
    """Linear-interpolation errors [arcsec, km/s] of a two-row table (NaN where the rows cannot tell)."""
    h = float(ephem.jd[1] - ephem.jd[0]) * 86400.0                       # s
    cols = ephem.columns
    position = np.nan
    if "ra_rate" in cols and "dec_rate" in cols:
        # f'' ~ (f'(t1) - f'(t0)) / h, error h^2/8 |f''| on each sky axis (the rates are on the sky already)
        dra, ddec = (abs(float(np.diff(cols[k].to_value(u.arcsec / u.s))[0])) for k in ("ra_rate", "dec_rate"))
        position = h / 8.0 * float(np.hypot(dra, ddec))
    d0, d1 = cols["delta"].to_value(u.km)
    v0, v1 = cols["delta_dot"].to_value(u.km / u.s)
    third = 6.0 * (2.0 * (d0 - d1) + h * (v0 + v1)) / h ** 3             # delta''' = delta_dot'' of the Hermite cubic
    return position, h * h / 8.0 * abs(third)


def interpolation_error(ephem: Ephemeris) -> dict[str, u.Quantity]:
    """Estimated worst interpolation error of the sky position and the range rate.

    The estimate fits what :meth:`Ephemeris.at` does with the rows there are
    (linear interpolation below 4 rows, a not-a-knot cubic spline from 4 rows
    on) and uses only what the rows hold.

    Notes
    -----
    With ``h`` the step and ``f`` a column (RA, Dec, range rate):

    * 9 rows or more: a cubic spline's error falls as h^4.  A spline through
      every other row, evaluated at the rows it skipped, errs by about 16
      times the full table's error, so the full table's error is estimated as
      the largest of those misses divided by 16 (Richardson's argument).
    * 5 to 8 rows: the leading term.  An interpolant ``I`` exact for
      polynomials of degree below ``p`` errs on ``f`` by about
      ``f[x_k..x_k+p] * (I[q] - q)`` with ``q = (t - c)^p``, exactly so when
      ``f`` is a polynomial of degree ``p``.  Here ``p = 4`` for the spline,
      the largest fourth divided difference of the rows stands for
      ``f''''/4!`` and ``max |I[q] - q|`` is computed on the rows' own times,
      so the spline's larger error near the table's ends is included.
    * 4 rows: the fourth derivative is out of reach.  The estimate is the
      difference between the cubic and the nearer quadratic through three
      adjacent rows, ``|f[x_0..x_3] (t - x_j)(t - x_j+1)(t - x_j+2)|`` (the
      leading error of the quadratic): usually above the cubic's error (for
      a track varying as ``sin(omega t)`` by a median ``1.5 / (omega h)``
      over phases, measured), but, like the estimates below, low where the
      derivative it uses (here the third) changes sign inside the table.
    * 3 rows: the leading term with ``p = 2``, which for linear interpolation
      is the textbook ``h^2/8 |f''|`` with ``f''`` from the second divided
      difference (exact for a quadratic track).
    * 2 rows: ``h^2/8 |f''|`` with ``f''`` from the rates at both rows: the
      ``ra_rate`` and ``dec_rate`` columns for the position (without them the
      position error is NaN: two positions cannot tell a curvature), and for
      the range rate the cubic Hermite through ``delta`` and its derivative
      ``delta_dot`` at both rows, whose constant third derivative is
      ``delta_dot''``.

    The leading-term estimates assume the derivative they use varies little
    across the table; where it changes sign inside the table (e.g. an
    inflection of the track for 3 rows) they can be low by several times:
    a few rows cannot tell.  The position error combines RA (times the
    cosine of the largest |Dec|) and Dec in quadrature.

    References
    ----------
    .. [1] de Boor, C. 1978, *A Practical Guide to Splines* (Springer):
       the error of polynomial and cubic-spline interpolation and the
       not-a-knot end condition (from memory).
    .. [2] Press, W. H. et al. 2007, *Numerical Recipes*, 3rd ed.: cubic
       splines (section 3.3) and Richardson extrapolation (from memory).
    """
    n = ephem.jd.size
    if n == 2:
        pos, ddot = _two_row_errors(ephem)
        return {"position": pos * u.arcsec, "delta_dot": ddot * u.km / u.s}
    x = ephem.jd - ephem.jd[0]
    if n >= 9:
        even, odd = slice(0, None, 2), slice(1, -1, 2)

        def miss(values):
            return np.max(np.abs(CubicSpline(x[even], values[even])(x[odd]) - values[odd])) / 16.0
    else:
        def miss(values):
            return _quadratic_term(x, values) if n == 4 else _leading_term(x, values)

    ra = np.unwrap(ephem.columns["ra"].to_value(u.deg), period=360.0)
    dec = ephem.columns["dec"].to_value(u.deg)
    cosd = np.cos(np.deg2rad(np.max(np.abs(dec))))
    pos = np.hypot(miss(ra) * cosd, miss(dec)) * 3600
    return {"position": pos * u.arcsec, "delta_dot": miss(ephem.columns["delta_dot"].to_value(u.km / u.s)) * u.km / u.s}


def _duration(seconds: float) -> str:
    seconds = round(seconds, 3)     # float Julian dates resolve ~40 microseconds
    for unit, size, limit in (("s", 1.0, 60.0), ("min", 60.0, 3600.0), ("h", 3600.0, 172800.0)):
        if seconds < limit:
            return f"{seconds / size:.3g} {unit}"
    return f"{seconds / 86400.0:.3g} d"


def check_spacing(ephem: Ephemeris, position: u.Quantity = 0.05 * u.arcsec,
                  delta_dot: u.Quantity = 0.01 * u.km / u.s) -> dict[str, u.Quantity]:
    """Warn (:class:`SpacingWarning`) when the table is too coarse for the accuracy asked for.

    A table of 2 or 3 rows is interpolated linearly and always warned about,
    with the error :func:`interpolation_error` gives it; a longer one when
    that error exceeds ``position`` or ``delta_dot``.  Returns the estimate.
    """
    import warnings

    err = interpolation_error(ephem)
    n = ephem.jd.size
    steps = np.diff(ephem.jd) * 86400.0
    lo, hi = float(np.min(steps)), float(np.max(steps))
    step = f"a step of {_duration(lo)}" if hi <= 1.01 * lo else f"steps of {_duration(lo)} to {_duration(hi)}"
    pos = err["position"].to_value(u.arcsec)
    pos_text = (f"about {pos:.3g} arcsec on the sky" if np.isfinite(pos)
                else "an amount two rows cannot tell on the sky (no ra_rate and dec_rate columns)")
    errors = f"{pos_text} and about {err['delta_dot'].to_value(u.m / u.s):.3g} m/s in range rate ({_basis(n)})"
    asked = f"the {position.to_value(u.arcsec):g} arcsec and {delta_dot.to_value(u.m / u.s):g} m/s asked for"
    if n < 4:
        warnings.warn(f"ephemeris {ephem.source}: its {n} rows at {step} are interpolated linearly, which may err "
                      f"by {errors} against {asked}; use a finer table of at least 4 rows",
                      SpacingWarning, stacklevel=2)
    elif err["position"] > position or err["delta_dot"] > delta_dot:
        warnings.warn(f"ephemeris {ephem.source}: its {n} rows at {step} give interpolation errors of {errors}, "
                      f"more than {asked}; use a finer table", SpacingWarning, stacklevel=2)
    return err
