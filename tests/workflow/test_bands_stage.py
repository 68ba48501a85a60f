"""The infrared chain on one synthetic cube: known Q and known dust colour recovered to their stated errors.

The cube comes from the demo generator (synthetic_cubes.infrared), which shares the pipeline's coma model; the
external anchors are the analytic Haser aperture count (Haser 1957, via pipeline.coma.conversion's closed form), the
Afrho definition (A'Hearn et al. 1984) and the generator's stated truth.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import EarthLocation
from astropy.io import fits
from astropy.table import QTable, Table
from astropy.time import Time

from pipeline.catalogue.entries import load_catalogue
from pipeline.settings import Settings, validate_config
from pipeline.coma.conversion import band_flux_from_production_rate
from pipeline.io.cubes import read_cube_info
from pipeline.geometry.observers import Observer
from pipeline.geometry.observing import cube_geometry
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import OrbitalElements, observe
from pipeline.workflow import bands
from synthetic_cubes.infrared import InfraredSetup, afrho_model, write_ir_cube
from synthetic_cubes.scenario import small_scenario

CAT = load_catalogue()
Q_H2O = 4.0e26


@pytest.fixture(scope="module")
def ir_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("ir")
    sc = replace(small_scenario(), production_rates={"H2O": Q_H2O, "CO2": 0.0, "CO": 0.0}, seed=7)
    location = EarthLocation.from_geodetic(sc.site["lon_deg"] * u.deg, sc.site["lat_deg"] * u.deg,
                                           sc.site["height_m"] * u.m)
    mid = Time(sc.epochs[0][1], scale="utc")
    with future_time_tolerated():
        g = observe(OrbitalElements.from_mapping(sc.elements), Time([mid]), location)
    geo = {c: g[c][0] for c in ("ra", "dec", "r_h", "delta", "delta_dot")}
    out = {}
    for setup in (InfraredSetup("short", ("e1",), 2.42, 2.95, 0.0030, 450.0, 0.4, 48, 0.25, 4.0e-7, "MJy/sr"),
                  InfraredSetup("long", ("e1",), 4.00, 5.00, 0.0050, 480.0, 0.4, 48, 0.35, 3.0e-7, "W/m2/um/sr")):
        path = tmp / f"{setup.name}.fits"
        with future_time_tolerated():
            write_ir_cube(path, sc, setup, mid, geo, CAT, np.random.default_rng(sc.seed))
        config = {"target": {"elements": sc.elements}, "cubes": [{"path": str(path)}], "species": ["H2O", "CO2", "CO"],
                  "observatory": {k: sc.site[k] for k in ("lon_deg", "lat_deg", "height_m")},
                  "apertures_km": [1000.0, 3000.0], "dust": {"wavelengths_um": [2.5, 2.9, 4.1, 4.45, 4.9]}}
        validate_config(config, source="test")
        info = read_cube_info(path)
        with future_time_tolerated(), warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the ERFA 'dubious year' of the demo's future epochs
            table = cube_geometry(info, setup.name, "e1", elements=OrbitalElements.from_mapping(sc.elements),
                                  observer=Observer(name="site", location=location))
        table.write(tmp / f"{setup.name}.ecsv", format="ascii.ecsv")
        ids = ["H2O_nu3"] if setup.name == "short" else ["CO2_nu3", "CO_v1-0"]
        with future_time_tolerated(), warnings.catch_warnings():
            warnings.simplefilter("ignore", category=Warning)
            config["cubes"][0]["resolving_power"] = setup.resolving_power
            settings = Settings.from_config(config, cube=config["cubes"][0])
            bands.run(str(tmp / f"{setup.name}.ecsv"), ids, settings, str(tmp / f"{setup.name}_bands.fits"))
        out[setup.name] = (tmp / f"{setup.name}_bands.fits", table[0], setup)
    return sc, out


def test_water_recovered_within_its_error(ir_run):
    _, out = ir_run
    t = Table.read(out["short"][0], hdu="BANDS")
    assert len(t) == 2 and set(t["band_id"]) == {"H2O_nu3"}           # one band, two apertures
    assert sorted(float(a) for a in t["aperture_km"]) == [1000.0, 3000.0]
    for r in t:
        assert r["covered"]
        pull = (r["q"] - Q_H2O) / r["sigma_q"]
        assert abs(pull) < 3.5, (r["aperture_km"], r["q"], r["sigma_q"])
        assert abs(r["q"] / Q_H2O - 1) < 0.03


def test_absent_gases_give_limits_consistent_with_zero(ir_run):
    _, out = ir_run
    t = Table.read(out["long"][0], hdu="BANDS")
    assert set(t["band_id"]) == {"CO2_nu3", "CO_v1-0"}
    assert len(t) == 4                                                   # two bands, two apertures
    for r in t:
        assert abs(r["q"] / r["sigma_q"]) < 3.5
        assert r["sigma_q"] > 0 and r["sigma"] >= r["sigma_err"]


def test_response_against_the_analytic_haser_aperture(ir_run):
    # Haser (1957) closed-form aperture count in a circular aperture (pipeline.coma.conversion), no PSF, vs the grid
    # count with the PSF used by the bands stage: the PSF moves at most a few per cent out of these apertures
    _, out = ir_run
    path, geo, _ = out["short"]
    t = Table.read(path, hdu="BANDS")
    band = CAT.get_band("H2O_nu3")
    assert len(t) == 2                                                   # one band, two apertures
    for r in t:
        analytic = band_flux_from_production_rate(1 / u.s, band.wavelength, band.g_1au, r["aperture_km"] * u.km,
                                                  geo["r_h"], geo["delta"], r["outflow"] * u.km / u.s,
                                                  CAT.get_species("H2O").photo_quiet).to_value(u.W / u.m**2)
        assert 0.93 < r["response"] / analytic < 1.01


def test_dust_afrho_and_colour_recovered(ir_run):
    sc, out = ir_run
    dust = sc.extra["dust"]
    rows = []
    for name in ("short", "long"):
        t = Table.read(out[name][0], hdu="DUST")
        rows.extend(list(t))
    assert {round(float(r["wavelength"]), 2) for r in rows} == {2.5, 2.9, 4.1, 4.45, 4.9}
    assert len(rows) == 10                                               # five wavelengths, two apertures
    lam_ref = dust["lam_ref_um"] * u.um
    for r in rows:
        truth = afrho_model(r["wavelength"] * u.um, dust["afrho_cm"] * u.cm, lam_ref, dust["slope"]).to_value(u.cm)
        # stated error plus the PSF's loss out of the aperture (< 1.5 % for these apertures, see the response test)
        assert abs(r["afrho"] - truth) < 3 * r["afrho_err"] + 0.015 * truth, (r["wavelength"], r["afrho"], truth)
    # colour: the slope normalised at the mean wavelength (pipeline.workflow.dust) against the model's closed form
    from pipeline.dust.summary import dust_summary
    table = Table(rows=[{k: r[k] for k in ("cube_id", "epoch", "aperture_km", "wavelength", "afrho", "afrho_err")}
                        for r in rows])
    defaults = Settings.from_config(validate_config({"target": {"elements": small_scenario().elements},
                                                     "cubes": [{"path": "x.fits"}], "species": ["H2O"]})).dust
    summary = dust_summary(table, defaults.grain_radius, defaults.grain_density, defaults.speed, defaults.albedo)
    row = summary[(summary["epoch"] == "e1") & (summary["aperture_km"].to_value(u.km) == 3000.0)][0]
    lam = np.asarray(table["wavelength"], dtype=float)
    w = 1 / np.asarray(table["afrho_err"], dtype=float) ** 2
    sel = np.asarray(table["aperture_km"], dtype=float) == 3000.0
    lam_bar = np.sum(w[sel] * lam[sel]) / np.sum(w[sel])
    s = dust["slope"] / 100 / 0.1                     # per um
    expected = s / (1 + s * (lam_bar - dust["lam_ref_um"])) * 10   # per cent per 100 nm
    assert abs(row["slope"] - expected) < 3 * row["slope_err"] + 0.05 * expected
    assert row["q_dust"].to_value(u.kg / u.s) > 0


def test_without_err_extension_the_scatter_sigma_is_used(ir_run, tmp_path):
    _, out = ir_run
    path, geo, setup = out["short"]
    src = path.parent / "short.fits"
    with fits.open(src) as hdul:
        fits.HDUList([hdul[0].copy(), hdul["SCI"].copy()]).writeto(tmp_path / "noerr.fits")
    config = {"target": {"elements": small_scenario().elements}, "cubes": [{"path": str(tmp_path / "noerr.fits")}],
              "species": ["H2O"], "apertures_km": [1000.0, 3000.0]}
    validate_config(config, source="test")
    config["cubes"][0]["resolving_power"] = setup.resolving_power
    with future_time_tolerated(), warnings.catch_warnings():
        warnings.simplefilter("ignore", category=Warning)
        bands.run(str(path.parent / "short.ecsv"), ["H2O_nu3"], Settings.from_config(config, cube=config["cubes"][0]),
                  str(tmp_path / "b.fits"))
    with fits.open(tmp_path / "b.fits") as hdul:
        assert hdul[0].header["GLSIGSRC"].startswith("scatter of line-free")
        with_err = Table.read(path, hdu="BANDS")
        without = Table.read(hdul["BANDS"])
    # same data, so the same band flux; the scatter sigma is within 30 % of the ERR-based one (white noise)
    np.testing.assert_allclose(without["flux"], with_err["flux"], rtol=1e-6)
    assert np.all(np.abs(without["sigma"] / with_err["sigma"] - 1) < 0.3)


def test_a_millimetre_cube_is_refused(tmp_path):
    from cubes import write_cube
    path = write_cube(tmp_path / "mm.fits")
    with pytest.raises(Exception, match="expected an infrared cube"):
        config = validate_config({"target": {"elements": small_scenario().elements}, "cubes": [{"path": str(path)}],
                                  "species": ["H2O"]})
        bands.run("unused.ecsv", [], Settings.from_config(config, cube=config["cubes"][0]), str(tmp_path / "x.fits"))


def test_band_limits_in_a_qtable_have_units(ir_run):
    _, out = ir_run
    t = QTable.read(out["short"][0], hdu="WAVE")
    assert t["observed"].unit == u.um and t["rest"].unit == u.um
    # rest = observed / Doppler factor (the relativistic factor of the target's range rate)
    ratio = (t["observed"] / t["rest"]).decompose().value
    assert np.allclose(ratio, ratio[0], rtol=1e-12) and abs(ratio[0] - 1) < 1e-3

