"""The demo generator: its closed-form pixel integrals, beams and smoothing, the spacecraft's orbit, both file layouts,
determinism, and the demo config."""

import re
from dataclasses import replace
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
import yaml
from astropy.coordinates import SkyCoord, get_body_barycentric, solar_system_ephemeris
from astropy.io import fits
from astropy.table import QTable
from astropy.time import Time
from astropy.wcs import WCS
from scipy import integrate

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.image import beam_kernel, model_line_cube, pixel_column_integral
from pipeline.coma.response import ComaModel
from pipeline.errors import CubeError, EphemerisError
from pipeline.geometry.ephemeris import check_observer, read_ephemeris
from pipeline.geometry.observers import Observer, read_states
from pipeline.geometry.observing import cube_geometry
from pipeline.geometry.orbit import OrbitalElements, observe
from pipeline.io.cubes import read_beam_table, read_cube_info
from pipeline.io.times import observation_times
from pipeline.offline import future_time_tolerated
from synthetic_cubes import demo_scenario, small_scenario, write_scenario
from synthetic_cubes.__main__ import main as cli_main
from synthetic_cubes.generate import (_HANNING, SPACECRAFT_EPHEMERIS_FILE, STATES_FILE, campaign_config, hanning,
                                      line_sky_model)
from synthetic_cubes.infrared import BAD_DETECTOR_PIXEL, DO_NOT_USE, OUTSIDE_FIELD
from synthetic_cubes.scenario import SPACECRAFT
from synthetic_cubes.spacecraft import spacecraft_states

REPO = Path(__file__).resolve().parents[1]
CAT = load_catalogue()


def _reduced(layout_scenario=None):
    """The small scenario with one millimetre window (HCN), small millimetre cubes and one infrared setting."""
    sc = layout_scenario or small_scenario()
    return replace(sc, npix=24, windows=sc.windows[1:2], infrared=sc.infrared[:1])


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """The reduced scenario in both layouts: {layout: (folder, config dict)}."""
    out = {}
    for layout in ("facility", "native"):
        root = tmp_path_factory.mktemp(layout)
        path = write_scenario(_reduced(), root, results=str(root / "results"), progress=lambda s: None, layout=layout)
        out[layout] = (root, yaml.safe_load(path.read_text()))
    return out


def _mids():
    return {label: Time(t, scale="utc") for label, t in small_scenario().epochs}


# ---------------------------------------------------------------------------------------------------------------
# closed forms of the sky model's pieces


@pytest.mark.parametrize("rect", [(0.1, 0.9, 0.2, 1.3), (-0.5, 0.5, -0.5, 0.5), (-1.2, 0.3, 0.4, 2.0),
                                  (-2.0, -1.0, -0.7, 0.6)])
def test_pixel_integral_of_inverse_radius(rect):
    # independent: scipy dblquad of 1/sqrt(x^2+y^2) over the rectangle (split at the axes for the singularity)
    x0, x1, y0, y1 = rect
    xs = sorted({x0, x1, *([0.0] if x0 < 0 < x1 else [])})
    ys = sorted({y0, y1, *([0.0] if y0 < 0 < y1 else [])})
    ref = sum(integrate.dblquad(lambda y, x: 1 / np.hypot(x, y), a, b, c, d, epsabs=1e-11)[0]
              for a, b in zip(xs, xs[1:]) for c, d in zip(ys, ys[1:]))
    assert pixel_column_integral(np.array(x0), np.array(x1), np.array(y0), np.array(y1)) == pytest.approx(ref, rel=1e-7)


def test_unit_square_centred_closed_form():
    # closed form: ∫∫ over [-1/2,1/2]^2 of 1/r = 4 ln(1 + sqrt 2) (e.g. by the G(x,y) antiderivative)
    val = pixel_column_integral(np.array(-0.5), np.array(0.5), np.array(-0.5), np.array(0.5))
    assert val == pytest.approx(4 * np.log(1 + np.sqrt(2)), rel=1e-12)


def test_beam_kernel_moments():
    # a Gaussian's second moments give back sigma = FWHM / sqrt(8 ln 2) along its axes
    k = beam_kernel(8.0, 5.0, 0.0)
    assert k.sum() == pytest.approx(1.0)
    half = k.shape[0] // 2
    y, x = np.mgrid[-half:half + 1, -half:half + 1]
    assert np.sqrt(np.sum(k * y**2)) == pytest.approx(8.0 / np.sqrt(8 * np.log(2)), rel=2e-3)  # major along Dec
    assert np.sqrt(np.sum(k * x**2)) == pytest.approx(5.0 / np.sqrt(8 * np.log(2)), rel=2e-3)


def test_hanning_noise_factor():
    # white noise through [1/4, 1/2, 1/4]: variance factor 3/8 (sum of squared weights), lag-1 correlation 2/3
    rng = np.random.default_rng(3)
    x = rng.standard_normal((200_000, 1, 1))
    y = hanning(x)[:, 0, 0]
    assert np.var(y) == pytest.approx(np.sum(_HANNING**2), rel=0.02)
    assert np.corrcoef(y[:-1], y[1:])[0, 1] == pytest.approx(2 / 3, abs=0.01)


def _hcn_line(n_chan=41, v_max=4.0):
    line = CAT.get_line("HCN_265886")
    return {"line": line, "species": CAT.get_species("HCN"), "parent": None, "q": 2.0e25,
            "velocity": np.linspace(-v_max, v_max, n_chan)}


def test_per_channel_beams_one_beam_equals_the_pipeline_model():
    # with one beam in every channel, the channel-by-channel convolution is the pipeline's model_line_cube
    entry = _hcn_line()
    args = ((48, 48), 23.3, 24.6, 0.3)
    geo = (40 * u.K, 1.22 * u.au, 0.95 * u.au)
    model = ComaModel(outflow="law", solar_activity="quiet")
    beams = (np.full(41, 1.2), np.full(41, 0.9), np.full(41, 65.0))
    ours = line_sky_model(*args, [entry], beams, *geo, model)
    ref = model_line_cube(*args, entry["velocity"], entry["line"], entry["species"], entry["q"], *geo,
                          (1.2, 0.9, 65.0), model, spectral_response=None)
    assert np.allclose(ours, ref, rtol=1e-9, atol=1e-12 * np.abs(ref).max())


def test_per_channel_beams_conserve_flux_and_scale_the_peak():
    # convolution with a unit-sum kernel keeps the flux (Jy = sum of Jy/beam x pixel / beam area) but for what
    # crosses the field's edge: a 1/rho coma has equal flux per unit radius, so about 0.4 sigma / R of it (R = 8",
    # sigma <= 0.64") leaves the field, and the beams differ by < 1 % in that; for a 1/rho coma (Haser scale length
    # >> beam) the flux within a Gaussian beam of FWHM theta grows as theta (closed form: the integral of
    # exp(-r^2/2s^2) / r over the plane is 2 pi s sqrt(pi/2)), so the peak in Jy/beam scales as theta
    entry = _hcn_line(n_chan=21, v_max=0.7)                           # every channel inside the line
    model = ComaModel(outflow="law", solar_activity="quiet")
    theta = np.linspace(0.9, 1.5, 21)
    pix = 0.1
    cube = line_sky_model((160, 160), 79.5, 79.5, pix, [entry], (theta, theta, np.zeros(21)), 40 * u.K,
                          1.22 * u.au, 0.95 * u.au, model)
    same = line_sky_model((160, 160), 79.5, 79.5, pix, [entry], (np.full(21, 1.2),) * 2 + (np.zeros(21),),
                          40 * u.K, 1.22 * u.au, 0.95 * u.au, model)
    beam_pix = np.pi / (4 * np.log(2)) * theta**2 / pix**2
    flux = cube.sum(axis=(1, 2)) / beam_pix
    flux_same = same.sum(axis=(1, 2)) / (np.pi / (4 * np.log(2)) * 1.2**2 / pix**2)
    assert np.allclose(flux, flux_same, rtol=1e-2)
    peak = cube[:, 79:81, 79:81].mean(axis=(1, 2))                  # the nucleus lies between four pixels
    ratio = peak / (flux_same * theta)                                # per unit of the channel's line flux
    assert np.allclose(ratio / ratio[10], 1.0, atol=0.02)


# ---------------------------------------------------------------------------------------------------------------
# the spacecraft


def _states(root):
    return QTable.read(root / STATES_FILE, format="ascii.ecsv")


def test_state_table_layout_and_coverage(written):
    root, config = written["facility"]
    table = _states(root)
    assert table.colnames == ["time", "x", "y", "z", "vx", "vy", "vz"]
    assert table["x"].unit == u.km and table["vx"].unit == u.km / u.s
    assert table.meta["centre"] == "barycentre" and table.meta["axes"] == "icrs"
    times = Time(list(table["time"]), scale="utc")
    assert all(re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}", str(t)) for t in table["time"])
    with future_time_tolerated():
        assert np.allclose(np.diff(times.mjd) * 24, SPACECRAFT["state_step_h"], atol=1e-6)
        eph = read_ephemeris(root / SPACECRAFT_EPHEMERIS_FILE)
    # the state table covers the whole ephemeris, which covers every epoch and the planned one
    assert times[0].jd <= eph.jd[0] + 1e-9 and times[-1].jd >= eph.jd[-1] - 1e-9
    states = read_states(root / STATES_FILE)                         # the pipeline's reader takes it as written
    assert states.centre == "barycentre" and states.position.shape == (3, len(table))


def test_state_velocities_are_the_derivative_of_the_positions(written):
    # central difference (x[i+1] - x[i-1]) / 2h approximates x'(t_i) to h^2/6 |x'''| (Taylor); the Earth's
    # barycentric jerk is ~ a w = 6e-6 km/s^2 x 2e-7 /s, so ~1e-4 km/s at h = 6 h
    table = _states(written["facility"][0])
    h = SPACECRAFT["state_step_h"] * 3600.0
    for axis in "xyz":
        x = table[axis].to_value(u.km)
        v = table[f"v{axis}"].to_value(u.km / u.s)
        assert np.allclose((x[2:] - x[:-2]) / (2 * h), v[1:-1], atol=1e-3, rtol=0)


def test_spacecraft_sits_beyond_the_earth_near_l2(written):
    # L2 lies about a (m / 3 M_sun)^(1/3) beyond the Earth on the Sun-Earth line (Hill's approximation, with
    # m = Earth + Moon, Moon/Earth mass ratio 1/81.3 from memory): 1.50e6 km; the halo offset adds at most
    # sqrt(A_y^2 + A_z^2) across that line
    table = _states(written["facility"][0])
    times = Time(list(table["time"]), scale="utc")
    with solar_system_ephemeris.set("builtin"), future_time_tolerated():
        earth = get_body_barycentric("earth", times).xyz.to_value(u.km)
        sun = get_body_barycentric("sun", times).xyz.to_value(u.km)
    craft = np.array([table[a].to_value(u.km) for a in "xyz"])
    offset = craft - earth
    sun_earth = (earth - sun) / np.linalg.norm(earth - sun, axis=0)
    along = np.sum(offset * sun_earth, axis=0)
    across = np.linalg.norm(offset - along * sun_earth, axis=0)
    hill = (1 * u.au * (const.GM_earth * (1 + 1 / 81.3) / (3 * const.GM_sun)) ** (1 / 3)).to_value(u.km)
    assert np.allclose(along, hill, rtol=0.01)
    assert np.all(across <= np.hypot(*SPACECRAFT["halo_km"]) * 1.0001) and np.all(across > 1e5)
    assert np.linalg.norm(offset, axis=0).min() > 1.4e6 and np.linalg.norm(offset, axis=0).max() < 1.6e6


def test_spacecraft_sees_the_infrared_epochs_within_its_field_of_regard(written):
    # solar elongation = angle Sun-spacecraft-target, from the spacecraft's state table and the ephemeris seen from
    # it (Sun from astropy's built-in ephemeris)
    root, _ = written["facility"]
    sc = small_scenario()
    craft = Observer(name=SPACECRAFT["name"], states=str(root / STATES_FILE))
    labels = sorted({e for setup in demo_scenario().infrared for e in setup.epochs})
    times = Time([t for e, t in sc.epochs if e in labels], scale="utc")
    with future_time_tolerated(), solar_system_ephemeris.set("builtin"):
        seen = read_ephemeris(root / SPACECRAFT_EPHEMERIS_FILE).at(times)
        sun = get_body_barycentric("sun", times).xyz.to_value(u.km)
    position = craft.barycentric(times)[0]
    to_sun = SkyCoord(*(sun - position), unit="km", representation_type="cartesian", frame="icrs")
    elongation = SkyCoord(seen["ra"], seen["dec"]).separation(to_sun).to_value(u.deg)
    low, high = SPACECRAFT["field_of_regard_deg"]
    assert np.all((elongation > low) & (elongation < high)), elongation


def test_state_table_interpolates_back_to_the_model(written):
    # the pipeline's Hermite interpolation of the table between rows against the model itself
    root, _ = written["facility"]
    times = Time(["2031-03-10T04:00:00", "2031-03-14T05:17:31", "2031-03-17T05:00:00"], scale="utc")
    observer = Observer(name=SPACECRAFT["name"], states=str(root / STATES_FILE))
    pos, vel = observer.barycentric(times)
    ref_pos, ref_vel = spacecraft_states(times, SPACECRAFT, Time(SPACECRAFT["halo_epoch"], scale="utc"))
    assert np.allclose(pos, ref_pos, atol=0.01, rtol=0)               # km
    assert np.allclose(vel, ref_vel, atol=1e-6, rtol=0)               # km/s


def test_spacecraft_ephemeris_states_its_observer_and_its_parallax(written):
    root, config = written["facility"]
    with future_time_tolerated():
        eph = read_ephemeris(root / SPACECRAFT_EPHEMERIS_FILE)
    name = SPACECRAFT["name"]
    assert eph.observer == {"spacecraft": name}
    craft = Observer(name=name, states=str(root / STATES_FILE))
    check_observer(eph, craft)                                        # accepted for the spacecraft
    site = read_ephemeris(root / "ephemeris.ecsv")
    with pytest.raises(EphemerisError, match="spacecraft"):
        check_observer(site, craft)                                   # the ground site's table is refused for it
    # parallax: seen from an observer displaced by b, the target (distance Delta) moves by |b x rho_hat| / Delta
    # on the sky (small-angle closed form)
    elements = OrbitalElements.from_mapping(small_scenario().elements)
    t = Time(small_scenario().epochs[0][1], scale="utc")
    with future_time_tolerated():
        geo = observe(elements, Time([t]), None)
        seen = eph.at(Time([t]))
        b = craft.barycentric(Time([t]))[0][:, 0] - Observer().barycentric(Time([t]))[0][:, 0]
    sky_geo = SkyCoord(geo["ra"][0], geo["dec"][0])
    rho = sky_geo.cartesian.xyz.value
    expected = (np.linalg.norm(np.cross(b, rho)) / geo["delta"][0].to_value(u.km) * u.rad).to_value(u.arcsec)
    shift = sky_geo.separation(SkyCoord(seen["ra"][0], seen["dec"][0])).to_value(u.arcsec)
    assert shift == pytest.approx(expected, rel=0.01)


# ---------------------------------------------------------------------------------------------------------------
# the millimetre cubes in the facility layout


def test_mm_cubes_are_four_dimensional_with_frequency_descending(written):
    root, _ = written["facility"]
    sc = small_scenario()
    for label, _ in sc.epochs:
        path = root / f"{label}_hcn.fits"
        with fits.open(path) as hdul:
            h = hdul[0].header
            assert h["NAXIS"] == 4 and h["NAXIS4"] == 1 and h["CTYPE4"] == "STOKES"
            assert (h["CTYPE1"], h["CTYPE2"], h["CTYPE3"]) == ("RA---SIN", "DEC--SIN", "FREQ")
            assert h["CDELT3"] < 0 and h["BUNIT"] == "Jy/beam" and h["SPECSYS"] == sc.specsys[label]
            assert hdul[0].data.shape == (1, h["NAXIS3"], 24, 24)
        info = read_cube_info(path)
        assert info.shape == (h["NAXIS3"], 24, 24)
        assert np.all(np.diff(info.frequencies) < 0)


def test_mm_start_times_carry_fractional_seconds(written):
    root, config = written["facility"]
    sc = small_scenario()
    for label, mid in _mids().items():
        with fits.open(root / f"{label}_hcn.fits") as hdul:
            h = hdul[0].header
        assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d+", h["DATE-OBS"])
        start = Time(h["DATE-OBS"], scale="utc")
        with future_time_tolerated():
            assert abs((mid - start).to_value(u.s) - sc.track_s[label] / 2) < 1e-3
        assert float(h["DATE-OBS"][17:]) % 1 != 0                     # the track starts between whole seconds
        assert h["TIMESYS"] == "UTC"
        if label in sc.start_only_epochs:
            for card in ("DATE-END", "MJD-END", "EXPEND", "TELAPSE", "EXPTIME", "DATE-AVG", "MJD-AVG", "EXPMID"):
                assert card not in h, card
        else:
            with future_time_tolerated():
                assert abs((Time(h["DATE-END"], scale="utc") - start).to_value(u.s) - sc.track_s[label]) < 1e-3


def test_start_only_cube_takes_its_duration_from_the_config(written):
    root, config = written["facility"]
    sc = small_scenario()
    label = sc.start_only_epochs[0]
    entry = next(c for c in config["cubes"] if c["id"] == f"{label}_hcn")
    assert entry["duration_s"] == sc.track_s[label]
    assert all("duration_s" not in c for c in config["cubes"] if c["epoch"] not in sc.start_only_epochs)
    info = read_cube_info(entry["path"])
    with future_time_tolerated():
        times = observation_times(info.header, info.path, duration=entry["duration_s"] * u.s)
        assert abs((times.mid - _mids()[label]).to_value(u.s)) < 1e-3
    assert times.source == "DATE-OBS + config 'duration_s'"


def test_start_only_cube_without_duration_is_refused(written):
    # without duration_s or time the mid-time is never guessed: the sentence names the file, the card and the key
    root, config = written["facility"]
    label = small_scenario().start_only_epochs[0]
    path = root / f"{label}_hcn.fits"
    info = read_cube_info(path)
    with future_time_tolerated():
        eph = read_ephemeris(root / "ephemeris.ecsv")
    with pytest.raises(CubeError) as err:
        cube_geometry(info, f"{label}_hcn", label, ephemeris=eph)
    text = str(err.value)
    assert str(path) in text and "only DATE-OBS" in text and "DATE-END" in text and "'duration_s'" in text


def test_beam_table_epoch(written):
    root, _ = written["facility"]
    sc = small_scenario()
    for label, _ in sc.epochs:
        path = root / f"{label}_hcn.fits"
        with fits.open(path) as hdul:
            h = hdul[0].header
            if label not in sc.beam_table_epochs:
                assert "BEAMS" not in hdul and "CASAMBM" not in h
                assert h["BMAJ"] * 3600 == pytest.approx(sc.beam_arcsec[0])
                continue
            assert h["CASAMBM"] is True
            assert not {"BMAJ", "BMIN", "BPA"} & set(h)
            table = hdul["BEAMS"]
            assert [c.name for c in table.columns] == ["BMAJ", "BMIN", "BPA", "CHAN", "POL"]
            assert (table.columns["BMAJ"].unit, table.columns["BPA"].unit) == ("arcsec", "deg")
            assert table.data["CHAN"].dtype.kind == "i" and table.data["POL"].dtype.kind == "i"
            assert list(table.data["CHAN"]) == list(range(h["NAXIS3"])) and set(table.data["POL"]) == {0}
            major, minor, pa = read_beam_table(hdul, path)
        info = read_cube_info(path)
        assert info.beam_source == "BEAMS table (per channel)"
        # a diffraction-limited synthesised beam scales as wavelength / baseline, i.e. as 1/frequency
        f = info.frequencies.to_value(u.Hz)
        product = major.to_value(u.arcsec) * f
        assert np.allclose(product, product[0], rtol=1e-6)
        assert np.ptp(major.to_value(u.arcsec)) > 0
        assert np.median(major.to_value(u.arcsec)) == pytest.approx(sc.beam_arcsec[0], rel=1e-3)
        assert np.allclose(minor / major, sc.beam_arcsec[1] / sc.beam_arcsec[0], rtol=1e-6)
        assert np.allclose(pa.to_value(u.deg), sc.beam_arcsec[2])


# ---------------------------------------------------------------------------------------------------------------
# the infrared cubes in the facility layout (the space IFU's product)


def _ir(root, label="e1"):
    return root / f"{label}_ir_short.fits"


def test_ir_cube_extensions_and_primary_cards(written):
    root, _ = written["facility"]
    sc = small_scenario()
    for label, mid in _mids().items():
        if label not in sc.infrared[0].epochs:
            continue
        with fits.open(_ir(root, label)) as hdul:
            assert [h.name for h in hdul] == ["PRIMARY", "SCI", "ERR", "DQ", "WMAP"]
            prim = hdul[0].header
            assert hdul[0].data is None and prim["NAXIS"] == 0
            assert re.fullmatch(r"\d{4}-\d\d-\d\d", prim["DATE-OBS"])
            assert re.fullmatch(r"\d\d:\d\d:\d\d\.\d+", prim["TIME-OBS"])
            assert prim["TIMESYS"] == "UTC" and prim["TELESCOP"] == SPACECRAFT["name"]
            assert hdul["DQ"].data.dtype == np.dtype(">i4")
            assert hdul["SCI"].header["BUNIT"] == "MJy/sr" and hdul["SCI"].header["SPECSYS"] == "BARYCENT"
            assert "BMAJ" not in hdul["SCI"].header
            assert hdul["ERR"].data.shape == hdul["SCI"].data.shape == hdul["WMAP"].data.shape
        with future_time_tolerated():
            beg, end = Time(prim["DATE-BEG"], scale="utc"), Time(prim["DATE-END"], scale="utc")
            assert Time(f"{prim['DATE-OBS']}T{prim['TIME-OBS']}", scale="utc") == beg
            for card, t in (("MJD-BEG", beg), ("MJD-END", end), ("EXPSTART", beg), ("EXPEND", end), ("EXPMID", mid)):
                assert abs((Time(prim[card], format="mjd", scale="utc") - t).to_value(u.s)) < 1e-3, card
            assert abs((end - beg).to_value(u.s) - sc.ir_exposure_s) < 1e-3
            # the time cards as the pipeline reads them (FITS time paper order: explicit mid with the begin/end pair)
            times = observation_times(prim, _ir(root, label))
            assert abs((times.mid - mid).to_value(u.s)) < 1e-3 and times.source.startswith("EXPMID")


def test_ir_field_is_rotated_with_the_pixel_scale_of_a_space_ifu(written):
    root, _ = written["facility"]
    setup = small_scenario().infrared[0]
    with fits.open(_ir(root)) as hdul:
        wcs = WCS(hdul["SCI"].header).celestial
    c = setup.npix / 2 - 0.5
    centre, up, right = wcs.pixel_to_world([c, c, c + 10], [c, c + 10, c])
    assert centre.separation(up).to_value(u.arcsec) == pytest.approx(10 * setup.pixel_arcsec, rel=1e-6)
    assert centre.separation(right).to_value(u.arcsec) == pytest.approx(10 * setup.pixel_arcsec, rel=1e-6)
    # CROTA2 convention (Calabretta & Greisen 2002, sec. 6.1): north lies rotation_deg from the +y axis, so the
    # +y axis points to position angle -rotation_deg and +x (west for an unrotated image) to 270 - rotation_deg
    # (position angles east of north, astropy's position_angle)
    assert centre.position_angle(up).to_value(u.deg) == pytest.approx(360 - setup.rotation_deg, abs=1e-4)
    assert centre.position_angle(right).to_value(u.deg) == pytest.approx(270 - setup.rotation_deg, abs=1e-4)


def test_ir_blank_border_and_flagged_voxels(written):
    root, _ = written["facility"]
    setup = small_scenario().infrared[0]
    b = setup.border_pix
    with fits.open(_ir(root)) as hdul:
        sci, err, dq, wmap = (hdul[k].data for k in ("SCI", "ERR", "DQ", "WMAP"))
    border = np.ones(sci.shape[1:], dtype=bool)
    border[b:-b, b:-b] = False
    assert np.all(np.isnan(sci[:, border])) and np.all(np.isnan(err[:, border]))
    assert np.all(dq[:, border] == DO_NOT_USE | OUTSIDE_FIELD) and np.all(wmap[:, border] == 0)
    inner_dq = dq[:, ~border]
    bad = inner_dq != 0
    # every blank voxel is flagged 'do not use' and every flagged one blank
    assert np.array_equal(np.isnan(sci[:, ~border]), bad)
    assert np.all(inner_dq[bad] == DO_NOT_USE | BAD_DETECTOR_PIXEL)
    # the flagged share: binomial count N p +- 5 sqrt(N p (1 - p))
    n, p = inner_dq.size, setup.flagged_share
    assert abs(bad.sum() - n * p) < 5 * np.sqrt(n * p * (1 - p)) and bad.sum() > 0
    assert np.all(np.isfinite(sci[:, ~border][~bad]))


def test_ir_aperture_fits_inside_the_unflagged_field(written):
    # the config's infrared aperture (1000 km) lies inside the field's unblank part around the target, seen from
    # the spacecraft; the campaign's 3000 km one would not (hence the cube's own apertures_km)
    root, config = written["facility"]
    sc = small_scenario()
    setup = sc.infrared[0]
    entry = next(c for c in config["cubes"] if c["id"] == "e1_ir_short")
    assert entry["apertures_km"] == [1000.0] and entry["observatory"] == {"name": SPACECRAFT["name"],
                                                                          "states": str(root / STATES_FILE)}
    assert entry["ephemeris"] == str(root / SPACECRAFT_EPHEMERIS_FILE)
    with future_time_tolerated():
        eph = read_ephemeris(entry["ephemeris"])
        geo = eph.at(Time([sc.epochs[0][1]], scale="utc"))
    with fits.open(_ir(root)) as hdul:
        wcs = WCS(hdul["SCI"].header).celestial
    x, y = wcs.world_to_pixel(SkyCoord(geo["ra"][0], geo["dec"][0]))
    to_edge = min(x, y, setup.npix - 1 - x, setup.npix - 1 - y) - setup.border_pix   # pixels of unblank field
    radius = [(r * u.km / geo["delta"][0]).to_value(u.arcsec, equivalencies=u.dimensionless_angles())
              / setup.pixel_arcsec for r in (1000.0, 3000.0)]
    assert radius[0] < to_edge < radius[1]


# ---------------------------------------------------------------------------------------------------------------
# the native layout


def test_native_layout(written):
    root, config = written["native"]
    for label, mid in _mids().items():
        with fits.open(root / f"{label}_hcn.fits") as hdul:
            assert len(hdul) == 1 and hdul[0].header["NAXIS"] == 3 and hdul[0].header["CDELT3"] > 0
            assert {"BMAJ", "BMIN", "DATE-OBS", "DATE-END"} <= set(hdul[0].header)
        info = read_cube_info(root / f"{label}_hcn.fits")
        with future_time_tolerated():
            assert abs((observation_times(info.header, info.path).mid - mid).to_value(u.s)) < 1e-3
    assert all("duration_s" not in c and "beam_arcsec" not in c for c in config["cubes"])
    with fits.open(_ir(root)) as hdul:
        assert [h.name for h in hdul] == ["PRIMARY", "SCI", "ERR"]
        assert "PC1_2" not in hdul["SCI"].header and not np.any(np.isnan(hdul["SCI"].data))
        assert hdul["SCI"].header["SPECSYS"] == "TOPOCENT" and hdul[0].header["TELESCOP"] == SPACECRAFT["name"]
    info = read_cube_info(_ir(root))
    with future_time_tolerated():
        assert abs((observation_times(info.header, info.path).mid - _mids()["e1"]).to_value(u.s)) < 1e-3
    # the same observers in both layouts: only the files differ
    facility = written["facility"][1]
    strip = {"path", "duration_s", "beam_arcsec", "observatory", "ephemeris"}
    assert [{k: v for k, v in c.items() if k not in strip} for c in config["cubes"]] == \
        [{k: v for k, v in c.items() if k not in strip} for c in facility["cubes"]]


def test_unknown_layout_is_refused(tmp_path):
    with pytest.raises(ValueError, match="layout 'fits' is not one of facility, native"):
        write_scenario(_reduced(), tmp_path, progress=lambda s: None, layout="fits")


def test_command_line_layout_option(monkeypatch, tmp_path, capsys):
    seen = []
    monkeypatch.setattr("synthetic_cubes.__main__.write_scenario", lambda *a, **k: seen.append(k["layout"]))
    assert cli_main(["--small", str(tmp_path)]) == 0
    assert cli_main(["--small", "--layout", "native", str(tmp_path)]) == 0
    assert seen == ["facility", "native"]
    with pytest.raises(SystemExit):
        cli_main(["--layout", "fits", str(tmp_path)])
    assert "invalid choice: 'fits'" in capsys.readouterr().err


# ---------------------------------------------------------------------------------------------------------------
# the demo config and determinism


def test_demo_config_matches_generator():
    shipped = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    assert shipped == campaign_config(demo_scenario(), "demo_data", "results/demo", "facility")


def test_written_config_is_the_campaign_config(written):
    for layout, (root, config) in written.items():
        assert config == campaign_config(_reduced(), root, str(root / "results"), layout)
        for cube in config["cubes"]:
            assert Path(cube["path"]).is_file()
        assert (root / STATES_FILE).is_file() and (root / SPACECRAFT_EPHEMERIS_FILE).is_file()


def test_generation_is_deterministic(tmp_path):
    sc = replace(_reduced(), epochs=small_scenario().epochs[:2])
    write_scenario(sc, tmp_path / "a", progress=lambda s: None)
    write_scenario(sc, tmp_path / "b", progress=lambda s: None)
    for name in ("e1_hcn.fits", "e2_hcn.fits", "e1_ir_short.fits", "ephemeris.ecsv", STATES_FILE,
                 SPACECRAFT_EPHEMERIS_FILE):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name
