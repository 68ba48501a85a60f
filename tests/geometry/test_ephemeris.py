"""Tests of pipeline.geometry.ephemeris: round trip against direct two-body geometry (pipeline.geometry.orbit.observe),
closed-form tables, and the spacing check of short tables against closed-form tracks and textbook error formulas
(the other layouts it reads: tests/geometry/test_service_tables.py)."""

import re
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import EarthLocation
from astropy.table import QTable
from astropy.tests.helper import assert_quantity_allclose
from astropy.time import Time
from numpy.testing import assert_allclose
from scipy.interpolate import CubicSpline

from pipeline.geometry.ephemeris import EPHEMERIS_COLUMNS, check_spacing, interpolation_error, read_ephemeris
from pipeline.errors import EphemerisError, SpacingWarning
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


# --- spacing of short tables -------------------------------------------------------------------------------------
# Invented tracks with closed forms: the interpolation's true error is measured against them on a dense grid, the
# warning's stated error must lie within a small factor of it, and the textbook error formulas are checked where
# they are exact.

SPACING_START = Time("2024-03-07T00:00:00", scale="utc")
DEC = 30.0                                        # deg, constant: the on-sky RA error is cos(30 deg) times the RA error
COSD = np.cos(np.deg2rad(DEC))


def _track_table(path, hours, ra, delta_dot, delta_km=None, rates=None):
    t = QTable()
    t["time"] = SPACING_START + np.asarray(hours) * u.h
    t["ra"] = ra * u.deg
    t["dec"] = np.full(len(hours), DEC) * u.deg
    t["r_h"] = np.full(len(hours), 1.3) * u.au
    t["delta"] = (delta_km * u.km).to(u.au) if delta_km is not None else np.full(len(hours), 0.7) * u.au
    t["delta_dot"] = delta_dot * u.km / u.s
    if rates is not None:
        t["ra_rate"], t["dec_rate"] = rates[0] * u.arcsec / u.h, rates[1] * u.arcsec / u.h
    t.write(path, format="ascii.ecsv")
    return read_ephemeris(path)


def _true_errors(eph, ra_of, delta_dot_of, per_step=401):
    """Largest on-sky [arcsec] and range-rate [m/s] error of eph.at against the closed-form track (hours).

    An odd number of points per step puts one at every mid-step, where linear interpolation errs most."""
    x = (eph.jd - eph.jd[0]) * 24
    grid = np.unique(np.concatenate([np.linspace(a, b, per_step) for a, b in zip(x[:-1], x[1:])]))
    got = eph.at(Time(eph.jd[0] + grid / 24, format="jd", scale="utc"))
    hours = (Time(eph.jd[0] + grid / 24, format="jd", scale="utc").jd - eph.jd[0]) * 24   # the times 'at' saw
    sky = np.max(np.abs(got["ra"].to_value(u.deg) - ra_of(hours))) * COSD * 3600
    rate = np.max(np.abs(got["delta_dot"].to_value(u.km / u.s) - delta_dot_of(hours))) * 1000
    return sky, rate


def _stated(record):
    """The file, rows, step and the two errors a SpacingWarning states."""
    assert len(record) == 1
    text = str(record[0].message)
    m = re.search(r"^ephemeris (\S+): its (\d+) rows at (?:a step of|steps of) (.+?) (?:are|give) .*? (?:about (\S+) "
                  r"arcsec on the sky|an amount two rows cannot tell on the sky \(no ra_rate and dec_rate columns\)) "
                  r"and about (\S+) m/s in range rate \((.+?)\),? (?:against|more than) the 0\.05 arcsec and 10 m/s "
                  r"asked for; use a finer table", text)
    assert m is not None, text
    sky = float(m.group(4)) if m.group(4) is not None else np.nan
    return {"file": m.group(1), "rows": int(m.group(2)), "step": m.group(3), "sky": sky,
            "rate": float(m.group(5)), "basis": m.group(6), "text": text}


def test_three_rows_are_linear_with_the_textbook_error(tmp_path):
    # quadratic tracks: RA = 150 + 0.5 t + 0.002 t^2 deg, range rate = 5 + 0.01 t + 0.0005 t^2 km/s (t in h)
    def ra(t):
        return 150 + 0.5 * t + 0.002 * t ** 2

    def vr(t):
        return 5 + 0.01 * t + 0.0005 * t ** 2

    hours = np.array([0.0, 2.0, 4.0])
    eph = _track_table(tmp_path / "three.ecsv", hours, ra(hours), vr(hours))
    # textbook: linear interpolation errs by h^2/8 max|f''| at most, exactly so (at mid-step) for a quadratic
    h = 2.0
    sky_closed = h ** 2 / 8 * 0.004 * COSD * 3600                     # 6.235 arcsec
    rate_closed = h ** 2 / 8 * 0.001 * 1000                            # 0.5 m/s
    sky, rate = _true_errors(eph, ra, vr)
    assert sky == pytest.approx(sky_closed, rel=1e-6) and rate == pytest.approx(rate_closed, rel=1e-6)
    with pytest.warns(SpacingWarning) as record:
        err = check_spacing(eph)
    # exact for a quadratic track, up to the float Julian dates' 40-microsecond resolution (a few 1e-7 of the
    # curvature from the 2-h steps)
    assert err["position"].to_value(u.arcsec) == pytest.approx(sky_closed, rel=1e-6)
    assert err["delta_dot"].to_value(u.m / u.s) == pytest.approx(rate_closed, rel=1e-6)
    said = _stated(record)
    assert said["file"].endswith("three.ecsv") and said["rows"] == 3 and said["step"] == "2 h"
    assert "interpolated linearly" in said["text"] and said["basis"] == "from the rows' second difference"
    # exact for a quadratic track, to the 3 digits printed
    assert said["sky"] == pytest.approx(sky_closed, rel=5e-3) and said["rate"] == pytest.approx(rate_closed, rel=5e-3)


def test_two_rows_take_the_curvature_from_the_rates(tmp_path):
    # RA as above with its on-sky rate cos(dec) dRA/dt in arcsec/h; the range delta(tau) a cubic in tau [s]
    # whose derivative is the range rate: delta_dot = 5 + 1e-5 tau + 1e-9 tau^2 km/s (delta_dot'' = 2e-9 km/s^3)
    def ra(t):
        return 150 + 0.5 * t + 0.002 * t ** 2

    def vr(t):
        tau = t * 3600
        return 5 + 1e-5 * tau + 1e-9 * tau ** 2

    def delta_km(t):
        tau = t * 3600
        return 1.1e8 + 5 * tau + 0.5e-5 * tau ** 2 + 1e-9 / 3 * tau ** 3

    hours = np.array([0.0, 2.0])
    ra_rate = (0.5 + 0.004 * hours) * 3600 * COSD
    eph = _track_table(tmp_path / "two.ecsv", hours, ra(hours), vr(hours), delta_km(hours), (ra_rate, [0.0, 0.0]))
    # textbook h^2/8 |f''|, exact for these quadratic RA and range-rate tracks
    sky_closed = 2.0 ** 2 / 8 * 0.004 * COSD * 3600                    # 6.235 arcsec
    rate_closed = 7200.0 ** 2 / 8 * 2e-9 * 1000                        # 12.96 m/s
    sky, rate = _true_errors(eph, ra, vr)
    assert sky == pytest.approx(sky_closed, rel=1e-6) and rate == pytest.approx(rate_closed, rel=1e-6)
    with pytest.warns(SpacingWarning) as record:
        err = check_spacing(eph)
    assert err["position"].to_value(u.arcsec) == pytest.approx(sky_closed, rel=1e-6)
    # the Hermite third derivative is a small difference of large terms (2 (delta0 - delta1) + h (v0 + v1)): the
    # float Julian dates' 40-microsecond resolution in h enters at a few 1e-6
    assert err["delta_dot"].to_value(u.m / u.s) == pytest.approx(rate_closed, rel=1e-5)
    said = _stated(record)
    assert said["rows"] == 2 and said["basis"] == "from the rates at both rows"
    assert said["sky"] == pytest.approx(sky_closed, rel=5e-3) and said["rate"] == pytest.approx(rate_closed, rel=5e-3)
    # without the rate columns two positions cannot tell a curvature: the warning says so (range rate still given)
    eph = _track_table(tmp_path / "two_bare.ecsv", hours, ra(hours), vr(hours), delta_km(hours))
    with pytest.warns(SpacingWarning) as record:
        err = check_spacing(eph)
    said = _stated(record)
    assert np.isnan(said["sky"]) and np.isnan(err["position"])
    assert said["rate"] == pytest.approx(rate_closed, rel=5e-3)


def _sine(amplitude, omega, phase, offset):
    def f(t):
        return offset + amplitude * np.sin(omega * t + phase)
    return f


# a track curving on a 7-h time scale: RA = 150 + 0.2 sin(0.15 t + 0.8) deg, range rate 5 + 0.3 sin(...) km/s; with
# 2-h steps omega h = 0.3, and the phase keeps every derivative of the sine away from zero across the tables
RA_SINE, RATE_SINE = _sine(0.2, 0.15, 0.8, 150.0), _sine(0.3, 0.15, 0.8, 5.0)


def _sine_table(tmp_path, hours):
    return _track_table(tmp_path / f"sine{len(hours)}.ecsv", hours, RA_SINE(hours), RATE_SINE(hours))


@pytest.mark.parametrize("hours", [np.arange(5) * 2.0, np.arange(6) * 2.0, np.arange(7) * 2.0, np.arange(8) * 2.0,
                                   np.array([0.0, 1.0, 2.0, 4.0, 6.0, 8.0])],
                         ids=["5 rows", "6 rows", "7 rows", "8 rows", "6 uneven rows"])
def test_five_to_eight_rows_spline_error(tmp_path, hours):
    eph = _sine_table(tmp_path, hours)
    sky, rate = _true_errors(eph, RA_SINE, RATE_SINE)
    with pytest.warns(SpacingWarning) as record:          # ~0.13 arcsec, more than the 0.05 arcsec asked for
        check_spacing(eph)
    said = _stated(record)
    assert said["rows"] == len(hours) and said["basis"] == "from the rows' fourth differences"
    assert said["step"] == ("2 h" if np.ptp(np.diff(hours)) == 0 else "1 h to 2 h")
    assert 0.5 < said["sky"] / sky < 2 and 0.5 < said["rate"] / rate < 2
    # the textbook h^4/384 max|f''''| (from memory) is the error scale of the complete (clamped) spline and of cubic
    # Hermite interpolation; scipy's not-a-knot spline errs ~10 times more in the end steps (measured here), which
    # is why the estimate is built on the spline's own error kernel, not on that formula
    h = np.max(np.diff(hours))
    fourth = 0.2 * 0.15 ** 4 * COSD * 3600                            # max|RA''''| on the sky, arcsec/h^4
    assert sky > 5 * h ** 4 / 384 * fourth


def test_the_spline_estimate_is_exact_for_a_quartic_track(tmp_path):
    # RA = 150 + 1e-4 (t - 3)^4 deg: the estimate is the leading error term, exact for a polynomial of degree 4
    def ra(t):
        return 150 + 1e-4 * (t - 3) ** 4

    def vr(t):
        return 5 + 1e-5 * t ** 4

    hours = np.arange(6) * 1.5
    eph = _track_table(tmp_path / "quartic.ecsv", hours, ra(hours), vr(hours))
    sky, rate = _true_errors(eph, ra, vr, per_step=2000)
    err = interpolation_error(eph)
    assert err["position"].to_value(u.arcsec) == pytest.approx(sky, rel=1e-3)
    assert err["delta_dot"].to_value(u.m / u.s) == pytest.approx(rate, rel=1e-3)


def test_four_rows_upper_estimate(tmp_path):
    hours = np.arange(4) * 2.0
    eph = _sine_table(tmp_path, hours)
    sky, rate = _true_errors(eph, RA_SINE, RATE_SINE)
    # the spline through 4 rows is the cubic through them; Lagrange's remainder bounds its error by
    # max|f''''| / 4! max|(t - x0)...(t - x3)| = h^4/24 max|f''''| (closed form; the product peaks at h^4)
    fourth = 0.2 * 0.15 ** 4 * COSD * 3600
    assert sky <= 2.0 ** 4 / 24 * fourth
    with pytest.warns(SpacingWarning) as record:
        check_spacing(eph)
    said = _stated(record)
    assert said["rows"] == 4 and said["basis"] == "an upper estimate from the rows' third difference"
    # above the true error: over the sine's phases by a median of about 1.5 / (omega h) = 5 (measured), for this
    # phase by 1.7
    assert 1.0 <= said["sky"] / sky < 3 and 1.0 <= said["rate"] / rate < 3


def test_long_tables_keep_the_every_other_row_estimate(tmp_path):
    hours = np.arange(11) * 2.0
    eph = _sine_table(tmp_path, hours)
    sky, _ = _true_errors(eph, RA_SINE, RATE_SINE)
    with pytest.warns(SpacingWarning) as record:
        check_spacing(eph)
    said = _stated(record)
    assert said["rows"] == 11 and said["basis"] == "from a spline through every other row"
    assert 0.5 < said["sky"] / sky < 2
    # Richardson's estimate as before: the miss of a spline through every other row at the rows it skipped, / 16
    x = eph.jd - eph.jd[0]
    ra = eph.columns["ra"].to_value(u.deg)
    miss = np.max(np.abs(CubicSpline(x[::2], ra[::2])(x[1:-1:2]) - ra[1:-1:2])) / 16 * COSD * 3600
    assert interpolation_error(eph)["position"].to_value(u.arcsec) == pytest.approx(miss, rel=1e-12)
    # 10-min steps: no warning (true error of order (omega h)^4 smaller)
    fine = _sine_table(tmp_path, np.arange(40) / 6)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SpacingWarning)
        err = check_spacing(fine)
    assert err["position"] < 0.05 * u.arcsec


# ---- a table's stated observer


def test_a_table_states_its_observer_and_a_contradiction_is_refused(tmp_path):
    from pipeline.geometry.ephemeris import check_observer

    el = OrbitalElements.from_mapping({"q_au": 1.12, "e": 2.7, "i_deg": 122.0, "node_deg": 211.0,
                                       "peri_deg": 37.0, "tp": "2031-02-20T06:00:00"})
    site = EarthLocation.from_geodetic(-67.75 * u.deg, -23.0 * u.deg, 5000 * u.m)     # an invented site
    start, stop = Time("2031-03-10T00:00:00", scale="utc"), Time("2031-03-10T06:00:00", scale="utc")
    with future_time_tolerated():
        write_ephemeris(ephemeris_from_elements(el, start, stop, 30 * u.min), tmp_path / "geo.ecsv")
        write_ephemeris(ephemeris_from_elements(el, start, stop, 30 * u.min, site), tmp_path / "topo.ecsv")
        geo, topo = read_ephemeris(tmp_path / "geo.ecsv"), read_ephemeris(tmp_path / "topo.ecsv")
        # why it matters: the diurnal parallax between the two tables, at most R_earth / delta (closed form)
        g, t = geo.at(Time(["2031-03-10T03:00:00"], scale="utc")), topo.at(Time(["2031-03-10T03:00:00"], scale="utc"))
    from astropy.coordinates import SkyCoord
    sep = SkyCoord(g["ra"], g["dec"]).separation(SkyCoord(t["ra"], t["dec"]))[0].to(u.arcsec)
    bound = (6378.137 * u.km / g["delta"][0].to(u.km)).decompose().value * u.rad
    assert 0.1 * u.arcsec < sep <= bound.to(u.arcsec) * 1.001
    assert geo.observer == "geocentre" and topo.observer["lat_deg"] == pytest.approx(-23.0)
    check_observer(geo, None)
    check_observer(topo, site)
    with pytest.raises(EphemerisError, match=r"geo\.ecsv' states it is seen from the geocentre .* but the cube is "
                                             r"observed from the site"):
        check_observer(geo, site)
    with pytest.raises(EphemerisError, match=r"states it is seen from the site .* observed from the geocentre"):
        check_observer(topo, None)
    elsewhere = EarthLocation.from_geodetic(-67.85 * u.deg, -23.0 * u.deg, 5000 * u.m)   # ~10 km west
    with pytest.raises(EphemerisError, match="expected a table seen from that observer"):
        check_observer(topo, elsewhere)
