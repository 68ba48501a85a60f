"""Water inferred from tracers: Q(H2O) = Q(tracer) / x over an abundance range (closed-form arithmetic)."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable

from pipeline.budget.tracers import TracerAbundance, inferred_water


def _limits():
    return QTable({"species": ["HCN", "HCN", "CH3OH", "CO"], "epoch": ["all", "all", "all", "all"],
                   "aperture_km": [1000.0, 1000.0, 1000.0, 1000.0] * u.km,
                   "q": [2.0e25, 9.0e25, 1.0e26, 1.0e25] / u.s, "q_err": [3.0e23, 1e24, 1.0e26, 1e25] / u.s,
                   "q_sys": [4.0e23, np.nan, np.nan, np.nan] / u.s, "q_upper": [2.2e25, 9.3e25, 4.0e26, 4e25] / u.s,
                   "detected": [True, True, False, False], "adopted": [True, False, True, True]})


def _budget():
    return QTable({"assumption_set": ["baseline"] * 2, "species": ["H2O", "H2O"], "epoch": ["all", "e1"],
                   "q_required_min": [1.0e29, 5e28] / u.s, "q_required_max": [1.0e31, 5e30] / u.s})


def test_a_detection_and_a_limit_become_water_ranges():
    tracers = (TracerAbundance("HCN", 0.001, 0.002, "a review"), TracerAbundance("CH3OH", 0.01, 0.05, "a review"))
    w = inferred_water(_limits(), _budget(), tracers)
    assert list(w["tracer"]) == ["HCN", "CH3OH"]             # only the quoted (adopted) rows, configured tracers
    hcn, meoh = w[0], w[1]
    err = np.hypot(3.0e23, 4.0e23)                            # statistical and temperature errors in quadrature
    assert hcn["q_h2o_low"].value == pytest.approx((2.0e25 - 2 * err) / 0.002)
    assert hcn["q_h2o_high"].value == pytest.approx((2.0e25 + 2 * err) / 0.001)
    assert meoh["kind"] == "upper limit" and meoh["q_h2o_low"].value == 0.0
    assert meoh["q_h2o_high"].value == pytest.approx(4.0e26 / 0.01)
    # 2.1e28 /s at most against 1e29 needed: short by 1e29 / 2.1e28 = 4.76
    assert "falls short of the push by at least 4.76x (inference)" in hcn["reading"]
    assert w.meta["caution"].startswith("an inference")


def test_no_tracers_no_rows():
    assert len(inferred_water(_limits(), _budget(), ())) == 0
