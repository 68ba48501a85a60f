"""Forecasts against measured noise on synthetic cubes made with the forecast's noise statistics."""

from dataclasses import replace

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.time import Time

from pipeline.settings import load_config
from pipeline.geometry.ephemeris import read_ephemeris
from pipeline.rates.forecast import PlannedEpoch, forecast_sigma, noise_subcube_header
from pipeline.workflow import comoving, extract, geometry
from pipeline.workflow.common import catalogue_from_config
from pipeline.workflow.extract import extraction_settings
from pipeline.workflow.stack import stack_input
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
        cube = config["cubes"][0]
        geometry.run(cube["path"], cube["id"], cube["epoch"], None, config, str(root / "g.ecsv"))
        comoving.run(cube["path"], str(root / "g.ecsv"), "HCN_265886", config, str(root / "sub.fits"))
        extract.run(str(root / "sub.fits"), config, str(root / "spec.fits"))
        with fits.open(root / "spec.fits") as hdul:
            inp, _ = stack_input(hdul, catalogue_from_config(config), config)
        measured.append(inp.sigma_q)
    measured = np.array(measured)                                     # (seed, T, ap)
    catalogue = catalogue_from_config(config)
    line = catalogue.get_line("HCN_265886")
    eph = read_ephemeris(config["target"]["ephemeris"])
    geo = eph.at(Time(sc.epochs[0][1]))
    plan = PlannedEpoch(label="p", time=sc.epochs[0][1], lines=("HCN_265886",), noise_jy_beam=sc.noise_jy_beam,
                        channel_khz=sc.windows[0].channel_khz, beam_arcsec=sc.beam_arcsec,
                        pixel_arcsec=sc.pixel_arcsec, npix=sc.npix, half_width_km_s=sc.half_width_km_s)
    header, _ = noise_subcube_header(plan, line, geo)
    settings = extraction_settings(header, config, catalogue)
    fc = forecast_sigma(plan, line, geo, settings, catalogue, config, tmp_path, n_realisations=4, seed=99)
    mean, spread = measured.mean(axis=0), measured.std(axis=0, ddof=1)
    tolerance = 3 * np.sqrt(spread**2 / len(measured) + spread**2 / 4)
    assert np.all(np.abs(fc - mean) < tolerance), (fc / mean)
    assert np.all(fc > 0) and fc.shape == mean.shape
