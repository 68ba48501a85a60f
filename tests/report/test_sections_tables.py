"""The report's tables: assumptions as quantities, activity fits with χ²/dof and bounds, τ beside its row,
injections split by instrument and placement kind, collapsible provenance."""

import math
import re

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable

from pipeline.io.atomic import write_table
from pipeline.report.sections import (activity_table_html, assumption_text, assumptions_section, injection_section,
                                      provenance_section, quoted_section, t_kin_text)


def test_assumptions_print_as_quantities_not_python():
    # nucleus mass from radius and density: M = 4/3 pi R^3 rho (closed form), 0.15 km at 300 kg/m^3 and 0.6 km at
    # 1000 kg/m^3 give 4.24e9 and 9.05e11 kg: the numbers the budget stores and the report must print
    low = 4 / 3 * math.pi * 150.0**3 * 300.0
    high = 4 / 3 * math.pi * 600.0**3 * 1000.0
    base = {"assumption_set": "baseline", "acceleration_m_s2": [2.4e-6, 3e-7], "nucleus_mass_kg": [low, high],
            "nucleus_radius_km": [0.15, 0.6], "bulk_density_kg_m3": [300.0, 1000.0], "nucleus_from": "radius and density",
            "ejection_speed_km_s": 0.3, "g_law_variant": None, "interval_days": 30.0, "momentum_efficiency": 1.0}
    other = dict(base, assumption_set="line-shift zeta", momentum_efficiency=0.1043)
    summary = {"assumptions": dict(base, dust="not included"), "assumption_sets": [base, other]}
    out = assumptions_section({"nsigma": 3, "coma": "Haser"}, summary)
    assert "4.24e9 – 9.05e11 kg (nucleus radius 0.15 – 0.6 km, bulk density 300 – 1000 kg/m³)" in out
    assert "2.4e-6 ± 3e-7 m/s²" in out and "0.3 km/s" in out and "30 d" in out and "not given" in out
    assert re.search(r'<td class="[^"]*differs">0.1043</td>', out)               # the one entry the second set changes
    assert "[" not in re.sub(r"<[^>]+>", "", out) and "null" not in out and "None" not in out
    assert assumption_text("speed_km_s", 0.1) == ("speed", "0.1 km/s")


def test_activity_fit_at_a_bound_is_unconstrained_and_every_fit_shows_chi2():
    act = QTable({"species": ["CO", "H2O", "HCN"], "aperture_km": [1000.0] * 3, "t_kin_K": [80.0, 20.0, 10.0],
                  "slope": ["fitted", "fixed", "fitted"], "n": [19.9999992, 2.0, -0.96],
                  "n_lo": [np.nan, np.nan, -1.78], "n_hi": [np.nan, np.nan, -0.15], "n_constrained": [False, False, True],
                  "q0": [4.6e26, 6.1e26, 3.1e25] / u.s, "q0_err": [6.8e26, 6e24, 7e23] / u.s,
                  "q0_upper": [2.5e27, 6.3e26, 3.3e25] / u.s, "chi2": [4.0, 422.0, 1.92], "dof": [1, 1, 1],
                  "n_epochs": [3, 2, 3], "r_h_min": [1.2] * 3, "r_h_max": [1.3] * 3})
    act.meta["slope_range"] = [-10.0, 20.0]       # a table written before the n_at_bound column: the meta decides
    out = activity_table_html(act)
    assert "unconstrained (at bound +20)" in out and "19.99" not in out
    # chi^2 with one dof: P(>chi^2) = erfc(sqrt(chi^2 / 2)) (closed form); chi^2 = 4 -> 0.0455
    assert f"4 / 1 (p = {math.erfc(math.sqrt(2.0)):.2g})" in out
    assert re.search(r'<td class="warn">422 / 1 \(p = [0-9.e-]+\): the law does not fit</td>', out)
    assert "-0.96 (-1.78 – -0.15, 1σ)" in out
    act["n_at_bound"] = [np.nan, np.nan, np.nan]          # the column wins over the meta when present
    assert "unconstrained (at bound" not in activity_table_html(act)


def _limits_row(**kw):
    row = {"species": "HCN", "epoch": "all", "aperture_km": 1000.0 * u.km, "t_kin_K": 10.0, "q": 3.9e25 / u.s,
           "q_err": 9e23 / u.s, "q_upper": 4.2e25 / u.s, "detected": True, "q_sys": np.nan / u.s,
           "q_distributed": np.nan / u.s, "q_distributed_err": np.nan / u.s, "tau_peak": 0.21, "t_origin": "measured",
           "t_source": "CH3OH (all, 1000 km)", "adopted": True, "conservative": True, "opacity_factor": 1.1,
           "opacity_corrected": False, "confidence": 0.99865}
    row.update(kw)
    return row


def _limits(rows):
    return QTable(rows=rows)


def test_opacity_warning_sits_in_its_row_and_other_temperatures_are_named():
    thick = _limits_row()
    thin = _limits_row(species="CO", tau_peak=0.02, detected=True)
    other = _limits_row(t_kin_K=5.0, tau_peak=0.4, adopted=False, conservative=False)
    out = quoted_section(_limits([thick, thin, other]))
    rows = re.findall(r"<tr>(.*?)</tr>", out)
    hcn = [r for r in rows if ">HCN<" in r]
    co = [r for r in rows if ">CO<" in r]
    assert len(hcn) == 1 and '<td class="warn">0.21: not thin, Q is a lower bound</td>' in hcn[0]
    assert "warn" not in co[0]
    assert "HCN up to τ = 0.4 (epoch all, 1000 km, T_kin 5 K)" in out


def test_t_kin_printed_alike_with_or_without_a_unit():
    assert t_kin_text(80.0) == t_kin_text(80.0 * u.K) == "80"
    assert t_kin_text(52.93 * u.K) == "52.9" and t_kin_text(np.ma.masked) == "–"


def _injection_table(species, split=True):
    rows = []
    for level, q in (("limit", 4e25), ("required", 7e26)):
        for inst, kind, idx, sigma in (("infrared", "nucleus", 0, 1e25), ("millimetre", "nucleus", 0, 8e26),
                                       ("millimetre", "ring", 1, 9e26), ("millimetre", "ring", 2, 9e26)):
            rows.append({"level": level, "q_injected": q / u.s, "t_kin_K": 80.0, "instrument": inst,
                         "placement_kind": kind, "placement": idx, "velocity_slot": 0, "aperture_km": 1000.0 * u.km,
                         "q_recovered": q / u.s, "q_err": sigma / u.s, "snr": q / sigma, "n_spectra": 2})
    t = QTable(rows=rows)
    if not split:
        t.remove_columns(["instrument", "placement_kind"])
    t.meta["species"] = species
    t.meta["instrument_cubes"] = {"infrared": ["e1_ir"], "millimetre": ["e1_co"]}
    return t


def test_injection_rows_split_by_instrument_and_placement_and_caption_fits_detections(tmp_path):
    write_table(_injection_table("CO"), tmp_path / "CO.ecsv")
    write_table(_injection_table("CH3OH", split=False), tmp_path / "CH3OH.ecsv")
    limits = _limits([_limits_row(species="CO", detected=False, t_kin_K=80.0),
                      _limits_row(species="CH3OH", detected=True, t_kin_K=80.0)])
    out = injection_section([str(tmp_path / "CO.ecsv"), str(tmp_path / "CH3OH.ecsv")], limits,
                            {"e1_ir": "spacecraft: Far Lamp (fictional)", "e1_co": "site: Hill (fictional)"})
    rows = [r for r in re.findall(r"<tr>(.*?)</tr>", out) if ">CO<" in r]
    assert len(rows) == 6                                       # 2 levels x (infrared nucleus, mm nucleus, mm ring)
    assert sum("infrared bands" in r and ">nucleus<" in r for r in rows) == 2
    assert sum("millimetre lines" in r and ">ring<" in r for r in rows) == 2
    assert "Infrared bands: Far Lamp (fictional). Millimetre lines: Hill (fictional)." in out
    ring = [r for r in rows if ">ring<" in r and ">upper limit<" in r][0]
    assert re.search(r"<td[^>]*>2</td>", ring)                                 # two ring placements, never mixed with the nucleus
    # the expected significance of the infrared injection at the limit is Q / sigma = 4e25 / 1e25 = 4
    ir = [r for r in rows if "infrared" in r and ">upper limit<" in r][0]
    assert re.search(r"<td[^>]*>4</td>", ir)
    old = [r for r in re.findall(r"<tr>(.*?)</tr>", out) if ">CH3OH<" in r]
    assert len(old) == 2 and all("all instruments together" in r for r in old)
    assert ">upper end of the detection<" in old[0] and ">upper limit<" not in old[0] + old[1]
    assert "written before instruments were told apart" in out
    assert "For a detected species" in out and "recovered in full" in out


def test_provenance_and_configuration_fold_away():
    out = provenance_section("0.1", {"inputs": {"a.ecsv": "sha256:00"}, "code": "abc"}, {"campaign": "x"})
    assert out.count("<details>") == 2 and "<details open" not in out
    assert "<summary>Configuration of this run (YAML)</summary>" in out and "campaign: x" in out


@pytest.mark.parametrize("value,text", [(None, "not given"), ([1.0, 2.0], "1 – 2 km"), (True, "yes")])
def test_assumption_text_cases(value, text):
    assert assumption_text("radius_km", value)[1] == text
