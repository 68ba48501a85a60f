"""Ephemeris tables as an ephemeris service hands them out (private helper of :mod:`pipeline.geometry.ephemeris`).

Two layouts besides the project's own are read unchanged:

* a table from a common ephemeris-service client (the layout of astroquery's
  JPL Horizons ``ephemerides()``), saved by astropy as ECSV (with units) or
  CSV (without: the service's documented units apply);
* the service's plain-text export made with its CSV option: the rows between
  the ``$$SOE`` and ``$$EOE`` lines under a header line of column names.

Both are turned into the project's layout (a ``time`` column of UTC times and
``ra``, ``dec``, ``r_h``, ``delta``, ``delta_dot`` and the optional ``phase``,
``ra_rate``, ``dec_rate``); :func:`pipeline.geometry.ephemeris.read_ephemeris`
then checks them like any table.

Column mapping (client name / export header -> project column, unit):

=====================  =========================  ============  ===========
client (astroquery)    export header (CSV)         project       unit
=====================  =========================  ============  ===========
datetime_jd            Date_________JDUT           time          JD, UT
datetime_str           Date__(UT)__HR:MN[:SS...]   time          UT
RA, DEC                R.A._(ICRF), DEC_(ICRF)     ra, dec       deg (or
                                                                 sexagesimal)
r                      r                           r_h           au
delta                  delta                       delta         au
delta_rate             deldot                      delta_dot     km/s
alpha                  S-T-O                       phase         deg
RA_rate, DEC_rate      dRA*cosD, d(DEC)/dt         ra_rate,      arcsec/h
                                                   dec_rate
=====================  =========================  ============  ===========

Time scales: the service gives observer tables in UT unless told otherwise,
which it documents as UTC for dates after 1962 (UT1 before); the client's
``datetime_jd`` is that UT Julian date (the client maps only the ``JDUT``
column to it), so both are read as UTC.  An export made in TT or TDB (the
scale is named in the date column's header, e.g. ``Date_________JDTT``) is
read in that scale and converted to UTC.  ``r_rate`` / ``rdot`` (heliocentric
range rate) has no project column and is not read.  The RA and Dec rates are
those of the apparent (of-date) direction, as the service documents; they
only enter the spacing estimate of two-row tables.

References
----------
.. [1] astroquery documentation, "JPL Horizons Queries
   (astroquery.jplhorizons)": column names and units of ``ephemerides()``.
.. [2] JPL Horizons System manual, "Definition of Observer Table Quantities"
   and the batch-interface notes on CSV_FORMAT, CAL_FORMAT and ANG_FORMAT.
"""

from __future__ import annotations

import re
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.coordinates import Angle
from astropy.table import Column, QTable, Table
from astropy.time import Time

from pipeline.errors import EphemerisError
from pipeline.offline import future_time_tolerated

__all__ = ["CLIENT_COLUMNS", "EXPECTED_LAYOUTS", "read_qtable", "layout_of", "from_client", "is_service_export",
           "read_service_export", "refuse_masked"]

#: Client column -> (project column, the unit the service documents for it).
CLIENT_COLUMNS = {
    "RA": ("ra", u.deg), "DEC": ("dec", u.deg), "r": ("r_h", u.au), "delta": ("delta", u.au),
    "delta_rate": ("delta_dot", u.km / u.s), "alpha": ("phase", u.deg),
    "RA_rate": ("ra_rate", u.arcsec / u.h), "DEC_rate": ("dec_rate", u.arcsec / u.h),
}
_CLIENT_REQUIRED = ("RA", "DEC", "r", "delta", "delta_rate")
# names that only one layout uses ('delta' is in both)
_PROJECT_MARKERS = ("time", "jd", "mjd", "ra", "dec", "r_h", "delta_dot", "phase", "ra_rate", "dec_rate")
_CLIENT_MARKERS = ("datetime_jd", "datetime_str", "RA", "DEC", "r", "delta_rate", "alpha", "RA_rate", "DEC_rate")

#: What a table must hold, for messages.
EXPECTED_LAYOUTS = (
    "time (or jd / mjd), ra, dec, r_h, delta, delta_dot (phase, ra_rate, dec_rate optional) in the project's layout, "
    "or datetime_jd (or datetime_str), RA, DEC, r, delta, delta_rate (alpha, RA_rate, DEC_rate optional) in an "
    "ephemeris-service client's"
)

_MONTHS = {m: i + 1 for i, m in enumerate(("jan", "feb", "mar", "apr", "may", "jun",
                                           "jul", "aug", "sep", "oct", "nov", "dec"))}
_CALENDAR = re.compile(r"^(\d{4})-([A-Za-z]{3})-(\d{2})(?:[ T]+(\d{2}):(\d{2})(?::(\d{2}(?:\.\d*)?))?)?$")
_SCALES = {"UT": "utc", "TT": "tt", "TDB": "tdb"}


def read_qtable(path: Path, fmt: str) -> QTable:
    """``QTable.read`` of an ECSV or CSV table, also when the client's unit-less marker ``---`` is written as a unit.

    The client gives name, date-string and flag columns the unit ``---`` ("no unit"); saved as ECSV, a string
    column with a unit cannot become a QTable column.  Those units are dropped first; any other table reads as
    ``QTable.read`` would read it (a Table read, then converted).
    """
    table = Table.read(path, format=fmt)
    for col in table.itercols():
        if isinstance(col, Column) and col.unit is not None and (
                col.unit.to_string() == "---" or col.dtype.kind not in "fiuc"):
            col.unit = None
    return QTable(table, copy=False)


def _names(colnames) -> str:
    return ", ".join(colnames) if colnames else "none"


def layout_of(table: QTable, source: str) -> str:
    """``'project'`` or ``'client'``, from the column names; a table with names of both is refused."""
    project = [c for c in _PROJECT_MARKERS if c in table.colnames]
    client = [c for c in _CLIENT_MARKERS if c in table.colnames]
    if project and client:
        msg = (f"ephemeris file {source!r} mixes two layouts (found the columns {_names(table.colnames)}, among them "
               f"{_names(project)} of the project's and {_names(client)} of a client's); expected "
               f"{EXPECTED_LAYOUTS}, not both")
        raise EphemerisError(msg)
    return "client" if client else "project"


def _parse_calendar(values, scale: str, source: str, column: str) -> Time:
    """Times written as the service writes them: ``2031-May-01 00:00[:00[.000]]``."""
    iso = []
    for k, text in enumerate(values):
        m = _CALENDAR.match(str(text).strip())
        if m is None or m.group(2).lower() not in _MONTHS:
            msg = (f"ephemeris file {source!r}: column {column!r} row {k + 1} holds {str(text)!r}; expected a date "
                   "such as 2031-May-01 00:00 or 2031-May-01 00:00:00.000 (the service's calendar format, A.D.)")
            raise EphemerisError(msg)
        year, mon, day, hh, mm, ss = m.groups()
        iso.append(f"{year}-{_MONTHS[mon.lower()]:02d}-{day} {hh or '00'}:{mm or '00'}:{ss or '00'}")
    return Time(iso, format="iso", scale=scale)


def _to_utc(times: Time) -> Time:
    if times.scale == "utc":
        return times
    with future_time_tolerated():
        return times.utc


def from_client(table: QTable, source: str) -> QTable:
    """A client-layout table (astroquery Horizons ``ephemerides()`` names) in the project's layout.

    Columns without units get the service's documented units (deg, au, km/s,
    arcsec/h).  The time is ``datetime_jd`` (JD, UT), replaced by
    ``datetime_str`` where every row of that agrees with it to 1e-9 d (then
    the calendar is the exact time and the Julian date its rounding), or
    ``datetime_str`` alone.
    """
    missing = [c for c in _CLIENT_REQUIRED if c not in table.colnames]
    if not any(c in table.colnames for c in ("datetime_jd", "datetime_str")):
        missing.insert(0, "datetime_jd (or datetime_str)")
    if missing:
        msg = (f"ephemeris file {source!r} lacks the column(s) {', '.join(missing)} of the ephemeris-service client "
               f"layout (found {_names(table.colnames)}); expected {EXPECTED_LAYOUTS}")
        raise EphemerisError(msg)
    out = QTable()
    if "datetime_jd" in table.colnames:
        col = table["datetime_jd"]
        refuse_masked(col, "datetime_jd", source)
        if isinstance(col, u.Quantity):
            if not col.unit.is_equivalent(u.d):
                msg = (f"ephemeris file {source!r}: column 'datetime_jd' has unit {col.unit}, expected d "
                       "(a Julian date in days, UT)")
                raise EphemerisError(msg)
            jd = col.to_value(u.d)
        else:
            try:
                jd = np.asarray(col, dtype=float)
            except ValueError as exc:
                msg = (f"ephemeris file {source!r}: column 'datetime_jd' holds values that are not numbers ({exc}); "
                       "expected Julian dates (UT)")
                raise EphemerisError(msg) from exc
        out["time"] = Time(jd, format="jd", scale="utc")
        if "datetime_str" in table.colnames and not np.any(getattr(table["datetime_str"], "mask", False)):
            try:
                calendar = _parse_calendar(table["datetime_str"], "utc", source, "datetime_str")
            except EphemerisError:     # the Julian date alone serves
                calendar = None
            # a float JD of 9 printed decimals is good to 1e-9 d (86 microseconds), print and float rounding together
            out["time"] = _prefer_calendar(calendar, out["time"], 1e-9)
    else:
        refuse_masked(table["datetime_str"], "datetime_str", source)
        out["time"] = _parse_calendar(table["datetime_str"], "utc", source, "datetime_str")
    for name, (project, unit) in CLIENT_COLUMNS.items():
        if name not in table.colnames:
            continue
        col = table[name]
        if name not in _CLIENT_REQUIRED and np.any(getattr(col, "mask", False)):
            continue       # an optional quantity the service could not give in every row ('n.a.') is left out
        refuse_masked(col, name, source)
        if isinstance(col, u.Quantity):
            out[project] = u.Quantity(getattr(col, "unmasked", col))
            continue
        try:
            out[project] = np.asarray(getattr(col, "data", col), dtype=float) * unit
        except ValueError as exc:
            msg = (f"ephemeris file {source!r}: column {name!r} holds values that are not numbers ({exc}); expected "
                   f"numbers in {unit}, the service's unit")
            raise EphemerisError(msg) from exc
    return out


def refuse_masked(col, name: str, source: str) -> None:
    """Refuse a column with missing (masked) values, e.g. empty CSV cells."""
    mask = getattr(col, "mask", None)
    if mask is not None and np.any(mask):
        msg = (f"ephemeris file {source!r}: column {name!r} has {int(np.sum(mask))} missing value(s); "
               "expected a value in every row")
        raise EphemerisError(msg)


# ----------------------------------------------------------------------------------------------------------------
# the service's plain-text export (CSV option)

#: The export's quantities the project reads: project column -> (header name, what it is, unit).  Quantity
#: numbers of the service's observer table: 19 and 20 as the client's documentation uses them; 1, 3 and 24 from
#: the service's manual (from memory).
_EXPORT = {
    "r_h": ("r", "heliocentric range 'r' (service quantity 19)", u.au),
    "delta": ("delta", "observer range 'delta' (service quantity 20)", u.au),
    "delta_dot": ("deldot", "observer range rate 'deldot' (service quantity 20)", u.km / u.s),
    "phase": ("S-T-O", "phase angle 'S-T-O' (service quantity 24)", u.deg),
    "ra_rate": ("dRA*cosD", "RA rate 'dRA*cosD' (service quantity 3)", u.arcsec / u.h),
    "dec_rate": ("d(DEC)/dt", "Dec rate 'd(DEC)/dt' (service quantity 3)", u.arcsec / u.h),
}
_EXPORT_OPTIONAL = ("phase", "ra_rate", "dec_rate")
_RA_HEADERS = ("R.A.(ICRF)", "R.A.(ICRF/J2000.0)")      # compared with underscores removed
_DEC_HEADERS = ("DEC(ICRF)", "DEC(ICRF/J2000.0)")
_DATE_CAL = re.compile(r"^Date_*\((\w+)\)_*HR:MN")
_DATE_JD = re.compile(r"^Date_*JD(\w+)$")
_MAX_AU = 1.0e4   # no target of this pipeline is further; a larger 'au' value is a range in km


def is_service_export(path: Path) -> bool:
    """Whether ``path`` is the service's plain-text export: suffix ``.txt`` or a ``$$SOE`` line in it."""
    if path.suffix.lower() == ".txt":
        return True
    with open(path, "rb") as fh:
        return any(line.strip() == b"$$SOE" for line in fh)


def read_service_export(path: Path) -> QTable:
    """The rows of the service's plain-text export (CSV option) as a table in the project's layout.

    RA and Dec are read in decimal degrees, or sexagesimal (RA in hours,
    minutes, seconds; Dec in degrees, arcminutes, arcseconds) when a value
    holds spaces.  The time is the calendar column where it agrees with the
    Julian-date column to the latter's printed precision (it is then exact),
    else the Julian date; either alone serves.  ``n.a.`` in an optional
    quantity drops that quantity; lines noting a table cut-off are skipped.
    Ranges must be in au (the service's default): a value above 1e4 "au" is
    refused as a range in km.
    """
    source = str(path)
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        msg = f"ephemeris file {source!r} is not a readable text file ({exc}); expected the service's plain-text export"
        raise EphemerisError(msg) from exc
    marks = [k for k, line in enumerate(lines) if line.strip() == "$$SOE"]
    if not marks:
        msg = (f"ephemeris file {source!r} has no $$SOE line; expected the ephemeris service's plain-text export, "
               "whose rows lie between the $$SOE and $$EOE lines")
        raise EphemerisError(msg)
    start = marks[0]
    ends = [k for k in range(start + 1, len(lines)) if lines[k].strip() == "$$EOE"]
    if not ends:
        msg = (f"ephemeris file {source!r} has a $$SOE line but no $$EOE line after it; expected the export's rows "
               "to end with $$EOE (is the file cut short?)")
        raise EphemerisError(msg)
    header = next((line for line in reversed(lines[:start]) if line.strip() and set(line.strip()) != {"*"}), "")
    if "," not in header:
        msg = (f"ephemeris file {source!r}: the line of column names above $$SOE ({header.strip()[:60]!r}) is not "
               "comma-separated; expected the export made with the service's CSV option")
        raise EphemerisError(msg)
    names = [n.strip() for n in header.split(",")]
    # notes of a table cut-off (elevation, airmass, daylight) are printed between the rows; the client skips them too
    rows = [line.split(",") for line in lines[start + 1:ends[0]] if line.strip() and "Cut-off" not in line]
    if not rows:
        msg = f"ephemeris file {source!r} has no rows between $$SOE and $$EOE; expected at least 2"
        raise EphemerisError(msg)
    for k, row in enumerate(rows):
        if len(row) != len(names):
            msg = (f"ephemeris file {source!r}: row {k + 1} after $$SOE has {len(row)} comma-separated fields; "
                   f"expected {len(names)} as in the line of column names above $$SOE")
            raise EphemerisError(msg)

    def column(name):
        j = names.index(name)
        return [row[j].strip() for row in rows]

    out = QTable()
    out["time"] = _export_times(names, column, source)
    squeezed = [n.replace("_", "") for n in names]
    ra_name = next((names[j] for j, n in enumerate(squeezed) if n in _RA_HEADERS), None)
    dec_name = next((names[j] for j, n in enumerate(squeezed) if n in _DEC_HEADERS), None)
    if ra_name is None or dec_name is None:
        other = [n for n in names if n.replace("_", "").startswith(("R.A.", "DEC"))]
        found = f"only {', '.join(other)}" if other else "no RA or Dec column"
        msg = (f"ephemeris file {source!r} lacks the astrometric RA and Dec 'R.A._(ICRF), DEC_(ICRF)' (service "
               f"quantity 1; found {found}); expected the astrometric ICRF position, not an apparent or FK4 one")
        raise EphemerisError(msg)
    out["ra"] = _angles(column(ra_name), u.hourangle, ra_name, source)
    out["dec"] = _angles(column(dec_name), u.deg, dec_name, source)
    for project, (name, what, unit) in _EXPORT.items():
        optional = project in _EXPORT_OPTIONAL
        if name not in names:
            if optional:
                continue
            msg = (f"ephemeris file {source!r} lacks the {what} among the columns above $$SOE; expected r, delta and "
                   "deldot (quantities 19 and 20) beside the date and R.A._(ICRF), DEC_(ICRF)")
            raise EphemerisError(msg)
        values = column(name)
        if optional and "n.a." in values:
            continue
        out[project] = _numbers(values, name, what, source) * unit
    for project in ("r_h", "delta"):
        big = float(np.max(out[project].value))
        if big > _MAX_AU:
            msg = (f"ephemeris file {source!r}: column {_EXPORT[project][0]!r} reaches {big:.6g}, which as au is "
                   "farther than any target of a coma; expected au, the service's default range unit, not km")
            raise EphemerisError(msg)
    return out


def _numbers(values, name: str, what: str, source: str) -> np.ndarray:
    out = np.empty(len(values))
    for k, text in enumerate(values):
        try:
            out[k] = float(text)
        except ValueError:
            hint = " (not available)" if text == "n.a." else ""
            msg = (f"ephemeris file {source!r}: column {name!r} row {k + 1} after $$SOE holds {text!r}{hint}; "
                   f"expected a number, the {what}")
            raise EphemerisError(msg) from None
    return out


def _angles(values, sexagesimal_unit, name: str, source: str) -> u.Quantity:
    """Decimal degrees, or sexagesimal (hours for RA, degrees for Dec) where a value holds spaces."""
    if not any(" " in v for v in values):
        return _numbers(values, name, "angle in decimal degrees", source) * u.deg
    try:
        return Angle(values, unit=sexagesimal_unit).to(u.deg)
    except ValueError as exc:
        msg = (f"ephemeris file {source!r}: column {name!r} holds a value that is not a sexagesimal angle ({exc}); "
               "expected e.g. '03 17 42.15' for RA and '-08 21 07.4' for Dec")
        raise EphemerisError(msg) from exc


def _export_times(names, column, source: str) -> Time:
    """The rows' times from the calendar and/or Julian-date column, as UTC."""
    cal = next(((n, _DATE_CAL.match(n).group(1)) for n in names if _DATE_CAL.match(n)), None)
    jdc = next(((n, _DATE_JD.match(n).group(1)) for n in names if _DATE_JD.match(n)), None)
    for found in (cal, jdc):
        if found is not None and found[1] not in _SCALES:
            msg = (f"ephemeris file {source!r}: the date column {found[0]!r} is in the time scale {found[1]!r}; "
                   "expected UT (the service's default), TT or TDB")
            raise EphemerisError(msg)
    if cal is None and jdc is None:
        msg = (f"ephemeris file {source!r} lacks a date column (found {_names([n for n in names if n])}); expected "
               "Date__(UT)__HR:MN (or :SS, :SC.fff) and/or Date_________JDUT above $$SOE")
        raise EphemerisError(msg)
    t_cal = _parse_calendar(column(cal[0]), _SCALES[cal[1]], source, cal[0]) if cal else None
    if jdc is None:
        return _to_utc(t_cal)
    texts = column(jdc[0])
    whole, frac, decimals = [], [], 0
    for k, text in enumerate(texts):
        m = re.fullmatch(r"(\d+)(?:\.(\d*))?", text)
        if m is None:
            msg = (f"ephemeris file {source!r}: column {jdc[0]!r} row {k + 1} after $$SOE holds {text!r}; expected "
                   "a Julian date")
            raise EphemerisError(msg)
        whole.append(float(m.group(1)))
        frac.append(float("0." + (m.group(2) or "0")))
        decimals = max(decimals, len(m.group(2) or ""))
    t_jd = Time(np.array(whole), np.array(frac), format="jd", scale=_SCALES[jdc[1]])
    return _to_utc(_prefer_calendar(t_cal, t_jd, 0.5 * 10.0 ** -decimals + 1e-11))


def _prefer_calendar(calendar: Time | None, julian: Time, tolerance: float) -> Time:
    """The calendar times where all agree with the Julian dates within ``tolerance`` days (they are then the
    exact ones: a Julian date prints a rounded fraction of a day), else the Julian dates (the calendar's
    minutes or seconds may be truncated)."""
    if calendar is None or calendar.scale != julian.scale:
        return julian
    gap = np.abs((calendar.jd1 - julian.jd1) + (calendar.jd2 - julian.jd2))      # days; same scale, no conversion
    return calendar if np.all(gap <= tolerance) else julian
