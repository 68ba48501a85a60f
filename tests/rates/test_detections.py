"""pipeline.rates.detections: the opacity marking and the optional escape-probability correction of quoted detections."""

import astropy.units as u
import numpy as np
import pytest


def test_opacity_marks_and_optionally_corrects_quoted_detections():
    # tau/(1 - e^-tau) (closed form) applied to quoted detections above tau = 0.1 only with escape_probability
    from astropy.table import QTable

    from pipeline.rates.detections import mark_opacity

    def table():
        return QTable({"q": [10.0, 10.0, 10.0] / u.s, "q_err": [1.0, 1.0, 1.0] / u.s, "q_sys": [2.0, 2.0, 2.0] / u.s,
                       "q_upper": [13.0, 13.0, 13.0] / u.s, "tau_peak": [0.05, 0.5, 0.5],
                       "adopted": [True, True, False], "detected": [True, True, True]})

    plain = table()
    mark_opacity(plain, "none")
    f = 0.5 / (1 - np.exp(-0.5))
    assert list(plain["opacity_factor"]) == pytest.approx([1.0, f, f])
    assert not any(plain["opacity_corrected"]) and plain["q"][1].value == 10.0
    fixed = table()
    mark_opacity(fixed, "escape_probability")
    assert list(fixed["opacity_corrected"]) == [False, True, False]
    assert fixed["q"][1].value == pytest.approx(10.0 * f) and fixed["q_upper"][1].value == pytest.approx(13.0 * f)
    assert fixed["q"][2].value == 10.0
