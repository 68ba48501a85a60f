"""Tests of the ephemeris-service layouts read by pipeline.geometry.ephemeris.read_ephemeris
(pipeline/geometry/_service_tables.py).

The tables are invented (a fictional target, invented numbers).  Their layouts follow two public formats:
the table of astroquery's JPL Horizons ``ephemerides()`` (column names and units as astroquery's documentation
and its column map list them: datetime_str, datetime_jd [d, UT], RA, DEC [deg], RA_rate, DEC_rate [arcsec/h],
r [au], r_rate [km/s], delta [au], delta_rate [km/s], alpha [deg]) and the JPL Horizons plain-text export with
its CSV option (a header line of column names above $$SOE, rows up to $$EOE, a trailing comma on every line,
two unnamed flag columns after the date; quantity names from the Horizons manual's observer-table definitions).
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Column, QTable, Table
from astropy.time import Time
from numpy.testing import assert_allclose

from pipeline.errors import EphemerisError
from pipeline.geometry.ephemeris import read_ephemeris

N = 13
HOURS = np.arange(N, dtype=float)
START = Time("2024-03-07T00:00:00", scale="utc")   # invented epoch, inside the bundled leap-second table


def _rows():
    """One invented table, rounded to what the export prints (9 decimals in deg with extra precision, ...)."""
    t = START + HOURS * u.h
    return {
        "time": t,
        "ra": np.round(211.25 + 0.42 * HOURS + 0.0031 * HOURS ** 2, 9),
        "dec": np.round(-12.5 + 0.083 * HOURS - 0.0007 * HOURS ** 2, 9),
        "ra_rate": np.round((0.42 + 0.0062 * HOURS) * 3600 * np.cos(np.deg2rad(-12.5)), 5),
        "dec_rate": np.round((0.083 - 0.0014 * HOURS) * 3600, 5),
        "r_h": np.round(1.7342 - 0.00031 * HOURS, 14),
        "r_dot": np.round(-7.75 + 0.001 * HOURS, 7),
        "delta": np.round(0.61234 + 0.000412 * HOURS + 2.1e-7 * HOURS ** 2, 14),
        "delta_dot": np.round(17.123456789 + 0.00835 * HOURS, 9),
        "phase": np.round(48.31 - 0.012 * HOURS, 4),
    }


def _project(path, rows):
    t = QTable()
    t["time"] = rows["time"]
    for name, unit in (("ra", u.deg), ("dec", u.deg), ("r_h", u.au), ("delta", u.au), ("delta_dot", u.km / u.s),
                       ("phase", u.deg), ("ra_rate", u.arcsec / u.h), ("dec_rate", u.arcsec / u.h)):
        t[name] = rows[name] * unit
    t.write(path, format="ascii.ecsv")
    return path


def _client(rows) -> Table:
    # the client's layout: a masked Table (not QTable) with units, '---' ("no unit") as the unit of its name, date
    # string and flag columns, and masked entries where the service printed n.a.
    t = Table(masked=True)
    t["targetname"] = Column(["Fictional 2031-X"] * N, unit="---")
    t["datetime_str"] = Column([d.strftime("%Y-%b-%d %H:%M") for d in rows["time"].datetime], unit="---")
    t["solar_presence"] = Column(["*" if k % 5 == 0 else "" for k in range(N)], unit="---")
    # the service prints the Julian date with 9 decimals; the client reads that into a float
    t["datetime_jd"] = np.array([float(f"{j:.9f}") for j in rows["time"].jd]) * u.d
    t["V"] = np.ma.masked_all(N)
    t["RA"] = rows["ra"] * u.deg
    t["DEC"] = rows["dec"] * u.deg
    t["RA_rate"] = rows["ra_rate"] * u.arcsec / u.h
    t["DEC_rate"] = rows["dec_rate"] * u.arcsec / u.h
    t["r"] = rows["r_h"] * u.au
    t["r_rate"] = rows["r_dot"] * u.km / u.s
    t["delta"] = rows["delta"] * u.au
    t["delta_rate"] = rows["delta_dot"] * u.km / u.s
    t["alpha"] = rows["phase"] * u.deg
    return t


_STARS = "*" * 79
_HEADER = (" Date__(UT)__HR:MN, Date_________JDUT, , , R.A._(ICRF), DEC_(ICRF), dRA*cosD, d(DEC)/dt,"
           "                r,       rdot,             delta,     deldot,     S-O-T,/r,     S-T-O,")


def _export_text(rows, sexagesimal=False, header=_HEADER, scale="UT") -> str:
    """The service's plain-text export (CSV option) of ``rows``: preamble, header, $$SOE ... $$EOE, notes."""
    header = header.replace("(UT)", f"({scale})").replace("JDUT", f"JD{scale}")
    lines = [_STARS, "Ephemeris / invented example of the export layout", _STARS,
             "Target body name: Fictional 2031-X", "Center-site name: GEOCENTRIC",
             f"RA format       : {'HMS' if sexagesimal else 'DEG'}",
             "Table format    : Comma Separated Values (spreadsheet)", _STARS, header, _STARS, "$$SOE"]
    for k in range(N):
        t = rows["time"][k]
        if sexagesimal:
            ra = rows["ra_hms"][k]
            dec = rows["dec_dms"][k]
        else:
            ra, dec = f"{rows['ra'][k]:.9f}", f"{rows['dec'][k]:.9f}"
        flag = "*" if k % 5 == 0 else " "
        lines.append(f" {t.strftime('%Y-%b-%d %H:%M')}, {t.jd:.9f}, {flag}, , {ra:>15}, {dec:>14}, "
                     f"{rows['ra_rate'][k]:.5f}, {rows['dec_rate'][k]:.5f}, {rows['r_h'][k]:.14f}, "
                     f"{rows['r_dot'][k]:.7f}, {rows['delta'][k]:.14f}, {rows['delta_dot'][k]:.9f}, "
                     f"{95.5 + k:.4f},/T, {rows['phase'][k]:.4f},")
    lines += ["$$EOE", _STARS, "Column meaning:", " (notes of the export follow here)", ""]
    return "\n".join(lines)


def test_the_same_rows_give_the_same_geometry_in_every_layout(tmp_path):
    rows = _rows()
    paths = {"project": _project(tmp_path / "project.ecsv", rows)}
    _client(rows).write(tmp_path / "client.ecsv", format="ascii.ecsv")
    paths["client ECSV"] = tmp_path / "client.ecsv"
    _client(rows).write(tmp_path / "client.csv", format="ascii.csv")          # units dropped: documented ones apply
    paths["client CSV"] = tmp_path / "client.csv"
    (tmp_path / "export.txt").write_text(_export_text(rows))
    paths["export"] = tmp_path / "export.txt"
    (tmp_path / "export_saved_as.csv").write_text(_export_text(rows))          # found by its $$SOE line
    paths["export as .csv"] = tmp_path / "export_saved_as.csv"
    ephems = {name: read_ephemeris(p) for name, p in paths.items()}
    ref = ephems["project"]
    times = START + np.array([0.0, 0.37, 2.5, 5.91, 8.02, 11.99, 12.0]) * u.h
    want = ref.at(times, what="test")
    # the reference itself holds the rows written (a spline passes through its knots)
    assert_allclose(want["ra"][[0, -1]].to_value(u.deg), rows["ra"][[0, -1]], atol=1e-9)
    for name, eph in ephems.items():
        assert set(eph.columns) == {"ra", "dec", "r_h", "delta", "delta_dot", "phase", "ra_rate", "dec_rate"}, name
        assert_allclose(eph.jd, ref.jd, rtol=0, atol=0, err_msg=name)        # the calendar times, to the bit
        got = eph.at(times, what="test")
        assert_allclose(got["ra"].to_value(u.deg), want["ra"].to_value(u.deg), rtol=0, atol=1e-9, err_msg=name)
        assert_allclose(got["dec"].to_value(u.deg), want["dec"].to_value(u.deg), rtol=0, atol=1e-9, err_msg=name)
        for col in ("r_h", "delta"):
            assert_allclose(got[col].to_value(u.au), want[col].to_value(u.au), rtol=0, atol=1e-12, err_msg=name)
        assert_allclose(got["delta_dot"].to_value(u.km / u.s), want["delta_dot"].to_value(u.km / u.s),
                        rtol=0, atol=1e-9, err_msg=name)
        assert_allclose(got["phase"].to_value(u.deg), want["phase"].to_value(u.deg), rtol=0, atol=1e-9, err_msg=name)


def test_client_julian_date_is_utc_and_used_when_the_calendar_is_truncated(tmp_path):
    # times off the whole minute: the calendar string (HR:MN) is truncated, so the Julian date (UT) is used
    rows = _rows()
    t = _client(rows)
    jd = np.asarray(t["datetime_jd"]) + 17.3 / 86400            # 17.3 s past each minute
    t["datetime_jd"] = jd * u.d
    t.write(tmp_path / "c.ecsv", format="ascii.ecsv")
    eph = read_ephemeris(tmp_path / "c.ecsv")
    assert_allclose(eph.jd, jd, rtol=0, atol=1e-9)
    # read as UTC: the span's first time equals the UTC time of that Julian date (astropy)
    assert abs((eph.span[0] - Time(jd[0], format="jd", scale="utc")).to_value(u.s)) < 1e-3
    assert eph.span[0].scale == "utc"
    # a CSV with only the calendar column serves too (seconds kept)
    c = _client(rows)
    del c["datetime_jd"]
    c["datetime_str"] = [d.strftime("%Y-%b-%d %H:%M:%S.%f")[:-3] for d in (rows["time"] + 17.3 * u.s).datetime]
    c.write(tmp_path / "cal.csv", format="ascii.csv")
    eph = read_ephemeris(tmp_path / "cal.csv")
    # to 1e-4 s: the table keeps float Julian dates, which resolve about 40 microseconds at this epoch
    assert abs((eph.span[0] - (START + 17.3 * u.s)).to_value(u.s)) < 1e-4


def test_export_in_tt_is_converted_to_utc(tmp_path):
    rows = _rows()
    (tmp_path / "tt.txt").write_text(_export_text(rows, scale="TT"))
    eph = read_ephemeris(tmp_path / "tt.txt")
    # rows stamped in TT are 69.184 s later in TT than in UTC: TT - TAI = 32.184 s and TAI - UTC = 37 s
    # since 2017 (IERS Bulletin C, from memory)
    first = Time(eph.jd[0], format="jd", scale="utc")
    assert abs((START - first).to_value(u.s) - 69.184) < 1e-3


def test_export_sexagesimal_positions(tmp_path):
    rows = _rows()
    # hand conversions (closed form): 14 05 00.0000 h = 211.25 deg; 03 17 42.1500 h = 49.425625 deg;
    # -00 30 00.000 deg = -0.5 deg (the sign of a zero-degree declination must survive)
    ra_hms = ["14 05 00.0000", "03 17 42.1500"] + ["14 05 00.0000"] * (N - 2)
    dec_dms = ["-00 30 00.000", "+41 08 19.700"] + ["-00 30 00.000"] * (N - 2)
    rows["ra_hms"], rows["dec_dms"] = ra_hms, dec_dms
    (tmp_path / "hms.txt").write_text(_export_text(rows, sexagesimal=True))
    eph = read_ephemeris(tmp_path / "hms.txt")
    assert_allclose(eph.columns["ra"][:2].to_value(u.deg), [211.25, 49.425625], atol=1e-10)
    assert_allclose(eph.columns["dec"][:2].to_value(u.deg), [-0.5, 41 + 8 / 60 + 19.7 / 3600], atol=1e-10)


def test_layout_errors(tmp_path):
    rows = _rows()
    # names of both layouts: refused, naming the columns of each
    t = _client(rows)
    t["ra"] = rows["ra"] * u.deg
    t.write(tmp_path / "mixed.ecsv", format="ascii.ecsv")
    with pytest.raises(EphemerisError, match=r"mixed\.ecsv' mixes two layouts \(found the columns targetname, .*among "
                                             r"them ra of the project's and datetime_jd, datetime_str, RA, DEC, r, "
                                             r"delta_rate, alpha, RA_rate, DEC_rate of a client's\); expected time "
                                             r"\(or jd / mjd\), ra, .* in the project's layout, or datetime_jd .*, "
                                             r"not both"):
        read_ephemeris(tmp_path / "mixed.ecsv")
    # a client table without the range rate
    t = _client(rows)
    del t["delta_rate"]
    t.write(tmp_path / "nodot.csv", format="ascii.csv")
    with pytest.raises(EphemerisError, match=r"nodot\.csv' lacks the column\(s\) delta_rate of the ephemeris-service "
                                             r"client layout \(found targetname, datetime_str, .*\); expected time "
                                             r"\(or jd / mjd\), .* in the project's layout, or datetime_jd \(or "
                                             r"datetime_str\), RA, DEC, r, delta, delta_rate \(alpha, RA_rate, DEC_rate "
                                             r"optional\) in an ephemeris-service client's"):
        read_ephemeris(tmp_path / "nodot.csv")
    # n.a. (masked) in the client's phase angle leaves the phase out; in its RA it is refused
    t = _client(rows)
    t["alpha"].mask[4] = True
    t.write(tmp_path / "no_alpha.ecsv", format="ascii.ecsv")
    eph = read_ephemeris(tmp_path / "no_alpha.ecsv")
    assert "phase" not in eph.columns and "ra" in eph.columns
    t["RA"].mask[[2, 7]] = True
    t.write(tmp_path / "no_ra.ecsv", format="ascii.ecsv")
    with pytest.raises(EphemerisError, match=r"no_ra\.ecsv': column 'RA' has 2 missing value\(s\); expected a value in "
                                             r"every row"):
        read_ephemeris(tmp_path / "no_ra.ecsv")
    # a project table without delta_dot names what it found and both layouts
    p = QTable({"time": rows["time"], "ra": rows["ra"] * u.deg, "dec": rows["dec"] * u.deg,
                "r_h": rows["r_h"] * u.au, "delta": rows["delta"] * u.au})
    p.write(tmp_path / "p.ecsv", format="ascii.ecsv")
    with pytest.raises(EphemerisError, match=r"lacks the column\(s\) delta_dot \(found time, ra, dec, r_h, delta\); "
                                             r"expected time \(or jd / mjd\), ra, dec, r_h, delta, delta_dot \(phase, "
                                             r"ra_rate, dec_rate optional\) in the project's layout, or datetime_jd"):
        read_ephemeris(tmp_path / "p.ecsv")
    # an empty cell of a project CSV is refused, not read as a number
    (tmp_path / "hole.csv").write_text("time,ra,dec,r_h,delta,delta_dot\n2024-01-01T00:00:00,1,2,1,1,5\n"
                                       "2024-01-01T01:00:00,1.1,2,1,,5\n2024-01-01T02:00:00,1.2,2,1,1,5\n")
    with pytest.raises(EphemerisError, match=r"hole\.csv': column 'delta' has 1 missing value\(s\)"):
        read_ephemeris(tmp_path / "hole.csv")


def _export_file(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_export_errors(tmp_path):
    rows = _rows()
    good = _export_text(rows)
    no_deldot = _export_text(rows, header=_HEADER.replace("deldot", "dd_x"))
    with pytest.raises(EphemerisError, match=r"lacks the observer range rate 'deldot' \(service quantity 20\) among "
                                             r"the columns above \$\$SOE"):
        read_ephemeris(_export_file(tmp_path, "a.txt", no_deldot))
    apparent = _export_text(rows, header=_HEADER.replace("R.A._(ICRF), DEC_(ICRF)", "R.A._(a-app), DEC_(a-app)"))
    with pytest.raises(EphemerisError, match=r"lacks the astrometric RA and Dec .* \(service quantity 1; found only "
                                             r"R\.A\._\(a-app\), DEC_\(a-app\)\)"):
        read_ephemeris(_export_file(tmp_path, "b.txt", apparent))
    with pytest.raises(EphemerisError, match=r"c\.txt' has no \$\$SOE line; expected the ephemeris service's "
                                             r"plain-text export"):
        read_ephemeris(_export_file(tmp_path, "c.txt", good.replace("$$SOE", "")))
    with pytest.raises(EphemerisError, match=r"has a \$\$SOE line but no \$\$EOE line after it"):
        read_ephemeris(_export_file(tmp_path, "d.txt", good.split("$$EOE")[0]))
    fixed = good.replace(_HEADER, " Date__(UT)__HR:MN     R.A._(ICRF)   DEC_(ICRF)   delta   deldot")
    with pytest.raises(EphemerisError, match=r"is not comma-separated; expected the export made with the service's "
                                             r"CSV option"):
        read_ephemeris(_export_file(tmp_path, "e.txt", fixed))
    lines = good.splitlines()
    k = lines.index("$$SOE") + 3
    fields = lines[k].split(",")
    fields[10] = " n.a."                                  # delta of the third row
    lines[k] = ",".join(fields)
    with pytest.raises(EphemerisError, match=r"column 'delta' row 3 after \$\$SOE holds 'n\.a\.' \(not available\); "
                                             r"expected a number, the observer range 'delta'"):
        read_ephemeris(_export_file(tmp_path, "f.txt", "\n".join(lines)))
    fields = lines[k].split(",")
    fields[10], fields[14] = f" {rows['delta'][2]:.14f}", " n.a."      # S-T-O unavailable: the phase is left out
    lines[k] = ",".join(fields)
    eph = read_ephemeris(_export_file(tmp_path, "g.txt", "\n".join(lines)))
    assert "phase" not in eph.columns and "delta" in eph.columns
    in_km = good.replace(f"{rows['delta'][0]:.14f}", f"{rows['delta'][0] * 149597870.7:.6f}")
    with pytest.raises(EphemerisError, match=r"column 'delta' reaches 9\.16\d*e\+07, which as au is farther than any "
                                             r"target of a coma; expected au"):
        read_ephemeris(_export_file(tmp_path, "h.txt", in_km))
    lines = good.splitlines()
    k = lines.index("$$SOE") + 2
    lines[k] = ",".join(lines[k].split(",")[:-2])          # row 2 cut short by two fields
    with pytest.raises(EphemerisError, match=r"row 2 after \$\$SOE has 14 comma-separated fields; expected 16 as in "
                                             r"the line of column names above \$\$SOE"):
        read_ephemeris(_export_file(tmp_path, "i.txt", "\n".join(lines)))
    civil = good.replace("Date__(UT)__HR:MN", "Date__(ZONE)__HR:MN")
    with pytest.raises(EphemerisError, match=r"the date column 'Date__\(ZONE\)__HR:MN' is in the time scale 'ZONE'; "
                                             r"expected UT \(the service's default\), TT or TDB"):
        read_ephemeris(_export_file(tmp_path, "j.txt", civil))
