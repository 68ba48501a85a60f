"""The water production rate of the non-LTE excitation taken from the campaign's own H2O measurement
(pipeline.rates.excitation_water), and its use by the epoch's stack inputs and the limits.

External references: the combination of an epoch's bands is the inverse-variance mean written out here
(Q = sum w_i q_i / sum w_i, sigma = (sum w_i)^-1/2, w_i = 1 / sigma_i^2: the maximum-likelihood common value of
independent Gaussian estimates, textbook, from memory).
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from pipeline.coma.departure import NonLteSettings
from pipeline.coma.response import ComaModel
from pipeline.rates.excitation_water import excitation_water, measured_water, model_with_water


def _rows(bands: list[tuple]) -> Table:
    """H2O stack-input rows: (epoch, cube, band, aperture, q, sigma_q), each at two swept temperatures."""
    rows = []
    for t in (10.0, 40.0):
        for epoch, cube, band, aperture, q, s in bands:
            rows.append((epoch, cube, band, t, aperture, q, s, "band"))
    return Table(rows=rows, names=("epoch", "cube_id", "line_id", "t_kin", "aperture", "q", "sigma_q", "kind"))


BANDS = [("e1", "ir1", "H2O_nu3", "1000 km", 4.0e26, 0.4e26),
         ("e1", "ir2", "H2O_nu1", "1000 km", 5.0e26, 1.0e26),
         ("e1", "ir1", "H2O_nu3", "300 km", 3.0e26, 1.0e26),
         ("e2", "ir3", "H2O_nu3", "1000 km", 9.0e26, 9.0e26)]


def test_the_epochs_bands_combine_by_inverse_variance_in_the_best_measured_aperture():
    q, s, text = measured_water(_rows(BANDS), "e1", 3.0)
    w = 1 / np.array([0.4e26, 1.0e26]) ** 2
    want_q = np.sum(w * np.array([4.0e26, 5.0e26])) / np.sum(w)
    assert q.to_value(1 / u.s) == pytest.approx(want_q, rel=1e-14)
    assert s.to_value(1 / u.s) == pytest.approx(np.sum(w) ** -0.5, rel=1e-14)
    assert "1000 km" in text and "ir1:H2O_nu3" in text and "ir2:H2O_nu1" in text and "e1" in text
    assert measured_water(_rows(BANDS), "e3", 3.0) is None          # no water band at that epoch
    lines = _rows(BANDS)
    lines["kind"] = "line"
    assert measured_water(lines, "e1", 3.0) is None                 # only bands are used (T-independent)


def test_a_detection_is_used_else_the_config_key_with_the_reason():
    got = excitation_water("e1", _rows(BANDS), "measured", 4e26, 3.0)
    assert got.origin == "measured" and got.q_h2o_per_s == pytest.approx(4.1379310344827584e26, rel=1e-12)
    weak = excitation_water("e2", _rows(BANDS), "measured", 4e26, 3.0)      # S/N 1: not a detection
    assert (weak.origin, weak.q_h2o_per_s) == ("config", 4e26) and "not a detection" in weak.source
    absent = excitation_water("e3", _rows(BANDS), "measured", 4e26, 3.0)
    assert absent.origin == "config" and "no H2O band measured at e3" in absent.source
    forced = excitation_water("e1", _rows(BANDS), "config", 4e26, 3.0)
    assert forced.origin == "config" and "q_h2o_from is config" in forced.source
    assert excitation_water("e2", _rows(BANDS), "measured", None, 3.0) is None     # nothing to excite with
    assert excitation_water("e1", None, "measured", None, 3.0) is None


def test_the_model_takes_the_epochs_rate_only_under_nonlte():
    nonlte = NonLteSettings(q_h2o_per_s=1e26, h2o_rate_1au_per_s=1.2e-5, x_ne=0.2, sigma_cm2=5e-14,
                            steady_state=False)
    water = excitation_water("e1", _rows(BANDS), "measured", 1e26, 3.0)
    model = model_with_water(ComaModel(excitation=nonlte), water)
    assert model.excitation.q_h2o_per_s == water.q_h2o_per_s
    assert model.excitation.x_ne == 0.2 and model.outflow == "law"
    assert model_with_water(ComaModel(), water) == ComaModel()                      # LTE stays LTE
    assert model_with_water(ComaModel(excitation=nonlte), None).excitation.q_h2o_per_s == 1e26
