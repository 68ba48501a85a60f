"""Per-cube geometry: position modes, offsets, tracking, ephemeris spacing, JD/MJD tables, the ephemeris command."""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.table import QTable
from astropy.time import Time
from cubes import write_cube

from pipeline.io.cubes import read_cube_info
from pipeline.errors import CubeError, ConfigError, MotionWarning, SpacingWarning
from pipeline.geometry.ephemeris import check_spacing, interpolation_error, read_ephemeris
from pipeline.geometry.observing import cube_geometry
from pipeline.geometry.make_ephemeris import main as make_ephemeris
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import OrbitalElements, ephemeris_from_elements, observe, write_ephemeris

ELEMENTS = {"q_au": 1.12, "e": 2.7, "i_deg": 122.0, "node_deg": 211.0, "peri_deg": 37.0,
            "tp": "2031-02-20T06:00:00"}


def _table(tmp_path, ra, dec, name="eph.ecsv", ddot=10.0):
    times = Time("2024-02-29T00:00:00") + np.arange(0, 73, 3) * u.hour
    n = len(times)
    eph = QTable({"time": times, "ra": np.full(n, ra) * u.deg, "dec": np.full(n, dec) * u.deg,
                  "r_h": np.full(n, 1.5) * u.au, "delta": np.full(n, 1.0) * u.au,
                  "delta_dot": np.full(n, ddot) * u.km / u.s})
    write_ephemeris(eph, tmp_path / name)
    return read_ephemeris(tmp_path / name)


def test_phase_centre_and_offset(tmp_path):
    cube = read_cube_info(write_cube(tmp_path / "c.fits"))
    eph = _table(tmp_path, 150.0005, -20.0002)
    geo = cube_geometry(cube, "c", "e", ephemeris=eph, position="phase_centre")[0]
    # the phase centre is the reference pixel CRPIX (1-based) = 0-based CRPIX - 1 (FITS WCS paper I)
    assert geo["x_pix"] == pytest.approx(cube.header["CRPIX1"] - 1, abs=1e-6)
    assert geo["y_pix"] == pytest.approx(cube.header["CRPIX2"] - 1, abs=1e-6)
    off = cube_geometry(cube, "c", "e", ephemeris=eph, position="phase_centre", offset=(1.0, 0.5))[0]
    # 0.5 arcsec pixels: 1" east is 2 pixels towards -x (RA increases to the left), 0.5" north is +1 pixel in y
    assert off["x_pix"] - geo["x_pix"] == pytest.approx(-2.0, abs=1e-3)
    assert off["y_pix"] - geo["y_pix"] == pytest.approx(1.0, abs=1e-3)
    sep = SkyCoord(off["ra_target"], off["dec_target"]).separation(SkyCoord(150 * u.deg, -20 * u.deg))
    assert sep.to_value(u.arcsec) == pytest.approx(np.hypot(1.0, 0.5), rel=1e-4)


def test_geometry_needs_one_source_and_a_known_position(tmp_path):
    cube = read_cube_info(write_cube(tmp_path / "c.fits"))
    eph = _table(tmp_path, 150.0005, -20.0002)
    with pytest.raises(ConfigError, match=r"cube c \(.*c\.fits\): the target geometry needs exactly one of an "
                                          r"ephemeris table or orbital elements \(config key 'target'\), found neither"):
        cube_geometry(cube, "c", "e")
    with pytest.raises(ConfigError, match="found both"):
        cube_geometry(cube, "c", "e", ephemeris=eph, elements=OrbitalElements.from_mapping(ELEMENTS))
    with pytest.raises(ConfigError, match="cube c: config key 'position' = 'centre'; expected 'auto', 'ephemeris' "
                                          "or 'phase_centre'"):
        cube_geometry(cube, "c", "e", ephemeris=eph, position="centre")


def test_auto_uses_phase_centre_for_source_frame(tmp_path, caplog):
    cube = read_cube_info(write_cube(tmp_path / "c.fits", SPECSYS="SOURCE"))
    eph = _table(tmp_path, 150.0005, -20.0002)
    with caplog.at_level("INFO"):
        geo = cube_geometry(cube, "c", "e", ephemeris=eph)[0]
    assert geo["position"] == "phase_centre" and "automatic choice" in caplog.text
    geo = cube_geometry(read_cube_info(write_cube(tmp_path / "d.fits")), "d", "e", ephemeris=eph)[0]
    assert geo["position"] == "ephemeris"


def test_untracked_motion_warns(tmp_path):
    times = Time("2024-02-29T00:00:00") + np.arange(0, 73, 3) * u.hour
    ra = 150.0 + (np.arange(len(times)) * 3) * 10 / 3600  # 10 arcsec per hour
    eph = QTable({"time": times, "ra": ra * u.deg, "dec": np.full(len(times), -20.0) * u.deg,
                  "r_h": np.full(len(times), 1.5) * u.au, "delta": np.full(len(times), 1.0) * u.au,
                  "delta_dot": np.full(len(times), 5.0) * u.km / u.s})
    write_ephemeris(eph, tmp_path / "e.ecsv")
    ephem = read_ephemeris(tmp_path / "e.ecsv")
    t0 = Time("2024-03-01T10:00:00")  # DATE-OBS of the test cube, EXPTIME 1800 s
    ra_mid = 150.0 + (t0 + 900 * u.s - times[0]).to_value(u.h) * 10 / 3600
    cube = read_cube_info(write_cube(tmp_path / "c2.fits", CRVAL1=ra_mid))
    with pytest.warns(MotionWarning, match="moved"):
        geo = cube_geometry(cube, "c", "e", ephemeris=ephem, tracked=False)[0]
    # 30 min exposure at 10"/h along RA at Dec -20: 5 arcsec of arc times cos(dec) (small-angle geometry)
    assert geo["motion"].to_value(u.arcsec) == pytest.approx(5.0 * np.cos(np.deg2rad(20)), rel=1e-3)
    with warnings.catch_warnings():
        warnings.simplefilter("error", MotionWarning)
        cube_geometry(cube, "c", "e", ephemeris=ephem, tracked=True)


def test_a_start_only_cube_is_placed_with_the_configured_duration(tmp_path):
    # the same moving target as above: DATE-OBS alone is refused; with duration_s = 1800 s the mid-time is
    # DATE-OBS + 900 s and the target position follows (10 arcsec/h along RA: ra_mid as computed above)
    times = Time("2024-03-01T00:00:00") + np.arange(0, 25, 0.5) * u.h
    ra = 150.0 + (np.arange(len(times)) * 3) * 10 / 3600 / 6
    eph = QTable({"time": times, "ra": ra * u.deg, "dec": np.full(len(times), -20.0) * u.deg,
                  "r_h": np.full(len(times), 1.5) * u.au, "delta": np.full(len(times), 1.0) * u.au,
                  "delta_dot": np.full(len(times), 5.0) * u.km / u.s})
    write_ephemeris(eph, tmp_path / "e.ecsv")
    ephem = read_ephemeris(tmp_path / "e.ecsv")
    cube = read_cube_info(write_cube(tmp_path / "s.fits", EXPTIME=None, CRVAL1=150.0 + 10.25 * 10 / 3600))
    with pytest.raises(CubeError, match=r"s\.fits: the header gives only DATE-OBS"):
        cube_geometry(cube, "c", "e", ephemeris=ephem)
    geo = cube_geometry(cube, "c", "e", ephemeris=ephem, duration=1800 * u.s)[0]
    assert abs((geo["time_mid"] - Time("2024-03-01T10:15:00", scale="utc")).to_value(u.s)) < 1e-3
    assert geo["time_source"] == "DATE-OBS + config 'duration_s'"
    # linear interpolation of this linear track is exact: RA at 10:15 = 150 deg + 10.25 h x 10"/h
    assert geo["ra"].to_value(u.deg) == pytest.approx(150.0 + 10.25 * 10 / 3600, abs=1e-9)


def test_spacing_warning_for_coarse_table(tmp_path):
    el = OrbitalElements.from_mapping(ELEMENTS)
    with future_time_tolerated():
        fine = ephemeris_from_elements(el, Time("2031-03-09"), Time("2031-03-12"), 30 * u.min)
        coarse = ephemeris_from_elements(el, Time("2031-03-09"), Time("2031-03-19"), 1 * u.day)
        write_ephemeris(fine, tmp_path / "fine.ecsv")
        write_ephemeris(coarse, tmp_path / "coarse.ecsv")
        f, c = read_ephemeris(tmp_path / "fine.ecsv"), read_ephemeris(tmp_path / "coarse.ecsv")
        with warnings.catch_warnings():
            warnings.simplefilter("error", SpacingWarning)
            check_spacing(f)
        with pytest.warns(SpacingWarning, match="finer table"):
            check_spacing(c)
        # the estimate must bound the real error: compare the coarse interpolation with direct propagation
        t = Time("2031-03-13T11:17:00")
        real = observe(el, t.reshape(1))
        got = c.at(t)
        miss = SkyCoord(got["ra"], got["dec"]).separation(SkyCoord(real["ra"][0], real["dec"][0])).to(u.arcsec)
        est = interpolation_error(c)["position"]
        assert miss < 3 * est  # Richardson estimate within a small factor (cubic spline error ~ h^4)


@pytest.mark.parametrize("column,values", [("jd", lambda t: t.jd), ("mjd", lambda t: t.mjd),
                                           ("time", lambda t: t.mjd), ("time", lambda t: t.jd)])
def test_numeric_time_columns(tmp_path, column, values):
    times = Time("2024-02-29T00:00:00") + np.arange(0, 10) * u.hour
    n = len(times)
    t = QTable({column: values(times), "ra": np.linspace(10, 10.1, n) * u.deg, "dec": np.zeros(n) * u.deg,
                "r_h": np.ones(n) * u.au, "delta": np.ones(n) * u.au, "delta_dot": np.ones(n) * u.km / u.s})
    t.write(tmp_path / "e.ecsv", format="ascii.ecsv")
    e = read_ephemeris(tmp_path / "e.ecsv")
    lo, hi = e.span
    assert abs((lo - times[0]).to_value(u.s)) < 1e-3 and abs((hi - times[-1]).to_value(u.s)) < 1e-3


def test_make_ephemeris_command(tmp_path, capsys):
    import json

    out = tmp_path / "e.ecsv"
    rc = make_ephemeris(["--elements", json.dumps(ELEMENTS), "--start", "2031-03-10", "--stop", "2031-03-11",
                         "--step", "60", "--out", str(out)])
    assert rc == 0 and "25 rows" in capsys.readouterr().out
    with future_time_tolerated():
        table = read_ephemeris(out)
        direct = observe(OrbitalElements.from_mapping(ELEMENTS), Time(["2031-03-10T05:00:00"]))
    assert table.at(Time("2031-03-10T05:00:00"))["delta"].to_value(u.au) == pytest.approx(
        direct["delta"][0].to_value(u.au), rel=1e-9)
    assert make_ephemeris(["--start", "x", "--stop", "y", "--out", str(out)]) == 2


def test_make_ephemeris_for_a_cubes_own_spacecraft(tmp_path, capsys):
    # the table is seen from the cube's spacecraft: it says so and equals observe() for that observer
    import yaml
    from astropy.coordinates import get_body_barycentric_posvel

    from pipeline.geometry.observers import Observer

    with future_time_tolerated():
        times = Time("2031-03-09T00:00:00", scale="utc") + np.arange(0, 4.01, 0.25) * u.day
        pos, vel = get_body_barycentric_posvel("earth", times)
    states = tmp_path / "probe.ecsv"
    xyz, v = pos.xyz.to(u.km) + [[0.0], [1.5e6], [0.0]] * u.km, vel.xyz.to(u.km / u.s)
    QTable({"time": times, "x": xyz[0], "y": xyz[1], "z": xyz[2], "vx": v[0], "vy": v[1], "vz": v[2]},
           meta={"centre": "barycentre", "axes": "icrs"}).write(states, format="ascii.ecsv")
    write_cube(tmp_path / "ir.fits")
    config = {"target": {"elements": ELEMENTS}, "species": ["HCN"],
              "cubes": [{"path": str(tmp_path / "ir.fits"), "id": "ir",
                         "observatory": {"name": "Probe", "states": str(states)}}]}
    (tmp_path / "c.yaml").write_text(yaml.safe_dump(config))
    out = tmp_path / "probe_eph.ecsv"
    rc = make_ephemeris(["--config", str(tmp_path / "c.yaml"), "--cube", "ir", "--start", "2031-03-10",
                         "--stop", "2031-03-11", "--step", "60", "--out", str(out)])
    assert rc == 0 and "seen from the spacecraft 'Probe'" in capsys.readouterr().out
    with future_time_tolerated():
        table = read_ephemeris(out)
        direct = observe(OrbitalElements.from_mapping(ELEMENTS), Time(["2031-03-10T05:00:00"]),
                         Observer(name="Probe", states=str(states)))
        got = table.at(Time("2031-03-10T05:00:00"))
    assert table.observer == {"spacecraft": "Probe"}
    assert got["ra"].to_value(u.deg) == pytest.approx(direct["ra"][0].to_value(u.deg), abs=1e-9)
    assert got["delta_dot"].to_value(u.km / u.s) == pytest.approx(direct["delta_dot"][0].to_value(u.km / u.s),
                                                                  abs=1e-9)


def test_elements_far_from_their_epoch_warn_of_drift(tmp_path):
    # 4 years from the osculating epoch the rule of thumb (0.2" at 30 d, 600" at 2.4 yr) far exceeds a tenth
    # of the 1.5" beam: a DriftWarning names the cube, the days and the size
    from pipeline.errors import CoverageError, DriftWarning
    el = OrbitalElements.from_mapping({**ELEMENTS, "epoch": "2020-03-01T00:00:00"})
    cube = read_cube_info(write_cube(tmp_path / "d.fits"))
    with future_time_tolerated(), pytest.raises(CoverageError), \
            pytest.warns(DriftWarning, match=r"cube c: its mid-time is 1461 days from the orbital elements' epoch"):
        cube_geometry(cube, "c", "e", elements=el)         # (the test cube's field is not where the target is)
