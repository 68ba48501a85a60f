"""The joint exclusion test: a hand-worked two-epoch example and its behaviour in simulation."""

import numpy as np
import pytest
from scipy import stats

from pipeline.budget.joint_test import exclusion_significance, lr_statistic, mass_at_significance, null_sf


def test_two_epoch_hand_worked():
    # x = (0, 0), sigma = (1, 1), Q_req = (2, 3): T = (0-2)^2 + (0-3)^2 = 13 (the best Q in [0, Q_req] is 0).
    # p = 2/4 P(chi2_1 >= 13) + 1/4 P(chi2_2 >= 13) = 0.5 * 3.1153e-4 + 0.25 * exp(-6.5) = 5.315e-4 -> Z = 3.27
    assert lr_statistic([0, 0], [1, 1], [2, 3]) == pytest.approx(13.0)
    p = 0.5 * stats.chi2.sf(13, 1) + 0.25 * np.exp(-6.5)
    assert null_sf(13.0, 2) == pytest.approx(p, rel=1e-12)
    assert p == pytest.approx(5.315e-4, rel=1e-3)
    assert exclusion_significance([0, 0], [1, 1], [2, 3]) == pytest.approx(stats.norm.isf(p), rel=1e-12)
    # more gas than needed at every epoch: no exclusion at all
    assert exclusion_significance([5, 6], [1, 1], [2, 3]) == 0.0


def test_null_rate_matches_its_nominal_value():
    # with the required gas really there (Q_req >> sigma), Z > 2 happens at the Gaussian tail rate 0.02275
    rng = np.random.default_rng(7)
    q_req = np.array([30.0, 40.0, 35.0])
    z = np.array([exclusion_significance(q_req + rng.standard_normal(3), np.ones(3), q_req) for _ in range(4000)])
    rate, expected = np.mean(z > 2.0), stats.norm.sf(2.0)
    assert abs(rate - expected) < 3 * np.sqrt(expected * (1 - expected) / 4000)


def test_no_gas_excluded_at_the_noise_implied_significance():
    # no gas (x ~ N(0, 1)) while 3 sigma is needed at each of 3 epochs: noise-free T = 27
    q_req = np.full(3, 3.0)
    z0 = stats.norm.isf(null_sf(27.0, 3))
    rng = np.random.default_rng(8)
    z = np.array([exclusion_significance(rng.standard_normal(3), np.ones(3), q_req) for _ in range(2000)])
    assert abs(np.median(z) - z0) < 0.35


def test_mass_at_three_sigma_is_monotone_crossing():
    x, s = np.array([0.0, 0.1]), np.array([1.0, 1.0])
    per_kg = np.array([1e-9, 1.5e-9])
    m3 = mass_at_significance(x, s, per_kg, 3.0)
    assert exclusion_significance(x, s, m3 * per_kg) == pytest.approx(3.0, abs=1e-4)
    assert exclusion_significance(x, s, 0.5 * m3 * per_kg) < 3.0
