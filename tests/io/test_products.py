"""Tests of pipeline.io.products: every inter-stage product survives to_fits / from_fits, with units on its tables.

The references are the values put in (a round trip must give them back exactly) and astropy's FITS and unit
machinery (a column's TUNIT read back as the astropy unit it was written from).
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import QTable, Table
from cubes import subcube

from pipeline.errors import CubeError
from pipeline.io.products import (BandMeasurements, LineSpectra, ProductMeta, SpeciesStack, StackedSpectrum,
                                  SubCube)


def test_subcube_round_trip_keeps_data_velocities_and_metadata(tmp_path):
    rng = np.random.default_rng(4)
    sub = subcube(rng.standard_normal((40, 20, 24)), delta_au=1.3, r_h_au=1.7)
    path = tmp_path / "sub.fits"
    sub.to_fits().writeto(path)
    back = SubCube.from_fits(path)
    assert back.meta == sub.meta
    np.testing.assert_array_equal(back.data, sub.data)
    np.testing.assert_array_equal(back.velocity, sub.velocity)
    # the sub-cube read back is a valid cube: the same WCS, beam and pixel scale as the one written
    assert back.info().shape == (40, 20, 24)
    assert back.info().pixel_scale.to_value(u.arcsec) == pytest.approx(0.3, rel=1e-12)
    assert back.info().beam_major.to_value(u.arcsec) == pytest.approx(1.0, rel=1e-12)
    assert back.meta.delta == 1.3 * u.au and back.meta.r_h == 1.7 * u.au


def test_a_subcube_that_is_not_covered_keeps_its_reason(tmp_path):
    meta = ProductMeta(cube_id="c1", epoch="e1", line_id="CO_230538", species="CO", covered=False,
                       reason=("the integration window is not fully inside the band; " * 3).strip())
    path = tmp_path / "none.fits"
    SubCube(meta=meta).to_fits().writeto(path)
    back = SubCube.from_fits(path)
    assert back.meta == meta and back.data is None and back.velocity is None


def test_errors_met_while_a_subcube_is_in_use_name_it():
    sub = subcube(np.zeros((12, 8, 8)))
    with pytest.raises(CubeError, match=r"^test sub-cube: something is wrong"):
        with sub.in_use():
            raise CubeError("something is wrong")


def test_line_spectra_round_trip(tmp_path):
    meta = ProductMeta(cube_id="c1", epoch="e1", line_id="HCN_265886", species="HCN", target_x=9.5, target_y=9.5,
                       r_h_au=1.2, delta_au=0.8)
    aps = Table({"radius_km": [1000.0, 3000.0], "sigma_window": [0.1, 0.2]})
    aps["radius_km"].unit, aps["sigma_window"].unit = "km", "Jy km / s"
    chans = Table({"velocity": np.linspace(-3, 3, 21) * u.km / u.s, "line_free": np.ones(21, bool),
                   "window_weight": np.zeros(21)})
    spectra = LineSpectra(meta=meta, flux=np.arange(42.0).reshape(2, 21), blank=np.zeros((2, 21), int),
                          apertures=aps, channels=chans, window=1.2, v_centre=0.5, centre=(9.5, 9.5),
                          pixel_scale_arcsec=0.3, grid_shape=(20, 20), beam_deg=(3e-4, 2e-4, 30.0),
                          rest_frequency_hz=265.886434e9).injected(2e25, 3)
    path = tmp_path / "spec.fits"
    spectra.to_fits().writeto(path)
    back = LineSpectra.from_fits(path)
    assert back.meta == meta and back.window == 1.2 and back.v_centre == 0.5 and back.grid_shape == (20, 20)
    assert back.beam_deg == (3e-4, 2e-4, 30.0) and back.injected_q == 2e25 and back.injected_index == 3
    np.testing.assert_array_equal(back.flux, spectra.flux)
    np.testing.assert_array_equal(back.velocity, np.linspace(-3, 3, 21))
    assert back.apertures["sigma_window"].unit == u.Jy * u.km / u.s        # the unit survives the file


def _bands():
    bands = Table({"band_id": ["H2O_nu3"] * 2, "species": ["H2O"] * 2, "aperture_km": [1000.0, 3000.0],
                   "q": [4e26, 4.1e26], "sigma_q": [1e24, 2e24], "covered": [True, True]})
    dust = Table({"epoch": ["e1"], "aperture_km": [1000.0], "wavelength": [2.5], "afrho": [40.0],
                  "afrho_err": [0.3]})
    return BandMeasurements(
        cube_id="e1_ir", epoch="e1", r_h_au=1.4, delta_au=0.9, resolving_power=550.0,
        resolving_power_source="config", doppler=1.0001, centre=(10.0, 11.0), pixel_scale_arcsec=0.2,
        sigma_source="ERR extension", band_ids=("H2O_nu3",), spectra=np.ones((2, 30)), sigma=np.ones((2, 30)),
        continuum=np.ones((1, 2, 30)), wave=Table({"observed": np.linspace(2.4, 2.9, 30) * u.um,
                                                   "rest": np.linspace(2.4, 2.9, 30) * u.um}),
        apertures=Table({"radius_km": [1000.0, 3000.0] * u.km, "radius_pix": [5.0, 15.0], "area_pix": [78.5, 707.0]}),
        bands=bands, dust=dust, colour=Table(names=["cube_id"], dtype=[str]))


def test_band_measurements_round_trip_with_units(tmp_path):
    path = tmp_path / "bands.fits"
    _bands().to_fits().writeto(path)
    with fits.open(path) as hdul:
        assert BandMeasurements.is_bands_file(hdul[0].header)
    back = BandMeasurements.from_fits(path)
    assert (back.cube_id, back.epoch, back.band_ids, back.centre) == ("e1_ir", "e1", ("H2O_nu3",), (10.0, 11.0))
    assert back.doppler == 1.0001 and back.resolving_power == 550.0
    # every measured column has its unit (astropy reads TUNIT back as the unit written)
    q = QTable(back.bands)
    assert q["q"].unit == 1 / u.s and q["aperture_km"].unit == u.km
    assert QTable(back.dust)["afrho"].unit == u.cm and QTable(back.dust)["wavelength"].unit == u.um
    assert not back.dust.meta                          # no FITS bookkeeping cards carried into the table
    with fits.open(path) as hdul:
        assert not BandMeasurements.is_bands_file(fits.Header())


def test_species_stack_round_trip(tmp_path):
    density = np.arange(2 * 2 * 11, dtype=float).reshape(2, 2, 11)
    inputs = Table({"epoch": ["e1"], "t_kin": [40.0], "q": [1e25], "sigma_q": [1e24], "outflow": [0.7]})
    summary = Table({"epoch": ["all"], "t_kin": [40.0], "aperture_index": [0], "aperture_km": [1000.0],
                     "q": [1e25], "sigma_q": [1e24], "lines": ["HCN_265886"], "cubes": ["c1"]})
    stack = SpeciesStack(species="HCN", n_inputs=1, spectra={"all": StackedSpectrum("all", density, -1.25, 0.25)},
                         inputs=inputs, summary=summary)
    path = tmp_path / "stack.fits"
    stack.to_fits().writeto(path)
    back = SpeciesStack.from_fits(path)
    assert back.species == "HCN" and back.n_inputs == 1 and list(back.spectra) == ["all"]
    np.testing.assert_array_equal(back.spectra["all"].density, density)
    # the axis: v_i = v_start + i * step (FITS WCS paper I, CRPIX = 1)
    np.testing.assert_allclose(back.spectra["all"].velocity, -1.25 + 0.25 * np.arange(11), rtol=0, atol=1e-15)
    assert QTable(back.summary)["q"].unit == 1 / u.s and QTable(back.inputs)["outflow"].unit == u.km / u.s


def test_epoch_inputs_round_trip_bit_for_bit(tmp_path):
    # the per-epoch cache of the stack: every array comes back exactly (float64), lines and bands alike, so a
    # stack made from the cache equals one made from the spectra
    from astropy.table import Table

    from pipeline.io.products import EpochInputs
    from pipeline.rates.stacking import StackInput

    rng = np.random.default_rng(2)
    line = StackInput(epoch="e1", cube_id="c1", line_id="HCN_265886", velocity=np.linspace(-5, 5, 21),
                      density=rng.normal(size=(3, 2, 21)), q=rng.normal(size=(3, 2)), sigma_q=rng.random((3, 2)),
                      radius_km=np.array([1000.0, 3000.0]), apertures=("1000 km", "3000 km"),
                      curve=rng.random((7, 2)), nonlte_curve=rng.random((7, 2)), window=1.25,
                      distributed_ratio=np.array([0.5, 0.7]))
    band = StackInput(epoch="e1", cube_id="c2", line_id="CO_v1-0", velocity=None, density=None,
                      q=rng.normal(size=(3, 1)), sigma_q=rng.random((3, 1)), radius_km=np.array([500.0]),
                      apertures=("0.4 arcsec",))
    rows = Table({"cube_id": ["c1", "c2"], "line_id": ["HCN_265886", "CO_v1-0"], "scale": [1.5, np.nan]})
    path = tmp_path / "e1.fits"
    EpochInputs(species="HCN", epoch="e1", inputs=[line, band], rows=rows, skipped=["c3:HCN_354505"]).to_fits() \
        .writeto(path)
    back = EpochInputs.from_fits(path)
    assert (back.species, back.epoch, back.skipped) == ("HCN", "e1", ["c3:HCN_354505"])
    got_line, got_band = back.inputs
    for name in ("velocity", "density", "q", "sigma_q", "radius_km", "curve", "nonlte_curve", "distributed_ratio"):
        np.testing.assert_array_equal(getattr(got_line, name), getattr(line, name))
    assert (got_line.apertures, got_line.window, got_line.cube_id) == (line.apertures, 1.25, "c1")
    assert got_band.velocity is None and got_band.density is None and got_band.curve is None
    assert got_band.nonlte_curve is None
    assert np.isnan(got_band.window)
    np.testing.assert_array_equal(got_band.q, band.q)
    assert np.isnan(back.rows["scale"][1]) and not hasattr(back.rows["scale"], "mask")
