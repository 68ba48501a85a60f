"""The non-LTE comparison beside the LTE sweep: each input's nonlte_ratio (pipeline.rates.q_units.stack_input) and
the limits' q_nonlte columns (pipeline.workflow.limits).

External references: the ratio is checked against the public response of pipeline.coma.response computed
separately under each model (line_response_on_grid, itself checked against closed-form Haser columns and a
Radau-integrated reference in tests/coma/test_nonlte_response.py); q_nonlte against the inverse-variance mean
written out here (w_i = 1 / s_i^2, Q = sum w_i q_i / sum w_i, sigma = (sum w_i)^-1/2; the maximum-likelihood
common value of Gaussian estimates, textbook, from memory).
"""

import logging
from dataclasses import replace
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
import yaml
from astropy.table import Table
from cubes import write_subcube
from scipy.signal import fftconvolve

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.departure import NonLteSettings
from pipeline.coma.image import apply_spectral_response, beam_kernel, model_line_cube
from pipeline.coma.response import ComaModel, GridGeometry, line_response_on_grid
from pipeline.io.products import LineSpectra, SubCube
from pipeline.rates import q_units
from pipeline.rates.limits_table import limit_rows
from pipeline.rates.q_units import nonlte_comparison, stack_input
from pipeline.rates.temperature import TEMPERATURE_GRID, WindowMeasure, q_at_temperature
from pipeline.settings import Settings, validate_config
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra
from pipeline.workflow.limits import _nonlte_columns

CAT = load_catalogue()
T_SWEEP = [10.0, 40.0] * u.K
R_H, DELTA = 1.0 * u.au, 0.6 * u.au


def _nonlte(q_h2o: float = 4e26) -> NonLteSettings:
    # water photodestruction rate at 1 au of the built-in catalogue's H2O entry (quiet Sun)
    return NonLteSettings(q_h2o_per_s=q_h2o, h2o_rate_1au_per_s=CAT.get_species("H2O").photo_rate("quiet").value,
                          x_ne=0.2, sigma_cm2=5e-14, steady_state=False)


def _spectra(tmp_path, line_id: str, q: float) -> LineSpectra:
    """A seeded model coma of one line through the real extraction (two apertures, a 1 arcsec beam)."""
    line = CAT.get_line(line_id)
    shape, pix = (200, 30, 30), 0.4
    vel = -0.25 * (shape[0] // 2) + 0.25 * np.arange(shape[0])
    signal = model_line_cube(shape[1:], 14.5, 14.5, pix, vel, line, CAT.get_species(line.species), q, 40 * u.K, R_H,
                             DELTA, (1.0, 1.0, 0.0), ComaModel(), spectral_response=None)
    kernel = beam_kernel(1.0 / pix, 1.0 / pix, 0.0)
    noise = fftconvolve(np.random.default_rng(5).standard_normal(shape), (kernel / np.sqrt(np.sum(kernel**2)))[None],
                        mode="same", axes=(1, 2))
    cube = apply_spectral_response(signal + 0.004 * noise, "hanning")
    path = write_subcube(tmp_path / f"{line_id}.fits", np.zeros(shape), line_id=line.line_id,
                         rest_hz=line.freq.to_value(u.Hz), channel_km_s=0.25, delta_au=DELTA.to_value(u.au),
                         pixel_arcsec=pix)
    settings = ExtractionSettings(radii=[300 * u.km, 1000 * u.km], window=1.5 * 0.85 * u.km / u.s,
                                  other_lines=[] * u.km / u.s)
    spectra = extract_spectra(SubCube.from_fits(path), settings, data=cube, offsource=False)
    return LineSpectra.from_fits(spectra.to_fits())


def _grid(spectra: LineSpectra) -> GridGeometry:
    """The extraction's grid of ``spectra`` (pixels, apertures, beam), as stack_input builds it."""
    pixel = spectra.pixel_scale_arcsec
    return GridGeometry(shape=spectra.grid_shape, x=spectra.centre[0], y=spectra.centre[1], pixel_arcsec=pixel,
                        radii_pix=list(np.asarray(spectra.apertures["radius_pix"], dtype=float)),
                        beam_pix=(spectra.beam_deg[0] * 3600 / pixel, spectra.beam_deg[1] * 3600 / pixel,
                                  spectra.beam_deg[2]))


def test_the_ratio_is_the_responses_under_both_models_and_the_lte_numbers_do_not_move(tmp_path):
    spectra = _spectra(tmp_path, "HCN_265886", 2e25)
    off, rows_off = stack_input(spectra, CAT, T_SWEEP, ComaModel())
    on, rows_on = stack_input(spectra, CAT, T_SWEEP, ComaModel(), comparison=_nonlte())
    # the LTE numbers bit for bit
    for name in ("q", "sigma_q", "density", "curve"):
        assert np.array_equal(getattr(off, name), getattr(on, name)), name
    assert [r["scale"] for r in rows_off] == [r["scale"] for r in rows_on]
    assert all(np.isnan(r["nonlte_ratio"]) for r in rows_off)
    # the reference: the response of the same grid computed by line_response_on_grid under each model (HCN J=3-2
    # has no blended partner, so the window's ratio is the line's)
    line, species = CAT.get_line("HCN_265886"), CAT.get_species("HCN")
    grid = _grid(spectra)
    lte, _ = line_response_on_grid(line, species, None, T_SWEEP, spectra.meta.r_h, spectra.meta.delta, grid,
                                   ComaModel())
    nlte, _ = line_response_on_grid(line, species, None, T_SWEEP, spectra.meta.r_h, spectra.meta.delta, grid,
                                    ComaModel(excitation=_nonlte()))
    want = (nlte / lte).decompose().value
    got = np.array([r["nonlte_ratio"] for r in rows_on]).reshape(want.shape)
    np.testing.assert_allclose(got, want, rtol=1e-12)
    assert np.all(got != 1.0)                   # a real departure at Q(H2O) = 4e26 /s
    # under model nonlte the inputs are already non-LTE: no comparison
    _, rows_nlte = stack_input(spectra, CAT, T_SWEEP, ComaModel(excitation=_nonlte()), response_curve=False,
                               comparison=_nonlte())
    assert all(np.isnan(r["nonlte_ratio"]) for r in rows_nlte)


def test_with_an_interferometer_the_ratio_includes_the_filtering_of_the_non_lte_brightness(tmp_path):
    """The non-LTE brightness is more compact than the Haser column, so more of it survives the missing short
    spacings; the comparison's ratio is then that of the filtered responses under each model (line_response_on_grid
    with the baseline; the weighted surviving fraction itself is checked against a Hankel-transform closed form in
    tests/coma/test_filtering.py)."""
    spectra = _spectra(tmp_path, "HCN_265886", 2e25)
    baseline = 15 * u.m
    _, rows = stack_input(spectra, CAT, T_SWEEP, ComaModel(), shortest_baseline=baseline, response_curve=False,
                          comparison=_nonlte())
    _, rows_open = stack_input(spectra, CAT, T_SWEEP, ComaModel(), response_curve=False, comparison=_nonlte())
    line, species = CAT.get_line("HCN_265886"), CAT.get_species("HCN")
    grid = _grid(spectra)
    args = (line, species, None, T_SWEEP, spectra.meta.r_h, spectra.meta.delta, grid)
    lte, s_lte = line_response_on_grid(*args, ComaModel(), baseline)
    nlte, s_nlte = line_response_on_grid(*args, ComaModel(excitation=_nonlte()), baseline)
    want = (nlte / lte).decompose().value
    got = np.array([r["nonlte_ratio"] for r in rows]).reshape(want.shape)
    np.testing.assert_allclose(got, want, rtol=1e-12)
    assert np.all(s_nlte[:, 0] > s_lte[:, 0])                     # the inner aperture keeps more of it
    open_ratio = np.array([r["nonlte_ratio"] for r in rows_open]).reshape(want.shape)
    assert np.all(np.abs(got / open_ratio - 1) > 1e-3)            # the filtering changes the comparison


def test_the_non_lte_curve_gives_q_at_a_temperature_off_the_sweep(tmp_path):
    """T_kin taken from a measured rotational temperature lies between the sweep's temperatures: Q under non-LTE
    there comes from the input's non-LTE S(T). Reference: at the temperatures where the curve is computed (every
    20th point of TEMPERATURE_GRID, the 13 capture temperatures) it must equal the response computed separately
    under the non-LTE model, line_response_on_grid times the window capture (the ratio test above checks that
    against the closed forms), and Q there must be flux / S_nonLTE exactly as at a sweep temperature."""
    spectra = _spectra(tmp_path, "HCN_265886", 2e25)
    capture = TEMPERATURE_GRID[::20]
    np.testing.assert_allclose(capture, np.geomspace(5.0, 300.0, 13), rtol=1e-14)   # the grids' construction
    t_on = capture[[4, 7]] * u.K                                           # 19.6 K and 55.3 K
    inp, rows = stack_input(spectra, CAT, t_on, ComaModel(), comparison=_nonlte())
    assert inp.nonlte_curve is not None and inp.nonlte_curve.shape == inp.curve.shape
    want = np.array([r["scale"] * r["nonlte_ratio"] for r in rows]).reshape(2, -1)
    np.testing.assert_allclose(inp.nonlte_curve[[80, 140]], want, rtol=1e-9)
    # without the comparison there is no curve, and under model nonlte neither (its curve already is non-LTE)
    assert stack_input(spectra, CAT, t_on, ComaModel())[0].nonlte_curve is None
    assert stack_input(spectra, CAT, t_on, ComaModel(excitation=_nonlte()), comparison=_nonlte())[0].nonlte_curve \
        is None
    # Q under non-LTE at a temperature between the two: each measure's flux over its non-LTE S(T), combined by
    # inverse variance (here one measure per aperture)
    flux = np.array([r["q"] * r["scale"] for r in rows]).reshape(2, -1)
    for j, label in enumerate(inp.labels):
        measure = WindowMeasure(epoch="e1", cube_id="c", line_id="HCN_265886", aperture=label, aperture_km=1.0,
                                kind="line", flux=flux[0, j], sigma=1.0, curve=inp.curve[:, j],
                                nonlte_curve=inp.nonlte_curve[:, j])
        q_on = q_at_temperature([measure], float(t_on[0].value), nonlte=True)[0]
        assert q_on == pytest.approx(rows[j]["q"] / rows[j]["nonlte_ratio"], rel=1e-9)
        t_mid = 33.0                                                         # between capture temperatures
        k = np.searchsorted(TEMPERATURE_GRID, t_mid)
        lo, hi = sorted(flux[0, j] / inp.nonlte_curve[[k - 1, k], j])
        assert lo <= q_at_temperature([measure], t_mid, nonlte=True)[0] <= hi
        assert np.isnan(q_at_temperature([replace(measure, nonlte_curve=None)], t_mid, nonlte=True)[0])


def test_a_species_without_a_non_lte_model_is_left_out_with_a_note(tmp_path, caplog, monkeypatch):
    spectra = _spectra(tmp_path, "CH3OH_241791", 3e26)
    monkeypatch.setattr(q_units, "_NOT_COMPARED", set())          # the note is given once per species and process
    with caplog.at_level(logging.INFO, logger="pipeline.rates.q_units"):
        inp, rows = stack_input(spectra, CAT, T_SWEEP, ComaModel(), response_curve=False, comparison=_nonlte())
    assert all(np.isnan(r["nonlte_ratio"]) for r in rows)
    assert np.all(np.isfinite(inp.q))
    assert any("CH3OH: no non-LTE comparison" in m and "excitation.molecular_data.CH3OH" in m
               for m in caplog.messages)


def test_the_comparison_settings_come_from_q_h2o_under_model_lte():
    demo = yaml.safe_load((Path(__file__).resolve().parents[2] / "config" / "config.yaml").read_text())

    def settings(excitation: dict) -> Settings:
        return Settings.from_config(validate_config({**demo, "excitation": excitation}, source="c"))

    assert nonlte_comparison(settings({"t_kin_K": [10, 40]})) is None
    given = settings({"t_kin_K": [10, 40], "q_h2o_per_s": 3e27, "x_ne": 0.3})
    assert given.coma.excitation is None                     # the quoted results stay LTE
    cmp = nonlte_comparison(given)
    assert (cmp.q_h2o_per_s, cmp.x_ne) == (3e27, 0.3)
    assert nonlte_comparison(settings({"model": "nonlte", "q_h2o_per_s": 3e27})) is None
    # the demo campaign compares at its scenario's water production rate
    assert nonlte_comparison(Settings.from_config(validate_config(demo, source="c"))).q_h2o_per_s == 4e26


# ----------------------------------------------------------------------------- the limits' q_nonlte columns
def _inputs(rows: list[tuple]) -> Table:
    names = ("epoch", "cube_id", "line_id", "t_kin", "aperture", "q", "sigma_q", "kind", "nonlte_ratio")
    return Table(rows=rows, names=names)


def _sweep(inputs: Table, group: str) -> Table:
    """The limits rows and the stack's summary rows of one group (two temperatures, one aperture)."""
    t = np.array([10.0, 40.0])
    summary = Table(rows=[(group, x, 0, "1000 km") for x in t], names=("epoch", "t_kin", "aperture_index",
                                                                       "aperture"))
    rows = limit_rows("HCN", group, t * u.K, [1000.0] * u.km, np.ones((2, 1)) / u.s, np.ones((2, 1)) / u.s, 3.0,
                      ["HCN_265886"], ["c1"])
    _nonlte_columns(rows, summary, t, inputs, group)
    return rows


def test_one_input_gives_q_over_its_ratio_exactly():
    inputs = _inputs([("e1", "c1", "HCN_265886", 10.0, "1000 km", 3.0e25, 1.0e24, "line", 0.8),
                      ("e1", "c1", "HCN_265886", 40.0, "1000 km", 2.0e25, 0.5e24, "line", 1.25)])
    rows = _sweep(inputs, "e1")
    assert rows["q_nonlte"].to_value(1 / u.s).tolist() == [3.0e25 / 0.8, 2.0e25 / 1.25]
    assert rows["q_nonlte_err"].to_value(1 / u.s).tolist() == pytest.approx([1.0e24 / 0.8, 0.5e24 / 1.25],
                                                                           rel=1e-15)
    assert np.all(rows["q_nonlte_upper"] > rows["q_nonlte"])


def test_two_inputs_and_a_band_combine_by_inverse_variance():
    inputs = _inputs([("e1", "c1", "HCN_265886", 10.0, "1000 km", 3.0e25, 1.0e24, "line", 0.8),
                      ("e2", "c2", "HCN_265886", 10.0, "1000 km", 2.0e25, 2.0e24, "line", 0.5),
                      ("e2", "c3", "B1", 10.0, "1000 km", 2.5e25, 3.0e24, "band", np.nan),
                      ("e1", "c1", "HCN_265886", 40.0, "1000 km", 1.0e25, 1.0e24, "line", 2.0),
                      ("e2", "c2", "HCN_265886", 40.0, "1000 km", 1.0e25, 1.0e24, "line", 2.0),
                      ("e2", "c3", "B1", 40.0, "1000 km", 2.5e25, 3.0e24, "band", np.nan)])
    rows = _sweep(inputs, "all")
    # closed form at 10 K: q_i / r_i with sigma_i / r_i, the band's ratio 1
    q = np.array([3.0e25 / 0.8, 2.0e25 / 0.5, 2.5e25])
    s = np.array([1.0e24 / 0.8, 2.0e24 / 0.5, 3.0e24])
    w = 1 / s**2
    assert rows["q_nonlte"][0].to_value(1 / u.s) == pytest.approx(np.sum(w * q) / np.sum(w), rel=1e-13)
    assert rows["q_nonlte_err"][0].to_value(1 / u.s) == pytest.approx(np.sum(w) ** -0.5, rel=1e-13)
    # one epoch's group takes only its own inputs
    assert _sweep(inputs, "e1")["q_nonlte"][1].to_value(1 / u.s) == 1.0e25 / 2.0


def test_without_the_comparison_the_columns_are_nan():
    lines = _inputs([("e1", "c1", "HCN_265886", 10.0, "1000 km", 3.0e25, 1.0e24, "line", np.nan),
                     ("e1", "c1", "HCN_265886", 40.0, "1000 km", 2.0e25, 0.5e24, "line", np.nan)])
    assert np.all(np.isnan(_sweep(lines, "e1")["q_nonlte"]))
    lines.remove_column("nonlte_ratio")                   # a stack made before the column existed
    assert np.all(np.isnan(_sweep(lines, "e1")["q_nonlte_err"]))
