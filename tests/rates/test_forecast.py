"""Forecasts against measured noise on synthetic cubes made with the forecast's noise statistics."""

from dataclasses import replace

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.time import Time

from pipeline.io.products import LineSpectra
from pipeline.settings import load_config
from pipeline.geometry.ephemeris import read_ephemeris
from pipeline.rates.forecast import PlannedEpoch, forecast_sigma
from pipeline.workflow import comoving, extract, geometry
from pipeline.coma.response import outflow_speed
from pipeline.rates.q_units import stack_input
from pipeline.settings import Settings
from pipeline.spectra.line_spectra import extraction_settings
from synthetic_cubes import small_scenario, write_scenario


def test_forecast_agrees_with_measurements_within_the_scatter(tmp_path):
    sc = small_scenario()
    sc = replace(sc, production_rates={"HCN": 0.0}, windows=sc.windows[1:2], epochs=sc.epochs[:1], planned=(),
                 noise_jy_beam=0.005)
    measured = []
    for seed in range(6):
        root = tmp_path / f"s{seed}"
        cfg_path = write_scenario(replace(sc, seed=seed + 1), root, results=str(root / "res"), progress=lambda s: None)
        config = load_config(cfg_path)
        settings = Settings.from_config(config)
        cube = settings.with_cube(config["cubes"][0]["id"])
        geometry.run(cube, str(root / "g.ecsv"))
        comoving.run(str(root / "g.ecsv"), "HCN_265886", cube, str(root / "sub.fits"))
        extract.run(str(root / "sub.fits"), settings, str(root / "spec.fits"))
        with fits.open(root / "spec.fits") as hdul:
            inp, _ = stack_input(LineSpectra.from_fits(hdul), settings.catalogue(), settings.t_kin, settings.coma)
        measured.append(inp.sigma_q)
    measured = np.array(measured)                                     # (seed, T, ap)
    catalogue = settings.catalogue()
    line = catalogue.get_line("HCN_265886")
    eph = read_ephemeris(config["target"]["ephemeris"])
    geo = eph.at(Time(sc.epochs[0][1]))
    plan = PlannedEpoch(label="p", time=sc.epochs[0][1], lines=("HCN_265886",), noise_jy_beam=sc.noise_jy_beam,
                        channel_khz=sc.windows[0].channel_khz, beam_arcsec=sc.beam_arcsec,
                        pixel_arcsec=sc.pixel_arcsec, npix=sc.npix, half_width_km_s=sc.half_width_km_s)
    v_out = outflow_speed(settings.coma, float(geo["r_h"].to_value(u.au)) * u.au)
    what = extraction_settings(line, catalogue, settings.apertures, settings.limits.window_factor * v_out,
                               settings.half_width)
    fc = forecast_sigma(plan, line, geo, what, catalogue, settings.t_kin, settings.coma, n_realisations=4,
                        seed=99)
    mean, spread = measured.mean(axis=0), measured.std(axis=0, ddof=1)
    tolerance = 3 * np.sqrt(spread**2 / len(measured) + spread**2 / 4)
    assert np.all(np.abs(fc - mean) < tolerance), (fc / mean)
    assert np.all(fc > 0) and fc.shape == mean.shape
