"""Tests of pipeline.geometry.observers: sites, the geocentre and spacecraft given by state-vector tables.

References outside the project: astropy's built-in solar-system ephemeris (get_body_barycentric_posvel),
EarthLocation.get_gcrs_posvel and SkyCoord.radial_velocity_correction, astropy's BarycentricMeanEcliptic frame
(the ecliptic axes of a state table), the closed-form parallax angle b / delta, and uniform circular motion
(closed form) for the interpolation.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import (BarycentricMeanEcliptic, CartesianDifferential, CartesianRepresentation,
                                 EarthLocation, ICRS, SkyCoord, get_body_barycentric_posvel)
from astropy.table import QTable
from astropy.time import Time

import pipeline  # noqa: F401  (configures astropy for offline use)
from pipeline.errors import EphemerisError
from pipeline.geometry.ephemeris import check_observer, read_ephemeris
from pipeline.geometry.frames import observer_frame_factor
from pipeline.geometry.observers import Observer, observer_from_config, read_states
from pipeline.geometry.orbit import OrbitalElements, ephemeris_from_elements, observe, write_ephemeris
from pipeline.offline import future_time_tolerated

C_KMS = 299792.458
ELEMENTS = OrbitalElements.from_mapping({"q_au": 1.12, "e": 2.7, "i_deg": 122.0, "node_deg": 211.0,   # invented
                                         "peri_deg": 37.0, "tp": "2031-02-20T06:00:00"})
SITE = EarthLocation.from_geodetic(-106.4 * u.deg, 28.9 * u.deg, 2400 * u.m)                      # invented site
with future_time_tolerated():
    GRID = Time("2031-03-08T00:00:00", scale="utc") + np.arange(0, 10.01, 0.5) * u.day
    T_MID = Time(["2031-03-10T04:00:00", "2031-03-12T17:20:00"], scale="utc")


def _earth_states(times, offset_km=(0.0, 0.0, 0.0)):
    with future_time_tolerated():
        pos, vel = get_body_barycentric_posvel("earth", times)
    return pos.xyz.to(u.km) + np.array(offset_km)[:, None] * u.km, vel.xyz.to(u.km / u.s)


def _write_states(path, times, pos, vel, meta):
    table = QTable({"time": times, "x": pos[0], "y": pos[1], "z": pos[2], "vx": vel[0], "vy": vel[1], "vz": vel[2]},
                   meta=meta)
    with future_time_tolerated():
        table.write(path, format="ascii.ecsv", overwrite=True)


def test_a_spacecraft_at_the_geocentre_sees_what_the_geocentre_sees(tmp_path):
    # reference: the Earth's barycentric states from astropy's built-in ephemeris, written as a spacecraft's table
    pos, vel = _earth_states(GRID)
    _write_states(tmp_path / "sc.ecsv", GRID, pos, vel, {"centre": "barycentre", "axes": "icrs"})
    craft = Observer(name="Probe", states=str(tmp_path / "sc.ecsv"))
    with future_time_tolerated():
        a, b = observe(ELEMENTS, T_MID, craft), observe(ELEMENTS, T_MID, None)
    sep = SkyCoord(a["ra"], a["dec"]).separation(SkyCoord(b["ra"], b["dec"])).to(u.arcsec)
    assert np.all(sep < 0.01 * u.arcsec)       # Hermite interpolation of 12 h rows: far below a beam
    assert np.allclose(a["delta_dot"].to_value(u.km / u.s), b["delta_dot"].to_value(u.km / u.s), atol=1e-4)
    assert a.meta["observer"] == {"spacecraft": "Probe"}


def test_parallax_of_a_distant_spacecraft_is_baseline_over_distance(tmp_path):
    # closed form: an observer displaced by b perpendicular to the line of sight sees the target shifted by b/delta
    with future_time_tolerated():
        geo = observe(ELEMENTS, T_MID[:1], None)
    n = SkyCoord(geo["ra"], geo["dec"]).cartesian.xyz.value[:, 0]
    perp = np.cross(n, [0.0, 0.0, 1.0])
    perp /= np.linalg.norm(perp)
    b = 1.5e6   # km, an orbit about the Sun-Earth L2 point (common practice, from memory)
    pos, vel = _earth_states(GRID, tuple(b * perp))
    _write_states(tmp_path / "l2.ecsv", GRID, pos, vel, {"centre": "barycentre", "axes": "icrs"})
    craft = Observer(name="Probe", states=str(tmp_path / "l2.ecsv"))
    with future_time_tolerated():
        sc = observe(ELEMENTS, T_MID[:1], craft)
    sep = SkyCoord(geo["ra"], geo["dec"]).separation(SkyCoord(sc["ra"], sc["dec"]))[0].to_value(u.rad)
    expected = b / geo["delta"][0].to_value(u.km)
    assert sep == pytest.approx(expected, rel=2e-3)
    assert np.degrees(sep) * 3600 > 1000   # ~1500 arcsec: why one campaign needs one observer per cube


def test_centres_and_axes_the_service_uses(tmp_path):
    # the same states relative to the Sun on ecliptic axes (astropy's BarycentricMeanEcliptic gives the rotation),
    # in the client layout (datetime_jd in TDB, au and au/d), must read back as the barycentric ICRS states
    pos, vel = _earth_states(GRID)
    with future_time_tolerated():
        sun_p, sun_v = get_body_barycentric_posvel("sun", GRID)
    rel = CartesianRepresentation(pos - sun_p.xyz.to(u.km),
                                  differentials=CartesianDifferential(vel - sun_v.xyz.to(u.km / u.s)))
    ecl = ICRS(rel).transform_to(BarycentricMeanEcliptic(equinox="J2000"))
    cart = ecl.cartesian
    dif = cart.differentials["s"]
    with future_time_tolerated():
        jd = GRID.tdb.jd
    table = QTable({"datetime_jd": jd, "x": cart.x.to_value(u.au), "y": cart.y.to_value(u.au),
                    "z": cart.z.to_value(u.au), "vx": dif.d_x.to_value(u.au / u.day),
                    "vy": dif.d_y.to_value(u.au / u.day), "vz": dif.d_z.to_value(u.au / u.day)})
    table.write(tmp_path / "vectors.csv", format="ascii.csv")
    craft = Observer(name="Probe", states=str(tmp_path / "vectors.csv"), centre="500@10", axes="ecliptic")
    got_p, got_v = craft.barycentric(T_MID)
    ref_p, ref_v = _earth_states(T_MID)
    # the ecliptic rotation differs from astropy's by the ~20 mas ICRS frame bias: 0.1e-6 rad of 1.5e8 km = 15 km
    assert np.max(np.abs(got_p - ref_p.value)) < 30.0
    assert np.max(np.abs(got_v - ref_v.value)) < 1e-3
    # without centre or axes the table is refused, naming the config key
    with pytest.raises(EphemerisError, match=r"does not state its centre .* 'observatory.centre'"):
        read_states(tmp_path / "vectors.csv", axes="ecliptic")
    # a config key contradicting the table's own metadata is refused, not silently preferred
    pos, vel = _earth_states(GRID)
    _write_states(tmp_path / "stated.ecsv", GRID, pos, vel, {"centre": "barycentre", "axes": "icrs"})
    with pytest.raises(EphemerisError, match=r"states centre 'barycentre' .* 'observatory.centre' says 'sun'"):
        read_states(tmp_path / "stated.ecsv", centre="sun")
    assert read_states(tmp_path / "stated.ecsv", centre="@0").centre == "barycentre"      # the same, in a code


def test_hermite_interpolation_of_uniform_circular_motion(tmp_path):
    # closed form: r = R (cos wt, sin wt, 0); daily rows of a 180-day orbit of radius 1.5e6 km
    R, period = 1.5e6, 180.0 * 86400.0
    w = 2 * np.pi / period
    with future_time_tolerated():
        rows = Time("2031-03-01T00:00:00", scale="tdb") + np.arange(0, 21) * u.day
        s = (rows - rows[0]).to_value(u.s)
        pos = R * np.array([np.cos(w * s), np.sin(w * s), 0 * s]) * u.km
        vel = R * w * np.array([-np.sin(w * s), np.cos(w * s), 0 * s]) * u.km / u.s
        table = QTable({"time": rows.tdb.isot, "x": pos[0], "y": pos[1], "z": pos[2],
                        "vx": vel[0], "vy": vel[1], "vz": vel[2]},
                       meta={"centre": "geocentre", "axes": "icrs", "time_scale": "tdb"})
        table.write(tmp_path / "circle.ecsv", format="ascii.ecsv")
        states = read_states(tmp_path / "circle.ecsv")
        t = rows[0] + (np.arange(20) + 0.37) * u.day
        p, v = states.at(t)
        s = (t - rows[0]).to_value(u.s)
    exact = R * np.array([np.cos(w * s), np.sin(w * s), 0 * s])
    # cubic Hermite error bound h^4/384 max|r''''| = h^4 w^4 R / 384 (textbook bound): ~0.00003 km here
    h = 86400.0
    assert np.max(np.abs(p - exact)) <= (h * w) ** 4 * R / 384 * 1.01
    assert np.max(np.abs(v - R * w * np.array([-np.sin(w * s), np.cos(w * s), 0 * s]))) < 1e-6
    with pytest.raises(EphemerisError, match="lies outside the observer's state table"):
        states.at(rows[-1] + 1 * u.day)


def test_spectral_frame_of_a_spacecraft_against_radial_velocity_correction(tmp_path):
    # a spacecraft that moves exactly as a site on Earth (states: Earth + the site's GCRS position and velocity,
    # astropy): its BARYCENT factor is astropy's barycentric correction for that site
    # (SkyCoord.radial_velocity_correction), to 10 m/s
    grid = T_MID[0] + np.arange(-4, 5) * 10 * u.min
    pos, vel = _earth_states(grid)
    with future_time_tolerated():
        gp, gv = SITE.get_gcrs_posvel(grid)
    _write_states(tmp_path / "sc.ecsv", grid, pos + gp.xyz.to(u.km), vel + gv.xyz.to(u.km / u.s),
                  {"centre": "barycentre", "axes": "icrs"})
    craft = Observer(name="Probe", states=str(tmp_path / "sc.ecsv"))
    for ra, dec in ((10.0, 5.0), (250.0, 60.0)):
        d = observer_frame_factor("BARYCENT", T_MID[0], craft, ra * u.deg, dec * u.deg)
        with future_time_tolerated():
            corr = SkyCoord(ra * u.deg, dec * u.deg).radial_velocity_correction(
                "barycentric", obstime=T_MID[0], location=SITE)
        assert abs(C_KMS * (1 - d) - corr.to_value(u.km / u.s)) < 0.010
    assert observer_frame_factor("TOPOCENT", T_MID[0], craft, 10 * u.deg, 5 * u.deg) == 1.0


def test_tables_seen_from_a_spacecraft_state_so_and_a_contradiction_is_refused(tmp_path):
    pos, vel = _earth_states(GRID, (1.5e6, 0.0, 0.0))
    _write_states(tmp_path / "sc.ecsv", GRID, pos, vel, {"centre": "barycentre", "axes": "icrs"})
    craft = observer_from_config({"name": "Probe", "states": str(tmp_path / "sc.ecsv")})
    assert craft.kind == "spacecraft"
    with future_time_tolerated():
        write_ephemeris(ephemeris_from_elements(ELEMENTS, GRID[0], GRID[-1], 1 * u.h, craft), tmp_path / "e.ecsv")
        write_ephemeris(ephemeris_from_elements(ELEMENTS, GRID[0], GRID[-1], 1 * u.h), tmp_path / "g.ecsv")
        own, geo = read_ephemeris(tmp_path / "e.ecsv"), read_ephemeris(tmp_path / "g.ecsv")
    check_observer(own, craft)
    with pytest.raises(EphemerisError, match=r"seen from the geocentre .* observed from the spacecraft 'Probe'"):
        check_observer(geo, craft)
    with pytest.raises(EphemerisError, match=r"seen from the spacecraft 'Probe' .* observed from the site"):
        check_observer(own, observer_from_config({"name": "A", "lon_deg": -106.4, "lat_deg": 28.9, "height_m": 2400}))
    assert observer_from_config("geocentre").kind == "geocentre"
    assert observer_from_config({"name": "A", "lon_deg": -106.4, "lat_deg": 28.9, "height_m": 2400}).kind == "site"
