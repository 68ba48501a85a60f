"""The report's excitation section (pipeline.report.excitation): Q under non-LTE beside the LTE sweep, the figure of
the rotational temperature along the outflow, and the caution's excitation clause.

External references for the figure's physics: where collisions dominate, the levels take the Boltzmann distribution
of the gas kinetic temperature, so T_rot = T_kin (thermalisation); with collisions gone and no pumping, statistical
equilibrium with the cosmic background alone is the Boltzmann distribution at T_bg = 2.725 K (detailed balance of
the Einstein coefficients, Rybicki & Lightman 1979, eqs. 1.72-1.73; from memory), so T_rot = 2.725 K; T_rot of two
levels is (E_b - E_a) / ln(x_a g_b / (x_b g_a)) (the Boltzmann ratio inverted, closed form).
"""

import re

import astropy.units as u
import numpy as np
from scipy.stats import norm, truncnorm

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.departure import NonLteSettings
from pipeline.rates.limits_table import limit_rows, mark_conservative
from pipeline.report.excitation import (SECTION_TITLE, excitation_caution, excitation_section, main_lines,
                                        rotational_profiles, water_per_epoch)
from pipeline.report.figures import to_png

CAT = load_catalogue()
T_SWEEP = [10.0, 40.0] * u.K


def _settings(q_h2o: float = 4e26, x_ne: float = 0.2, steady_state: bool = False) -> NonLteSettings:
    # water photodestruction rate at 1 au of the built-in catalogue's H2O entry (quiet Sun); no infrared pumping
    return NonLteSettings(q_h2o_per_s=q_h2o, h2o_rate_1au_per_s=CAT.get_species("H2O").photo_rate("quiet").value,
                          x_ne=x_ne, sigma_cm2=5e-14, steady_state=steady_state)


def _limits(with_nonlte: bool):
    """A limits table of HCN (a detection) and CH3OH (a limit, no non-LTE model) over two temperatures and
    apertures, all epochs combined, as run_species and run_join leave it."""
    tables = []
    for species, lines, q, s, ratio in (("HCN", ["HCN_265886"], 2.0e25, 1.0e24, 0.8),
                                        ("CH3OH", ["CH3OH_241791"], 1.0e25, 2.0e25, np.nan)):
        rows = limit_rows(species, "all", T_SWEEP, [300.0, 1000.0] * u.km, np.full((2, 2), q) / u.s,
                          np.full((2, 2), s) / u.s, 3.0, lines, ["c1"])
        qn = np.full(len(rows), q / ratio if with_nonlte else np.nan)
        sn = np.full(len(rows), s / ratio if with_nonlte else np.nan)
        rows["q_nonlte"] = qn / u.s
        rows["q_nonlte_err"] = sn / u.s
        rows["q_nonlte_upper"] = (qn + 3 * sn) / u.s
        rows["t_origin"] = np.full(len(rows), "sweep", dtype="U16")
        tables.append(rows)
    from astropy.table import vstack
    return mark_conservative(vstack(tables))


def _text(html_text: str) -> str:
    return re.sub(r"<[^>]+>", " ", html_text)


def test_the_section_sets_non_lte_q_beside_the_lte_sweep():
    pngs = []
    body = excitation_section(_limits(True), CAT, T_SWEEP, 3.0, None, _settings(), 1.3 * u.au, 0.75 * u.km / u.s,
                              lambda fig: pngs.append(to_png(fig)) or pngs[-1])
    text = _text(body)
    # HCN at the smallest aperture: Q under LTE, Q / 0.8 under non-LTE, and their ratio 1 / 0.8 = 1.25
    assert "2e+25 ± 1e+24" in text and "2.5e+25 ± 1.2e+24" in text and "1.25" in text
    assert text.count("HCN") >= 2 and " 300 " in text and " 1000 " not in text      # smallest aperture only
    # CH3OH: its LTE limit, no non-LTE Q, and why
    # its limit: the flat-prior posterior on Q >= 0 is a normal truncated at 0 (scipy's truncnorm), at the one-sided
    # confidence of 3 sigma (scipy's normal cdf)
    upper = truncnorm.ppf(norm.cdf(3.0), -1.0e25 / 2.0e25, np.inf, loc=1.0e25, scale=2.0e25)
    assert f"&lt; {upper:.3g}" in text and "No non-LTE Q for CH3OH" in text
    assert len(pngs) == 1 and "Q(H2O) = 4e+26 /s" in text and "x_ne = 0.2" in text
    assert "Not in the figure: CH3OH" in text


def test_without_the_comparison_the_section_says_how_to_get_it():
    body = excitation_section(_limits(False), CAT, T_SWEEP, 3.0, None, None, 1.3 * u.au, 0.75 * u.km / u.s, to_png)
    assert "excitation.q_h2o_per_s" in body and "<table" not in body and "<img" not in body


def test_under_model_nonlte_the_section_quotes_the_non_lte_q():
    pngs = []
    body = excitation_section(_limits(False), CAT, T_SWEEP, 3.0, _settings(), None, 1.3 * u.au, 0.75 * u.km / u.s,
                              lambda fig: pngs.append(to_png(fig)) or pngs[-1])
    text = _text(body)
    assert "Q under non-LTE [1/s]" in text and "Q under LTE" not in text and "2e+25 ± 1e+24" in text
    assert len(pngs) == 1


def test_the_caution_names_the_excitation():
    lte = excitation_caution(None, None)
    assert lte.startswith("LTE excitation") and "excitation.q_h2o_per_s" in lte
    assert SECTION_TITLE in excitation_caution(None, _settings())
    nonlte = excitation_caution(_settings(3e27), None)
    assert nonlte.startswith("non-LTE excitation") and "Q(H2O) = 3e+27 /s" in nonlte
    assert "3e+27" in excitation_caution(_settings(3e27), None, short=True)


def test_the_water_of_each_epoch_and_the_measured_temperature_are_shown():
    """The rows' recorded Q(H2O) per epoch (measured or configured) reach the section's table and the caution, and a
    row at the measured temperature sits in the comparison table with its source."""
    from astropy.table import vstack

    limits = _limits(True)
    measured = limits[(limits["species"] == "HCN")][:1]
    measured["t_kin_K"][0] = 27.5                          # K, the column's unit
    measured["t_origin"] = "measured"
    measured["t_source"] = "CH3OH (all, 300 km)"
    epochs = vstack([limits[:1], limits[:1]])
    epochs["epoch"] = ["e1", "e2"]
    table = vstack([limits, measured, epochs])
    table["t_source"] = np.asarray(table["t_source"], dtype="U64")
    table["q_h2o_excitation"] = np.where(table["epoch"] == "e1", 3.9e26,
                                         np.where(table["epoch"] == "e2", 4e26, np.nan)) / u.s
    table["q_h2o_from"] = np.where(table["epoch"] == "e1", "H2O measured at e1: Q = 3.9e+26 +/- 5e+24 /s",
                                   np.where(table["epoch"] == "e2", "excitation.q_h2o_per_s = 4e+26 /s (no H2O band "
                                            "measured at e2)", ""))
    waters = water_per_epoch(table)
    assert [(w.epoch, w.q_h2o_per_s, w.measured) for w in waters] == [("e1", 3.9e26, True), ("e2", 4e26, False)]
    text = _text(excitation_section(table, CAT, T_SWEEP, 3.0, None, _settings(3.95e26), 1.3 * u.au,
                                    0.75 * u.km / u.s, to_png))
    assert "H2O measured at e1" in text and "no H2O band measured at e2" in text
    assert "27.5 (measured, CH3OH (all, 300 km))" in text
    assert "Q(H2O) = 3.95e+26 /s (the median over the epochs above)" in text
    caution = excitation_caution(None, _settings(), waters=waters)
    assert "measured by the campaign at e1 (3.9e+26 /s)" in caution and "(4e+26 /s) at e2" in caution


def test_main_lines_are_the_observed_ones():
    assert main_lines(_limits(True), CAT) == {"HCN": "HCN_265886", "CH3OH": "CH3OH_241791"}


def test_t_rot_is_t_kin_near_the_nucleus_when_collisions_dominate():
    # Q(H2O) = 1e30 /s, no electrons: the water density near the nucleus thermalises HCN J=2 and 3 (Boltzmann at
    # T_kin, so T_rot = T_kin)
    profiles, notes = rotational_profiles({"HCN": "HCN_265886"}, CAT, _settings(1e30, x_ne=0.0), T_SWEEP,
                                          1.0 * u.au, 0.8 * u.km / u.s)
    assert notes == [] and [p.t_kin for p in profiles] == [10.0, 40.0]
    for p in profiles:
        assert p.levels == ("J=2", "J=3")
        near = p.r_km < 30
        assert np.any(near)
        np.testing.assert_allclose(p.t_rot[near], p.t_kin, rtol=1e-2)


def test_t_rot_far_out_is_the_background_without_pumping():
    # statistical equilibrium with the background alone (no pumping, water gone, no electrons): Boltzmann at
    # 2.725 K (detailed balance; from memory), for the two lowest levels of CO, whose line is not observed here
    profiles, _ = rotational_profiles({"CO": None}, CAT, _settings(1e25, x_ne=0.0, steady_state=True), T_SWEEP,
                                      1.0 * u.au, 0.8 * u.km / u.s)
    for p in profiles:
        assert p.levels == ("J=0", "J=1")
        far = p.r_km > 3e5
        np.testing.assert_allclose(p.t_rot[far], 2.725, rtol=2e-2)


def test_a_species_without_a_model_is_a_note_not_a_failure():
    profiles, notes = rotational_profiles({"CH3OH": "CH3OH_241791"}, CAT, _settings(), T_SWEEP, 1.0 * u.au,
                                          0.8 * u.km / u.s)
    assert profiles == [] and len(notes) == 1 and notes[0].startswith("CH3OH:")
    assert main_lines(_limits(True)[:0], CAT) == {}
