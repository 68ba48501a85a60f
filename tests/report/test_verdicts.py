"""Verdict classes, wording and tables of the report, on budget tables made by the budget code from small limits."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable

from pipeline.budget.table import VERDICTS, budget_table
from pipeline.catalogue.entries import load_catalogue
from pipeline.report.verdicts import (assumption_sets_table, classify, conditions_text, driver_verdicts, sci,
                                      short_label, verdict_section, verdict_sentence)
from pipeline.settings import assumption_sets

CAT = load_catalogue()
BUDGET = {"acceleration_m_s2": [2e-6, 2e-7], "interval_days": 30,
          "nucleus": {"radius_km": [0.2, 0.5], "density_kg_m3": [500.0, 500.0]},
          "ejection_speed_km_s": 0.5, "momentum_efficiency": 1.0, "drivers": ["H2O", "CO", "CO2"],
          "assumption_sets": [{"name": "outflow law", "ejection_speed_km_s": "law"}]}
# Hand-worked (as in tests/budget/test_budget_table.py): M = 4/3 pi R^3 rho gives 1.6755e10 kg (R = 200 m) and
# 2.618e11 kg (R = 500 m); the largest mass a CO limit allows is M = v Q m / a with m(CO) = 28.010 u = 4.6512e-26 kg.
M_LO, M_HI = 1.6755e10, 2.618e11


def _limits():
    # CO: a limit inside the band (partial); CO2: far below it (total); H2O: detected, far above it (none);
    # HCN: a tracer; no row for a fourth driver would make it 'not observed' (CO2 is measured; H2O, CO too)
    rows = [("CO", 1e28, 2e27, 1e27, False), ("CO2", 1e24, 1e23, 1e23, False), ("H2O", 1e31, 9.7e30, 1e29, True),
            ("HCN", 1e25, 9e24, 3e23, True)]
    return QTable({"species": [r[0] for r in rows], "epoch": ["all"] * len(rows),
                   "aperture_km": [1000.0] * len(rows) * u.km, "t_kin_K": [40.0] * len(rows),
                   "q_upper": [r[1] for r in rows] / u.s, "q": [r[2] for r in rows] / u.s,
                   "q_err": [r[3] for r in rows] / u.s, "detected": [r[4] for r in rows]})


def _tables(drivers=("H2O", "CO", "CO2")):
    budget = dict(BUDGET, drivers=list(drivers))
    sets = assumption_sets(budget)
    limits = _limits()
    table = budget_table(limits, {"all": 1.0 * u.au}, sets, CAT)
    return limits, table, [s.as_dict() for s in sets]


def test_classes_follow_the_allowed_mass_and_agree_with_the_budget_strings():
    limits, table, sets = _tables(("H2O", "CO", "CO2", "H2S"))
    verdicts = driver_verdicts(table, limits, ["H2O", "CO", "CO2", "H2S"], sets)
    base = {v.species: v for v in verdicts if v.assumption_set == "baseline"}
    assert {k: v.kind for k, v in base.items()} == {"H2O": "none", "CO": "partial", "CO2": "total",
                                                    "H2S": "unobserved"}
    # the budget's own verdict strings say the same (pipeline.budget.table.VERDICTS, one per class)
    words = dict(zip(("unobserved", "total", "partial", "none"), VERDICTS))
    for r in table[table["epoch"] == "all"]:
        if str(r["species"]) in base and r["assumption_set"] == "baseline":
            assert words[base[str(r["species"])].kind] == r["verdict"]
    # partial: the value said is the closed-form largest mass M = v Q m / a = 500 * 1e28 * 4.6512e-26 / 2e-6
    assert base["CO"].mass_allowed.to_value(u.kg) == pytest.approx(1.1628e11, rel=1e-3)
    assert M_LO < base["CO"].mass_allowed.to_value(u.kg) < M_HI
    assert short_label(base["CO"]) == "excluded above 1.2×10¹¹ kg"


def test_tracers_get_no_verdict():
    limits, table, sets = _tables()
    verdicts = driver_verdicts(table, limits, ["H2O", "CO", "CO2"], sets)
    assert "HCN" in set(table["species"])
    assert {v.species for v in verdicts} == {"H2O", "CO", "CO2"}
    assert len(verdicts) == 3 * 2     # every driver under both sets


def test_classify_boundaries():
    rng = (1e10 * u.kg, 1e12 * u.kg)
    assert classify(np.nan / u.s, np.nan * u.kg, rng) == "unobserved"
    assert classify(1 / u.s, 9.99e9 * u.kg, rng) == "total"
    assert classify(1 / u.s, 1e10 * u.kg, rng) == "partial"
    assert classify(1 / u.s, 1e12 * u.kg, rng) == "none"
    assert classify(1 / u.s, np.inf * u.kg, rng) == "none"       # no push: every mass allowed
    with pytest.raises(ValueError, match="NaN"):
        classify(1 / u.s, np.nan * u.kg, rng)


def test_sentences_name_the_mass_range_its_origin_the_speed_and_the_efficiency():
    limits, table, sets = _tables()
    verdicts = driver_verdicts(table, limits, ["H2O", "CO", "CO2"], sets)
    by = {(v.species, v.assumption_set): v for v in verdicts}
    text = verdict_sentence(by[("CO", "baseline")], sets[0], 3)
    assert f"{sci(M_LO)}–{sci(M_HI)} kg" in text
    assert "radius 0.2–0.5 km" in text and "bulk density 500–500 kg/m³" in text
    assert "0.5 km/s" in text and "momentum efficiency 1" in text
    assert "heavier than 1.2×10¹¹ kg" in text
    assert "cannot carry the push for any nucleus mass" in verdict_sentence(by[("CO2", "baseline")], sets[0], 3)
    assert "is not excluded" in verdict_sentence(by[("H2O", "baseline")], sets[0], 3)
    assert "Q + 3σ" in verdict_sentence(by[("H2O", "baseline")], sets[0], 3)       # a detection's bound
    law = verdict_sentence(by[("CO", "outflow law")], sets[1], 3)
    # the outflow law v = 0.85 km/s (r_h / 1 au)^-1/2 (pipeline.coma.haser.outflow_speed_law) at 1 au
    assert "outflow law" in law and "0.85 km/s at the epochs' mean r_h" in law


def test_conditions_from_absolute_magnitude_and_from_a_mass_range():
    h = {"nucleus_mass_kg": [1e10, 1e12], "nucleus_from": "H = 18 and albedo 0.04-0.1",
         "nucleus_radius_km": [0.3, 0.5], "bulk_density_kg_m3": [300, 1000], "ejection_speed_km_s": {"thermal_K": 200},
         "momentum_efficiency": 0.5}
    text = conditions_text(h, 0.4 * u.km / u.s)
    assert "from H = 18 and albedo 0.04-0.1" in text and "thermal speed at 200 K (0.40 km/s)" in text
    assert "momentum efficiency 0.5" in text
    mass = dict(h, nucleus_from="mass range", nucleus_radius_km=None, bulk_density_kg_m3=None)
    assert "given as a mass range" in conditions_text(mass)


def test_tables_show_a_detected_or_limit_column_and_every_set():
    limits, table, sets = _tables()
    verdicts = driver_verdicts(table, limits, ["H2O", "CO", "CO2"], sets)
    html = verdict_section(verdicts, sets, 3, defaulted=["the nucleus radius is the schema's default"])
    assert "detected / limit" in html and "(Q + 3σ)" in html and "(3σ limit)" in html
    assert "detected: Q = 9.70×10³⁰ ± 1.0×10²⁹" in html
    assert html.count('class="verdict v-total"') >= 2 and 'class="verdict v-partial"' in html
    assert "This verdict rests on a default" in html and "schema&#x27;s default" in html
    grid = assumption_sets_table(verdicts, sets)
    assert grid.count("<th>") == 2 and "v_ej outflow law" in grid and "v_ej 0.5 km/s" in grid


def test_sci_format():
    assert sci(4241150082.3) == "4.2×10⁹"
    assert sci(4110.2, 3) == "4110"
    assert sci(9.96e11) == "1.0×10¹²"
    assert sci(3.3e-5) == "3.3×10⁻⁵"
    assert sci(np.nan) == "–"
