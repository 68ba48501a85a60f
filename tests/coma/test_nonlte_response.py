"""Tests of the non-LTE line responses (pipeline.coma.departure and its use in pipeline.coma.response and image).

External references: the Haser column densities in closed form (Haser 1957; pipeline.coma.haser, itself checked
against scipy in test_haser.py) for the numerical line-of-sight integral; the Haser aperture count
N = (Q L / v) (1 - Ki_2(rho / L)) for the test's own shell integral; the Boltzmann distribution as the limit of
thermalising collisions; and a reference response built here independently of the module: level populations
integrated with scipy's Radau method (the module uses LSODA), the emissivity in populations with the background
from the Einstein relations (Rybicki & Lightman 1979, eqs. 1.72-1.73; from memory), and the molecules in the
aperture's cylinder as a 1-D integral over spherical shells, a shell of radius r > rho holding the fraction
1 - sqrt(1 - rho^2 / r^2) of its molecules inside the cylinder (solid angle of two polar caps; from memory),
integrated with scipy.integrate.quad.
"""

import copy

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose
from scipy.integrate import quad, solve_ivp

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.departure import (ColumnWeight, NonLteSettings, column_ratio, excitation_model_of, line_levels,
                                     molecule_of, weighted_column_density)
from pipeline.coma.excitation import T_CMB
from pipeline.coma.haser import daughter_column_density, parent_aperture_count, parent_column_density
from pipeline.coma.image import aperture_count_on_grid, beam_kernel, model_line_map
from pipeline.coma.nonlte import rate_matrix
from pipeline.coma.response import (EXCITATION_NOT_GIVEN, ComaModel, GridGeometry, line_departure_on_grid,
                                    line_response, line_response_on_grid, outflow_speed, scale_lengths)
from pipeline.errors import CatalogueError, ConfigError
from pipeline.settings import Settings, validate_config
from pipeline.spectra.apertures import aperture_spectra, aperture_weights

CAT = load_catalogue()
HCN = CAT.get_species("HCN")
HCN32 = CAT.get_line("HCN_265886")
T_SWEEP = [10.0, 20.0, 40.0, 80.0] * u.K


def _nonlte(q_h2o: float, x_ne: float = 0.2, steady_state: bool = False) -> NonLteSettings:
    # water photodestruction rate at 1 au of the built-in catalogue's H2O entry (quiet Sun)
    return NonLteSettings(q_h2o_per_s=q_h2o, h2o_rate_1au_per_s=CAT.get_species("H2O").photo_rate("quiet").value,
                          x_ne=x_ne, sigma_cm2=5e-14, steady_state=steady_state)


# ----------------------------------------------------------------------------- the line-of-sight integral
@pytest.mark.parametrize("length_km", [1e3, 6e4, 1e6])
def test_unweighted_column_is_the_closed_form_haser_column(length_km):
    # closed forms: N = Q Ki_1(rho/L) / (2 pi v rho) (parent), and the daughter's difference of Bickley functions
    rho = np.geomspace(1e-3, 3e6, 40) * u.km
    v = 0.7 * u.km / u.s
    got = weighted_column_density(rho, 1e27 / u.s, v, length_km * u.km)
    want = parent_column_density(rho, 1e27 / u.s, v, length_km * u.km)
    keep = want.value > 1e-250
    assert_allclose(got.value[keep], want.value[keep], rtol=1e-9)
    got = weighted_column_density(rho, 1e27 / u.s, v, length_km * u.km, 2e4 * u.km)
    want = daughter_column_density(rho, 1e27 / u.s, v, length_km * u.km, 2e4 * u.km)
    keep = want.value > 1e-250
    assert_allclose(got.value[keep], want.value[keep], rtol=1e-9)


def test_column_ratio_of_an_inverse_square_weight_matches_its_closed_form():
    # w = (a / r)^2 for L -> infinity (n ~ 1/r^2): int dz / r^4 over int dz / r^2 = (pi / (2 rho^3)) / (pi / rho)
    # = 1 / (2 rho^2), so f = a^2 / (2 rho^2) (elementary integrals)
    a = 50.0
    rho = np.array([10.0, 1e3, 5e3, 9.9e3])
    got = column_ratio(rho * u.km, 1e12 * u.km, None, lambda r: (a / r) ** 2)
    assert_allclose(got, a**2 / (2 * rho**2), rtol=1e-6)   # L = 1e12 km, not infinite: ~(2/pi)(rho/L) ln(L/rho)


def test_unit_weight_gives_the_lte_counts_and_responses_exactly():
    # f = 1 everywhere: the weighted sub-pixel molecules are the molecules themselves (bit for bit), the column
    # ratio is exactly 1 (both columns share the nodes)
    ones = ColumnWeight(log_rho_km=(0.0, 30.0), factor=(1.0, 1.0))
    args = ((40, 36), 18.3, 20.6, [4.0, 9.0], 250.0, (4.0, 3.0, 20.0), 0.7 * u.km / u.s, 1.2e5 * u.km)
    assert np.array_equal(aperture_count_on_grid(*args, weight=ones), aperture_count_on_grid(*args))
    assert np.all(column_ratio(np.geomspace(1, 1e6, 9) * u.km, 1e5 * u.km, None, lambda r: np.ones_like(r)) == 1.0)


# ----------------------------------------------------------------------------- limits of the physics
def test_thermalising_collisions_give_the_lte_response():
    # Q(H2O) = 1e33 /s, no electrons (they excite at T_e, not T_kin), no pumping: collisions with water hold the
    # levels at the Boltzmann distribution of T_kin over the molecules a 1000 km aperture sees, so the response is
    # the LTE one (closed form: Boltzmann fractions and the Haser count); the few molecules far out, where water
    # has been destroyed, are out of LTE (under 1 %)
    lte = line_response(HCN32, HCN, T_SWEEP, [300.0, 1000.0] * u.km, 1.2 * u.au, 0.8 * u.au, 0 * u.km, ComaModel())
    hot = line_response(HCN32, HCN, T_SWEEP, [300.0, 1000.0] * u.km, 1.2 * u.au, 0.8 * u.au, 0 * u.km,
                        ComaModel(excitation=_nonlte(1e33, x_ne=0.0)))
    assert_allclose((hot / lte).value, 1.0, rtol=1e-2)


def test_lte_model_departure_is_one_and_a_step_without_excitation_refuses():
    grid = GridGeometry(shape=(20, 20), x=10.0, y=10.0, pixel_arcsec=1.0, radii_pix=[3.0], beam_pix=None)
    dep = line_departure_on_grid(HCN32, HCN, None, T_SWEEP, 1.2 * u.au, 0.8 * u.au, grid, ComaModel())
    assert np.array_equal(dep, np.ones((4, 1)))
    with pytest.raises(ConfigError, match="not given the config key 'excitation'"):
        line_response_on_grid(HCN32, HCN, None, T_SWEEP, 1.2 * u.au, 0.8 * u.au, grid,
                              ComaModel(excitation=EXCITATION_NOT_GIVEN))


# ----------------------------------------------------------------------------- the done-when: a low-density coma
def _reference_response(line, species, t_kin, rho_ap_km, r_h, delta, settings):
    """Flux per unit Q (Jy km/s s) in a beam-less aperture, computed independently of pipeline.coma.departure."""
    from pipeline.coma.excitation import flux_per_molecule

    model = ComaModel()
    v = outflow_speed(model, r_h)
    length, _ = scale_lengths(species, None, model, r_h, v)
    mol = molecule_of(species, settings, t_kin, line.e_up.to_value(u.K))[0]
    exc = excitation_model_of(settings, species, mol, t_kin, v, r_h)
    _, up, lo = line_levels([mol], line)
    v_km = v.to_value(u.km / u.s)
    e = mol.energy_k.to_value(u.K)
    boltzmann = mol.weight * np.exp(-e / t_kin.to_value(u.K))
    boltzmann /= boltzmann.sum()

    def jac(s, _x=None):
        r = np.exp(s)
        return (r / v_km) * rate_matrix(mol, exc, r * u.km).to_value(1 / u.s)

    r_min, r_max = exc.r_min.to_value(u.km), exc.r_max.to_value(u.km)
    sol = solve_ivp(lambda s, x: jac(s) @ x, (np.log(r_min), np.log(r_max)), boltzmann, method="Radau", jac=jac,
                    rtol=1e-7, atol=1e-12, dense_output=True)
    assert sol.success
    k = mol.line_index(up, lo)
    n_bg = 1.0 / np.expm1((const.h * mol.freq[k] / (const.k_B * T_CMB)).decompose().value)
    g_ratio = mol.weight[up] / mol.weight[lo]

    def emissivity(x):
        return x[up] * (1 + n_bg) - x[lo] * g_ratio * n_bg

    e_lte = emissivity(boltzmann)

    def w(r):
        x = sol.sol(np.log(np.clip(r, r_min, r_max)))
        return emissivity(x / x.sum()) / e_lte

    big_l = length.to_value(u.km)

    def inner(r, weighted):   # molecules per unit r (Q = 1/s) within the cylinder's radius: Q exp(-r/L) / v
        return np.exp(-r / big_l) / v_km * (w(r) if weighted else 1.0)

    def outer(t, weighted):   # beyond it, r = rho cosh t: a shell's share in the cylinder is 1 - tanh t
        r = rho_ap_km * np.cosh(t)
        return inner(r, weighted) * (1.0 - np.tanh(t)) * rho_ap_km * np.sinh(t)

    def count(weighted):
        t_max = np.arccosh(r_max / rho_ap_km)
        return (quad(inner, 0.0, r_min, args=(weighted,), epsrel=1e-10)[0]
                + quad(inner, r_min, rho_ap_km, args=(weighted,), limit=400, epsrel=1e-10)[0]
                + quad(outer, 0.0, t_max, args=(weighted,), limit=400, epsrel=1e-10)[0]
                + quad(outer, t_max, np.inf, args=(weighted,), limit=400, epsrel=1e-10)[0])

    plain = count(False)
    # the shell integral against the closed-form Haser aperture count (the test's own geometry)
    assert plain == pytest.approx(parent_aperture_count(rho_ap_km * u.km, 1 / u.s, v, length).value, rel=1e-7)
    per_molecule = flux_per_molecule(line, species, t_kin, delta).to_value(u.Jy * u.km / u.s)
    return per_molecule * count(True)


def test_low_density_coma_is_recovered_by_the_nonlte_response_and_not_by_the_lte_sweep():
    # an invented weakly active coma: Q(H2O) = 1e25 /s at 1.5 au, HCN at T_kin = 40 K, a 10^4 km aperture; the
    # "measured" window flux is Q_true times the independent reference response, with an invented 5 % noise
    settings = _nonlte(1e25)
    r_h, delta, rho = 1.5 * u.au, 1.0 * u.au, 1e4
    q_true, t_true = 2e25, 40.0 * u.K
    reference = _reference_response(HCN32, HCN, t_true, rho, r_h, delta, settings)
    flux = q_true * reference
    sigma = 0.05 * q_true
    nonlte = line_response(HCN32, HCN, t_true, rho * u.km, r_h, delta, 0 * u.km, ComaModel(excitation=settings))
    q_nonlte = flux / nonlte.to_value(u.Jy * u.km / u.s * u.s)[0, 0]
    assert abs(q_nonlte - q_true) <= 2 * sigma + 0.2 * q_true          # the criterion
    assert q_nonlte == pytest.approx(q_true, rel=1e-2)                   # and, noise aside, much closer
    lte = line_response(HCN32, HCN, T_SWEEP, rho * u.km, r_h, delta, 0 * u.km, ComaModel())
    q_lte = flux / lte.to_value(u.Jy * u.km / u.s * u.s)[:, 0]
    assert np.all(np.abs(q_lte - q_true) > 2 * sigma + 0.2 * q_true)    # at no swept temperature


def test_grid_response_agrees_with_the_closed_form_and_the_injected_map():
    # on a fine grid without a beam the pixel count approaches the closed form (as the LTE one does); the injected
    # model map (beam-convolved, Jy/beam) summed in the aperture gives the response on the same grid and beam
    settings = _nonlte(1e26)
    model = ComaModel(excitation=settings)
    r_h, delta = 1.5 * u.au, 1.0 * u.au
    pix = 0.25
    pix_km = (pix * u.arcsec).to_value(u.rad) * delta.to_value(u.km)
    radii_km = np.array([2000.0, 6000.0])
    grid = GridGeometry(shape=(161, 161), x=80.0, y=80.0, pixel_arcsec=pix, radii_pix=list(radii_km / pix_km),
                        beam_pix=None)
    on_grid, _ = line_response_on_grid(HCN32, HCN, None, T_SWEEP[1:3], r_h, delta, grid, model)
    closed = line_response(HCN32, HCN, T_SWEEP[1:3], radii_km * u.km, r_h, delta, 0 * u.km, model)
    assert_allclose(on_grid.value, closed.value, rtol=1e-2)
    beam = (2.0, 1.5, 30.0)
    beamed = GridGeometry(shape=(161, 161), x=80.0, y=80.0, pixel_arcsec=pix, radii_pix=list(radii_km / pix_km),
                          beam_pix=(beam[0] / pix, beam[1] / pix, beam[2]))
    resp, _ = line_response_on_grid(HCN32, HCN, None, 20 * u.K, r_h, delta, beamed, model)
    line_map = model_line_map((161, 161), 80.0, 80.0, pix, HCN32, HCN, 20 * u.K, r_h, delta, beam, model)
    per_pixel = line_map / (np.pi / (4 * np.log(2)) * beam[0] * beam[1] / pix**2)
    sums, _ = aperture_spectra(per_pixel[None], [aperture_weights((161, 161), 80.0, 80.0, r) for r in beamed.radii_pix])
    assert_allclose(sums[:, 0], resp.value[0], rtol=1e-10)
    assert beam_kernel(beam[0] / pix, beam[1] / pix, beam[2]).sum() == pytest.approx(1.0)


# ----------------------------------------------------------------------------- settings
def _demo_config() -> dict:
    from pathlib import Path

    return yaml.safe_load((Path(__file__).resolve().parents[2] / "config" / "config.yaml").read_text())


def test_settings_parse_the_nonlte_model_once_into_the_coma_model():
    config = _demo_config()
    config["excitation"].update({"model": "nonlte", "q_h2o_per_s": 3e27, "x_ne": 0.3,
                                 "pump_rate_1au_per_s": {"HCN": 3e-4}})
    validate_config(config)
    coma = Settings.from_config(config).coma
    assert isinstance(coma.excitation, NonLteSettings)
    assert coma.excitation.q_h2o_per_s == 3e27 and coma.excitation.x_ne == 0.3
    assert coma.excitation.pump_rate("HCN") == 3e-4
    # the schema's defaults (collision_cross_section_cm2, steady_state)
    assert coma.excitation.sigma_cm2 == 5e-14 and coma.excitation.steady_state is False
    hash(coma)                                          # plain values: the model can key caches
    lte = _demo_config()
    validate_config(lte)
    assert Settings.from_config(lte).coma.excitation is None
    # a step given 'coma' but not 'excitation' cannot model lines
    part = Settings.from_config({"coma": lte["coma"], "outdir": "x"}, sections=["coma", "outdir"])
    assert part.coma.excitation == EXCITATION_NOT_GIVEN


def test_nonlte_without_the_water_rate_or_with_a_missing_file_refuses_naming_the_key(tmp_path):
    config = _demo_config()
    config["excitation"]["model"] = "nonlte"
    config["excitation"].pop("q_h2o_per_s", None)        # the demo gives it (for the comparison beside LTE)
    validate_config(config)
    with pytest.raises(ConfigError, match=r"excitation\.q_h2o_per_s is missing"):
        Settings.from_config(config)
    config = copy.deepcopy(_demo_config())
    config["excitation"].update({"model": "nonlte", "q_h2o_per_s": 1e27,
                                 "molecular_data": {"CH3OH": str(tmp_path / "none.dat")}})
    validate_config(config)
    with pytest.raises(ConfigError, match=r"excitation\.molecular_data\.CH3OH names the file"):
        Settings.from_config(config)


def test_a_species_that_is_not_a_linear_rotor_needs_molecular_data():
    settings = _nonlte(1e27)
    line = CAT.lines_of("CH3OH")[0]
    with pytest.raises(CatalogueError, match=r"excitation\.molecular_data\.CH3OH"):
        line_response(line, CAT.get_species("CH3OH"), 40 * u.K, 1000 * u.km, 1.2 * u.au, 0.8 * u.au, 0 * u.km,
                      ComaModel(excitation=settings))


def test_a_lamda_file_gives_the_response_of_the_rotor_from_the_catalogue_constants():
    # astroquery's copy of the LAMDA CO file (Schoeier et al. 2005), whose levels and A values agree with the CDMS
    # entry behind the catalogue (tests/coma/test_lamda.py): the populations, and so the responses, agree with those
    # of the linear rotor built from the catalogue's constants
    import dataclasses
    import importlib.util
    from pathlib import Path

    spec = importlib.util.find_spec("astroquery")
    assert spec is not None and spec.origin is not None, "astroquery is a test dependency (pip install -e '.[test]')"
    co_file = Path(spec.origin).parent / "lamda" / "tests" / "data" / "co.txt"
    co, co21 = CAT.get_species("CO"), CAT.get_line("CO_230538")
    rotor = dataclasses.replace(_nonlte(3e26), pump_rates_1au_per_s=(("CO", 2.46e-4),))
    filed = dataclasses.replace(rotor, molecular_data=(("CO", (str(co_file),)),))
    assert str(co_file) in molecule_of(co, filed, 40 * u.K)[0].source
    args = (co21, co, T_SWEEP, [1e3, 1e4] * u.km, 1.2 * u.au, 0.8 * u.au, 0 * u.km)
    from_file = line_response(*args, ComaModel(excitation=filed))
    from_rotor = line_response(*args, ComaModel(excitation=rotor))
    assert_allclose(from_file.value, from_rotor.value, rtol=1e-3)
    # and they do depart from LTE (otherwise the comparison would say nothing)
    assert np.max(np.abs(from_rotor.value / line_response(*args, ComaModel()).value - 1)) > 0.1
