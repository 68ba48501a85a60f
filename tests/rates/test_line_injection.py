"""Injection-recovery of millimetre lines measured once per placement: data + q x model, by superposition."""

import astropy.units as u
import numpy as np
import pytest
from cubes import subcube

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.response import ComaModel, outflow_speed
from pipeline.rates.line_injection import Q_UNIT, inject_spectra, placements, unit_injections
from pipeline.rates.q_units import stack_input
from pipeline.spectra.line_spectra import extraction_settings

T_SWEEP = [10.0, 40.0] * u.K


@pytest.fixture(scope="module")
def setup():
    catalogue = load_catalogue()
    line = catalogue.get_line("HCN_265886")
    species = catalogue.get_species("HCN")
    rng = np.random.default_rng(11)
    data = rng.normal(0.0, 0.01, (241, 48, 48))          # Jy/beam, 0.3 km/s channels: +-36 km/s
    data[:, :2, :5] = np.nan                              # a blank corner, which the model must see as the data do
    sub = subcube(data, r_h_au=1.3, delta_au=0.8)
    model = ComaModel()
    v_out = outflow_speed(model, sub.meta.r_h)
    what = extraction_settings(line, catalogue, [500 * u.km, 1500 * u.km], 1.5 * v_out, 40 * u.km / u.s)

    def to_q(spectra):
        return stack_input(spectra, catalogue, T_SWEEP, model, response_curve=False)

    return catalogue, line, species, sub, model, what, to_q


def test_data_plus_q_times_model_is_the_direct_injection(setup):
    # superposition (the extraction, baseline and window sum are linear in the data; closed form: L(a + q m) =
    # L(a) + q L(m)): the recovered rate of an injection made and measured directly equals the data's measurement
    # plus q times the model's, at any rate, and its error is the data's noise
    catalogue, line, species, sub, model, what, to_q = setup
    where = placements(sub, what)
    assert len(where) >= 4
    units = unit_injections(sub, what, line, species, T_SWEEP, model, where, to_q)
    for q in (3e24, 4e25):
        for i, t in enumerate(T_SWEEP):
            direct = inject_spectra(sub, what, line, species, q, t, model, where)
            for unit, spectra in zip(units, direct):
                measured, _ = to_q(spectra)
                np.testing.assert_allclose(unit.q_data[i] + q * unit.q_per_q[i], measured.q[i], rtol=1e-9,
                                           atol=1e-9 * float(np.max(measured.sigma_q[i])))
                np.testing.assert_allclose(unit.sigma_q[i], measured.sigma_q[i], rtol=1e-3)


def test_the_model_is_recovered_near_unity_per_unit_rate(setup):
    # the measurement of a model coma per unit rate is ~1: the response divided out is the same coma counted on
    # the same grid (closed form up to pixelisation and the blank corner the apertures avoid)
    catalogue, line, species, sub, model, what, to_q = setup
    units = unit_injections(sub, what, line, species, T_SWEEP, model, placements(sub, what), to_q)
    per_q = np.array([u_.q_per_q for u_ in units])
    assert per_q.shape[1:] == (len(T_SWEEP), 2)
    np.testing.assert_allclose(per_q, 1.0, atol=0.05)
    assert Q_UNIT > 0
    slots = {u_.velocity_slot for u_ in units}
    assert slots == {0, 1}


def test_a_blank_pixel_in_an_aperture_takes_the_measured_route_and_still_superposes(setup, monkeypatch):
    # where an aperture holds a blank pixel the model is measured by adding it to the data (the blank voxel
    # changes the extraction's made-up share); elsewhere from the separable model alone. Both are checked against
    # injections made and measured directly (superposition, closed form as above)
    from pipeline.rates import line_injection

    catalogue, line, species, sub, model, what, to_q = setup
    where = placements(sub, what)
    data = np.array(sub.data, dtype=float)
    data[60, int(round(where[0].y)), int(round(where[0].x))] = np.nan        # inside placement 0's apertures
    holed = subcube(data, r_h_au=1.3, delta_au=0.8)
    calls = []
    real = line_injection.separable_spectra
    monkeypatch.setattr(line_injection, "separable_spectra", lambda *a, **k: calls.append(a[4]) or real(*a, **k))
    units = unit_injections(holed, what, line, species, T_SWEEP, model, where, to_q)
    assert calls and all(c is not None for c in calls)
    holed_here = sum((p.x, p.y) == (where[0].x, where[0].y) for p in where)   # one position, its velocity slots
    assert 0 < holed_here < len(where)
    assert len(calls) == len(where) - holed_here          # once per placement (all temperatures), but the holed ones
    q = 4e25
    for i, t in enumerate(T_SWEEP):
        for unit, spectra in zip(units, inject_spectra(holed, what, line, species, q, t, model, where)):
            measured, _ = to_q(spectra)
            np.testing.assert_allclose(unit.q_data[i] + q * unit.q_per_q[i], measured.q[i], rtol=1e-9,
                                       atol=1e-9 * float(np.max(measured.sigma_q[i])))
