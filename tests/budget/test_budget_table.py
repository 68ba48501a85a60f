"""The budget table: verdicts, ratios and allowed masses, checked by hand-worked numbers."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable

from pipeline.budget.table import budget_table, rocket_fraction
from pipeline.settings import assumptions_from_config
from pipeline.catalogue.entries import load_catalogue

CAT = load_catalogue()


def _limits(rows):
    return QTable({
        "species": [r[0] for r in rows], "epoch": [r[1] for r in rows],
        "aperture_km": [1000.0] * len(rows) * u.km, "t_kin_K": [40.0] * len(rows),
        "q_upper": [r[2] for r in rows] / u.s, "detected": [False] * len(rows),
    })


def _assume(**kw):
    budget = {"acceleration_m_s2": [2e-6, 2e-7], "interval_days": 30,
              "nucleus": {"radius_km": [0.2, 0.5], "density_kg_m3": [500.0, 500.0]},
              "ejection_speed_km_s": 0.5, "momentum_efficiency": 1.0, "drivers": ["H2O", "CO", "CO2"]}
    budget.update(kw)
    return assumptions_from_config(budget)


def test_hand_worked_budget_row():
    # Hand-worked: M_min = 4/3 pi (200 m)^3 500 kg/m^3 = 1.6755e10 kg; Mdot = M a / v = 1.6755e10 * 2e-6 / 500
    # = 67.02 kg/s; Q(CO) = Mdot / (28.010 u = 4.6512e-26 kg) = 1.4409e27 /s. M_max (R = 500 m) = 2.618e11 kg.
    assume = _assume()
    table = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, assume, CAT)
    row = table[(table["species"] == "CO") & (table["epoch"] == "all")][0]
    assert row["mdot_required_min"].to_value(u.kg / u.s) == pytest.approx(67.02, rel=1e-3)
    assert row["q_required_min"].to_value(1 / u.s) == pytest.approx(1.4409e27, rel=1e-3)
    # largest mass: M = v q m / a = 500 * 1e28 * 4.6512e-26 / 2e-6 = 1.1628e11 kg, inside the range
    assert row["mass_allowed"].to_value(u.kg) == pytest.approx(1.1628e11, rel=1e-3)
    assert row["verdict"] == "excluded above the allowed mass"
    assert row["ratio_min"] == pytest.approx(0.14409, rel=1e-3)


def test_not_observed_is_never_excluded():
    table = budget_table(_limits([("CO", "all", 1e20)]), {"all": 1.0 * u.au}, _assume(), CAT)
    h2o = table[table["species"] == "H2O"][0]
    assert h2o["verdict"] == "not observed" and np.isnan(h2o["q_upper"].value)
    co = table[table["species"] == "CO"][0]
    assert co["verdict"] == "excluded for every mass in the range"


def test_not_excluded_when_limit_is_large():
    table = budget_table(_limits([("CO", "all", 1e35)]), {"all": 1.0 * u.au}, _assume(), CAT)
    assert table[table["species"] == "CO"][0]["verdict"] == "not excluded"


def test_rocket_fraction_rule_of_thumb():
    # common practice (no source): 2e-5 m/s^2 for 30 days at 300 m/s costs about a sixth of the mass
    assume = _assume(acceleration_m_s2=[2e-5, 0.0], ejection_speed_km_s=0.3)
    assert 0.14 < rocket_fraction(assume, 1 * u.au) < 0.18


def test_nongrav_input_uses_g_at_rh():
    # g(1 au) = 1 (Marsden et al. 1973 normalisation): |a| = sqrt(A1^2+A2^2+A3^2) au/d^2 at 1 au
    assume = _assume(nongrav={"A1": 3e-8, "A2": 4e-8, "A3": 0.0})
    assume = type(assume)(**{**assume.__dict__, "acceleration": None})
    table = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, assume, CAT)
    expected = (5e-8 * u.au / u.day**2).to_value(u.m / u.s**2)
    assert table[0]["acceleration"].to_value(u.m / u.s**2) == pytest.approx(expected, rel=2e-3)


def test_nucleus_from_absolute_magnitude_and_albedo():
    # D = 1329 km / sqrt(p) 10^(-H/5) (Fowler & Chillemi 1992): H = 18, p = 0.04..0.25 -> D = 1.6733..0.6693 km
    assume = _assume(nucleus={"absolute_magnitude": 18.0, "albedo": [0.04, 0.25], "density_kg_m3": [500.0, 500.0]})
    assert assume.radius_km[0] == pytest.approx(1329 / np.sqrt(0.25) * 10 ** (-3.6) / 2, rel=1e-9)
    assert assume.radius_km[1] == pytest.approx(1329 / np.sqrt(0.04) * 10 ** (-3.6) / 2, rel=1e-9)
    assert "H = 18" in assume.nucleus_from


def test_thermal_ejection_speed_per_species():
    # sqrt(8 k T / (pi m)) with astropy constants: CO at 100 K -> 0.2748 km/s (k_B, u from astropy)
    import astropy.constants as const

    assume = _assume(ejection_speed_km_s={"thermal_K": 100.0})
    table = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, assume, CAT)
    expected = np.sqrt(8 * const.k_B * 100 * u.K / (np.pi * 28.010 * const.u)).to_value(u.km / u.s)
    row = table[table["species"] == "CO"][0]
    assert row["ejection_speed"].to_value(u.km / u.s) == pytest.approx(expected, rel=1e-4)


def test_assumption_sets_rows_and_g_variant():
    from pipeline.settings import assumption_sets

    budget = {"acceleration_m_s2": [2e-6, 2e-7], "interval_days": 30,
              "nucleus": {"radius_km": [0.2, 0.5], "density_kg_m3": [500.0, 500.0]}, "ejection_speed_km_s": 0.5,
              "momentum_efficiency": 1.0, "drivers": ["CO"],
              "assumption_sets": [{"name": "isotropic-ish", "momentum_efficiency": 0.5}]}
    sets = assumption_sets(budget)
    table = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, sets, CAT)
    assert list(table["assumption_set"]) == ["baseline", "isotropic-ish"]
    # halving the efficiency doubles the required Q (momentum balance M a = zeta Mdot v)
    assert (table["q_required_min"][1] / table["q_required_min"][0]).to_value(u.one) == pytest.approx(2.0, rel=1e-12)
    # a variant g(r) with the water-law constants (Marsden et al. 1973) renormalised: g(1 au) = 1 again
    ng = {"A1": 3e-8, "A2": 4e-8, "A3": 0.0, "g_params": {"r0_au": 2.808, "m": 2.15, "n": 5.093, "k": 4.6142}}
    a = assumption_sets({**budget, "nongrav": ng, "assumption_sets": []})[0]
    a = type(a)(**{**a.__dict__, "acceleration": None})
    t = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, a, CAT)
    assert t[0]["acceleration"].to_value(u.m / u.s**2) == pytest.approx(
        (5e-8 * u.au / u.day**2).to_value(u.m / u.s**2), rel=1e-9)


def test_dust_push_reduces_the_gas_needed():
    # Hand-worked from momentum balance M a = zeta Mdot v + F_dust (same numbers as the hand-worked row above):
    # M_min a = 1.6755e10 kg * 2e-6 m/s^2 = 3.351e4 N; with F_dust = 1.0e4 N the gas supplies 2.351e4 N,
    # Mdot = 2.351e4 / 500 = 47.02 kg/s; M_max = (500 * 1e28 * 4.6512e-26 + 1e4) / 2e-6 = 1.2128e11 kg.
    table = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, _assume(), CAT,
                         dust_force={"all": 1.0e4 * u.N})
    row = table[(table["species"] == "CO") & (table["epoch"] == "all")][0]
    assert row["mdot_required_min"].to_value(u.kg / u.s) == pytest.approx(47.02, rel=1e-3)
    assert row["mass_allowed"].to_value(u.kg) == pytest.approx(1.2128e11, rel=1e-3)
    assert row["dust_force"].to_value(u.N) == pytest.approx(1.0e4)
    # a dust push larger than M a leaves nothing for the gas to do (never a negative requirement)
    big = budget_table(_limits([("CO", "all", 1e28)]), {"all": 1.0 * u.au}, _assume(), CAT,
                       dust_force={"all": 1.0e9 * u.N})
    assert np.all(big["mdot_required_min"].to_value(u.kg / u.s) == 0.0)


def test_dust_forces_read_from_the_dust_table(tmp_path):
    # dust_forces takes each epoch's largest aperture's momentum rate, and nothing unless include_dust is set
    from pipeline.budget.table import dust_forces
    table = QTable({"epoch": ["e1", "e1", "all", "all"], "aperture_km": [1000.0, 3000.0, 1000.0, 3000.0] * u.km,
                    "momentum_rate": [1.0, 3.0, 2.0, np.nan] * u.N})
    path = tmp_path / "dust.ecsv"
    table.write(path, format="ascii.ecsv")
    assert dust_forces(str(path), include=False) == {}
    forces = dust_forces(str(path), include=True)
    assert forces["e1"].to_value(u.N) == 3.0 and "all" not in forces      # a NaN rate is no push at all
