"""Tests of pipeline.rates.limits_table: the column contract, limits against scipy, the conservative flag."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

from pipeline.rates.limits_table import LIMIT_COLUMNS, join_limits, limit_rows, mark_conservative
from pipeline.rates.statistics import bayesian_upper_limit

T_KIN = [10.0, 20.0, 40.0, 80.0] * u.K
APERTURES = [1000.0, 3000.0] * u.km
PER_S = 1 / u.s


def _rows(species="CO", epoch="e1", q=None, s=None, nsigma=3.0):
    rng = np.random.default_rng(41)
    q = rng.normal(0.0, 2.0, (4, 2)) * 1e25 if q is None else q
    s = rng.uniform(0.5, 3.0, (4, 2)) * 1e25 if s is None else s
    return limit_rows(species, epoch, T_KIN, APERTURES, q * PER_S, s * PER_S, nsigma,
                      lines=["CO_230538", "CO_345796", "CO_230538"], cubes=["c1", "c2"]), q, s


def test_column_contract_and_units():
    table, q, s = _rows()
    assert isinstance(table, QTable)
    assert table.colnames[:len(LIMIT_COLUMNS)] == list(LIMIT_COLUMNS)
    assert len(table) == 8
    assert table["aperture_km"].unit == u.km
    for name in ("q", "q_err", "q_upper", "q_upper_classical", "q_upper_fc"):
        assert table[name].unit.is_equivalent(PER_S) and table[name].unit == PER_S, name
    # t_kin_K carries its unit in the name (plain floats, as the report and budget stages read it)
    assert not isinstance(table["t_kin_K"], u.Quantity)
    assert table["detected"].dtype == bool
    # rows run temperature-major: row k = (T index k // n_ap, aperture index k % n_ap)
    assert_allclose(table["t_kin_K"], np.repeat(T_KIN.value, 2))
    assert_allclose(table["aperture_km"].value, np.tile(APERTURES.value, 4))
    assert_allclose(table["q"].value, q.ravel())
    assert_allclose(table["q_err"].value, s.ravel())
    assert_allclose(table["snr"], q.ravel() / s.ravel(), rtol=1e-14)
    assert set(table["lines"]) == {"CO_230538,CO_345796"}
    assert_array_equal(table["n_lines"], 2)
    assert_array_equal(table["n_cubes"], 2)


@pytest.mark.parametrize("nsigma", [2.0, 3.0])
def test_q_upper_is_the_bayesian_limit_at_the_one_sided_confidence(nsigma):
    table, q, s = _rows(nsigma=nsigma)
    cl = stats.norm.cdf(nsigma)           # one-sided confidence of n sigma (scipy)
    assert_allclose(table["confidence"], cl, rtol=1e-14)
    assert_allclose(table["q_upper"].value, bayesian_upper_limit(q.ravel(), s.ravel(), cl), rtol=1e-14)
    # independent: quantile of the posterior N(q, s) truncated to Q >= 0 (flat prior), via scipy truncnorm
    ref = stats.truncnorm.ppf(cl, a=-q.ravel() / s.ravel(), b=np.inf, loc=q.ravel(), scale=s.ravel())
    assert_allclose(table["q_upper"].value, ref, rtol=1e-8)
    # classical limit: closed form q + n sigma
    assert_allclose(table["q_upper_classical"].value, q.ravel() + nsigma * s.ravel(), rtol=1e-14)
    assert np.all(table["q_upper"].value > 0)


def test_detected_flag():
    q = np.array([[3.0, 2.999], [-5.0, 10.0], [0.0, 3.5], [1.0, 2.0]])
    s = np.ones((4, 2))
    table, _, _ = _rows(q=q, s=s, nsigma=3.0)
    # snr >= n sigma (the threshold itself counts as a detection)
    assert_array_equal(table["detected"], [True, False, False, True, False, True, False, False])


def test_mark_conservative_picks_the_largest_q_upper_per_group():
    parts = []
    rng = np.random.default_rng(42)
    for species in ("CO", "HCN"):
        for epoch in ("e1", "e2", "all"):
            q = rng.normal(0, 1, (4, 2))
            s = rng.uniform(0.5, 2, (4, 2))
            parts.append(limit_rows(species, epoch, T_KIN, APERTURES, q * PER_S, s * PER_S, 3.0, ["L"], ["c"]))
    table = mark_conservative(join_limits(parts))
    assert len(table) == 48
    # direct group-by: one flagged row per (species, epoch, aperture), the one with the largest q_upper
    groups = {}
    for i, row in enumerate(table):
        groups.setdefault((row["species"], row["epoch"], row["aperture_km"].value), []).append(i)
    assert len(groups) == 12
    for idx in groups.values():
        qup = table["q_upper"].value[idx]
        flags = np.asarray(table["conservative"])[idx]
        assert flags.sum() == 1
        assert qup[np.argmax(flags)] == qup.max()
    # join_limits order: species, then epochs with 'all' last, then aperture, then temperature
    assert list(table["species"][:24]) == ["CO"] * 24
    assert list(dict.fromkeys(table["epoch"][:24])) == ["e1", "e2", "all"]
    first = table[:8]
    assert_allclose(first["aperture_km"].value, [1000.0] * 4 + [3000.0] * 4)
    assert_allclose(first["t_kin_K"], list(T_KIN.value) * 2)


def test_empty_group_gives_an_empty_table():
    table = limit_rows("CO", "all", [] * u.K, [] * u.km, np.zeros((0, 0)) * PER_S, np.zeros((0, 0)) * PER_S,
                       3.0, [], [])
    assert len(table) == 0
    assert table.colnames[:len(LIMIT_COLUMNS)] == list(LIMIT_COLUMNS)
    assert len(mark_conservative(table)) == 0


def test_the_conservative_row_is_quoted_where_no_detection_at_a_measured_temperature_is():
    # per (species, epoch, aperture): a detection already adopted stays the quoted row; elsewhere the sweep row
    # with the largest limit is (the same rule as the conservative flag); a band-only species needs no temperature
    from pipeline.rates.limits_table import mark_adopted

    def table():
        return QTable({"species": ["HCN"] * 3 + ["CO"] * 2, "epoch": ["all"] * 5,
                       "aperture_km": [1000.0] * 5 * u.km, "q_upper": [4.0, 6.0, 5.0, 2.0, 3.0] / u.s,
                       "t_origin": np.array(["sweep", "sweep", "measured", "sweep", "sweep"], dtype="U16"),
                       "t_source": np.array(["sweep"] * 5, dtype="U64"),
                       "adopted": [False, False, True, False, False]})

    t = mark_adopted(table())
    assert list(t["adopted"]) == [False, False, True, False, True]
    assert t["t_origin"][4] == "conservative" and t["t_source"][4] == "largest limit over the sweep"
    bands = mark_adopted(table(), lines_measured=False)
    assert bands["t_origin"][4] == "not needed"
