"""Tests of pipeline.geometry.ephemeris: round trip against direct two-body geometry (pipeline.geometry.orbit.observe)
and closed-form tables."""

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import EarthLocation
from astropy.table import QTable
from astropy.tests.helper import assert_quantity_allclose
from astropy.time import Time
from numpy.testing import assert_allclose

from pipeline.geometry.ephemeris import EPHEMERIS_COLUMNS, read_ephemeris
from pipeline.errors import EphemerisError
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import OrbitalElements, ephemeris_from_elements, observe, write_ephemeris

START = "2031-05-01T00:00:00"
STOP = "2031-05-03T00:00:00"


def _test_orbit() -> OrbitalElements:
    # a hyperbolic test orbit (e = 2.5) with perihelion a few days after the table
    with future_time_tolerated():
        return OrbitalElements(q=1.1 * u.au, e=2.5, inc=40 * u.deg, node=120 * u.deg, peri=60 * u.deg,
                               tp=Time("2031-05-10T00:00:00", scale="utc"))


@pytest.mark.parametrize("location", [None, EarthLocation.from_geodetic(-70 * u.deg, -24 * u.deg, 2600 * u.m)])
def test_interpolation_round_trip_against_direct_observe(tmp_path, location):
    elements = _test_orbit()
    path = tmp_path / "eph.ecsv"
    with future_time_tolerated():
        start, stop = Time(START, scale="utc"), Time(STOP, scale="utc")
        write_ephemeris(ephemeris_from_elements(elements, start, stop, 1 * u.h, location), path)
        eph = read_ephemeris(path)
        rng = np.random.default_rng(31)
        times = Time(start.jd + rng.uniform(0.05, 47.95, 25) / 24, format="jd", scale="utc")
        got = eph.at(times, what="test cube")
        ref = observe(elements, times, location)          # direct light-time two-body geometry
    dra = (got["ra"] - ref["ra"] + 180 * u.deg) % (360 * u.deg) - 180 * u.deg
    # the round trip of issue 3: better than 0.01 arcsec on the sky and 1 m/s in range rate
    assert np.max(np.abs(dra * np.cos(ref["dec"]))) < 0.01 * u.arcsec
    assert np.max(np.abs(got["dec"] - ref["dec"])) < 0.01 * u.arcsec
    assert np.max(np.abs(got["delta_dot"] - ref["delta_dot"])) < 1 * u.m / u.s
    # delta to 1 km (0.01 arcsec of a 1000-km aperture at these distances is far looser)
    assert np.max(np.abs(got["delta"] - ref["delta"])) < 1 * u.km
    assert_quantity_allclose(got["r_h"], ref["r_h"], rtol=1e-9)
    assert_quantity_allclose(got["phase"], ref["phase"], atol=1e-5 * u.deg)
    # at a grid time the table values come back exactly (spline through the knots)
    with future_time_tolerated():
        on_grid = eph.at(Time(eph.jd[5], format="jd", scale="utc"))
    assert_quantity_allclose(on_grid["delta"], eph.columns["delta"][5], rtol=1e-14)
    assert on_grid["delta"].isscalar


def _write(path, table):
    table.write(path, format="ascii.ecsv", overwrite=True)
    return path


def _table(n=8, ra0=10.0, dra=0.5, **changes):
    jd0 = 2460000.5
    t = QTable()
    t["time"] = Time(jd0 + np.arange(n) / 24, format="jd", scale="utc")
    t["ra"] = (ra0 + dra * np.arange(n)) % 360 * u.deg
    t["dec"] = (-5.0 + 0.1 * np.arange(n)) * u.deg
    t["r_h"] = (1.5 + 0.001 * np.arange(n)) * u.au
    t["delta"] = (0.8 + 0.002 * np.arange(n)) * u.au
    t["delta_dot"] = (20.0 + 0.0 * np.arange(n)) * u.km / u.s
    for k, v in changes.items():
        t[k] = v
    return t


def test_ra_wrap_across_zero(tmp_path):
    # RA runs linearly 358.25 -> 1.75 deg: 0.5 deg per hour through 0/360
    eph = read_ephemeris(_write(tmp_path / "wrap.ecsv", _table(n=8, ra0=358.25, dra=0.5)))
    jd0 = eph.jd[0]
    hours = np.array([0.5, 2.5, 3.5, 4.5, 6.9])
    got = eph.at(Time(jd0 + hours / 24, format="jd", scale="utc"))["ra"]
    # closed form of the linear track, folded into [0, 360)
    expected = (358.25 + 0.5 * hours) % 360
    # (to 1e-7 deg: a float64 Julian date resolves ~40 microseconds, i.e. 6e-9 deg of this track)
    diff = (got.to_value(u.deg) - expected + 180) % 360 - 180
    assert_allclose(diff, 0.0, atol=1e-7)
    assert_allclose(got.to_value(u.deg)[[0, 1, 3, 4]], expected[[0, 1, 3, 4]], atol=1e-7)
    assert np.all((got >= 0 * u.deg) & (got < 360 * u.deg))


def test_time_outside_the_table_names_what_and_span(tmp_path):
    eph = read_ephemeris(_write(tmp_path / "e.ecsv", _table()))
    lo, hi = eph.span
    late = Time(eph.jd[-1] + 0.5, format="jd", scale="utc")
    match = rf"cube c07: time {late.isot} lies outside the ephemeris .*e\.ecsv \(which spans {lo.isot} to {hi.isot}\)"
    with pytest.raises(EphemerisError, match=match):
        eph.at(Time([eph.jd[1], late.jd], format="jd", scale="utc"), what="cube c07")
    with pytest.raises(EphemerisError, match="lies outside"):
        eph.at(Time(eph.jd[0] - 1e-3, format="jd", scale="utc"))


def test_read_errors(tmp_path):
    with pytest.raises(EphemerisError, match=r"ephemeris file '.*nothere\.ecsv' does not exist"):
        read_ephemeris(tmp_path / "nothere.ecsv")
    t = _table()
    del t["delta_dot"]
    with pytest.raises(EphemerisError, match="lacks the column\\(s\\) delta_dot"):
        read_ephemeris(_write(tmp_path / "miss.ecsv", t))
    with pytest.raises(EphemerisError, match="column 'delta' has unit km / s, expected a unit convertible to AU"):
        read_ephemeris(_write(tmp_path / "unit.ecsv", _table(delta=np.full(8, 3.0) * u.km / u.s)))
    t = _table()
    t["time"] = Time(t["time"].jd[[0, 1, 3, 2, 4, 5, 6, 7]], format="jd", scale="utc")
    with pytest.raises(EphemerisError, match="column 'time' is not strictly increasing \\(row 4 at"):
        read_ephemeris(_write(tmp_path / "unsorted.ecsv", t))
    with pytest.raises(EphemerisError, match="column 'r_h' must be positive"):
        read_ephemeris(_write(tmp_path / "neg.ecsv", _table(r_h=np.full(8, -1.0) * u.au)))
    bad = tmp_path / "garbage.ecsv"
    bad.write_text("# %ECSV 1.0\n# ---\n# datatype: [oops\n")
    with pytest.raises(EphemerisError, match="is not a readable ascii.ecsv table"):
        read_ephemeris(bad)


def test_csv_plain_numbers_take_default_units(tmp_path):
    path = tmp_path / "plain.csv"
    rows = ["time,ra,dec,r_h,delta,delta_dot"]
    for k in range(5):
        rows.append(f"2024-01-0{k + 1}T00:00:00,{100 + k},{-10 - k},{1.2 + 0.1 * k},{0.5 + 0.1 * k},{5.0 * k}")
    path.write_text("\n".join(rows) + "\n")
    eph = read_ephemeris(path)
    for name, unit in EPHEMERIS_COLUMNS.items():
        assert eph.columns[name].unit == unit
    got = eph.at(Time("2024-01-02T12:00:00", scale="utc"))
    # cubic spline of values linear in time reproduces the line exactly (closed form)
    assert_quantity_allclose(got["ra"], 101.5 * u.deg, rtol=1e-12)
    assert_quantity_allclose(got["delta"], 0.65 * u.au, rtol=1e-12)
    assert_quantity_allclose(got["delta_dot"], 7.5 * u.km / u.s, rtol=1e-12)
    assert "phase" not in got


def test_units_are_converted(tmp_path):
    # delta in km and delta_dot in m/s are accepted and converted (astropy unit conversion)
    t = _table(delta=(np.full(8, 1.0) * u.au).to(u.km), delta_dot=np.full(8, 1500.0) * u.m / u.s)
    eph = read_ephemeris(_write(tmp_path / "km.ecsv", t))
    assert_quantity_allclose(eph.columns["delta"], 1.0 * u.au, rtol=1e-14)
    assert_quantity_allclose(eph.columns["delta_dot"], 1.5 * u.km / u.s, rtol=1e-14)
