"""Tests of pipeline.coma.collisions: water and electron rate coefficients, the coma's water and electron densities.

References named beside each check: detailed balance (closed form), scipy.integrate.quad of the dipole Born
cross-section over a Maxwellian, scipy.stats.maxwell, closed forms of the Haser density and of the
photochemical-equilibrium electron density, and the LAMDA CO file astroquery ships (its CO-pH2 table).
"""

import importlib.util
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, special, stats

from pipeline.coma.collisions import (
    H2O_MASS,
    BornRates,
    born_rate_coefficients,
    contact_surface,
    detailed_balance,
    electron_density,
    electron_temperature,
    neutral_rate_coefficients,
    relative_speed,
    table_rate_coefficients,
    water_density,
)
from pipeline.coma.lamda import ROTOR_CONSTANTS, linear_rotor, read_lamda
from pipeline.errors import CatalogueError, ConfigError

CO = linear_rotor("CO", 57635.968 * u.MHz, ROTOR_CONSTANTS["CO"].dipole, 12, d=ROTOR_CONSTANTS["CO"].d,
                  mass=28.010 * u.u)
HCN = linear_rotor("HCN", 44315.976 * u.MHz, ROTOR_CONSTANTS["HCN"].dipole, 12, d=ROTOR_CONSTANTS["HCN"].d,
                   mass=27.026 * u.u, spin_weight=3.0)


def _lamda_co():
    spec = importlib.util.find_spec("astroquery")
    assert spec is not None and spec.origin is not None, "astroquery is a test dependency"
    return read_lamda(Path(spec.origin).parent / "lamda/tests/data/co.txt")


def _assert_detailed_balance(k, molecule, t_k, rtol=1e-10):
    # g_i exp(-E_i/kT) k_ij = g_j exp(-E_j/kT) k_ji for every pair (principle of detailed balance, closed form)
    e = molecule.energy_k.to_value(u.K)
    pop = molecule.weight * np.exp(-(e - e.min()) / t_k)
    flux = pop[:, None] * k
    assert_allclose(flux, flux.T, rtol=rtol, atol=1e-300)


# ----------------------------------------------------------------------------- detailed balance
@pytest.mark.parametrize("rule", ["dipole", "uniform"])
@pytest.mark.parametrize("t_k", [10.0, 50.0, 300.0])
def test_water_rates_obey_detailed_balance(rule, t_k):
    for mol in (CO, HCN):
        k = neutral_rate_coefficients(mol, t_k * u.K, rule=rule).to_value(u.cm**3 / u.s)
        assert np.all(k >= 0) and np.all(np.diag(k) == 0)
        _assert_detailed_balance(k, mol, t_k)


@pytest.mark.parametrize("t_k", [15.0, 80.0, 1000.0, 1e4])
def test_born_rates_obey_detailed_balance(t_k):
    for mol in (CO, HCN):
        k = born_rate_coefficients(mol, t_k * u.K).to_value(u.cm**3 / u.s)
        _assert_detailed_balance(k, mol, t_k)
        # only Delta J = +-1 (dipole-allowed) pairs
        j = np.arange(mol.n_levels)
        assert np.all(k[np.abs(j[:, None] - j[None, :]) != 1] == 0)


def test_table_rates_obey_detailed_balance_and_keep_the_file_values():
    co = _lamda_co().truncated(10)
    table = co.collision_table(2)
    k = table_rate_coefficients(co, table, 45 * u.K).to_value(u.cm**3 / u.s)
    _assert_detailed_balance(k, co, 45.0)
    # downward entries are the file's, interpolated halfway between its 40 and 50 K columns
    # (row 3 -> 2 of CO-pH2: 5.995e-11 and 5.972e-11 cm^3/s in the file)
    assert_allclose(k[2, 1], 0.5 * (5.995e-11 + 5.972e-11), rtol=1e-12)


def test_detailed_balance_ignores_upward_input():
    down = np.ones((3, 3))
    mol = linear_rotor("XY", 100 * u.GHz, 1 * u.D, 2, mass=30 * u.u)
    k = detailed_balance(down, mol, 20 * u.K)
    # the upper triangle is rebuilt from the lower: k_01 = k_10 (g_1/g_0) exp(-dE/kT), dE = h 2B / k
    de = (const.h * 200 * u.GHz / const.k_B).to_value(u.K)
    assert_allclose(k[0, 1], 3.0 * np.exp(-de / 20.0), rtol=1e-12)


# ----------------------------------------------------------------------------- water collisions
def test_relative_speed_is_the_mean_maxwell_speed_of_the_reduced_mass():
    # scipy.stats.maxwell with scale sqrt(kT / m_r) has mean sqrt(8 kT / (pi m_r))
    m_r = (28.010 * 18.015 / (28.010 + 18.015) * u.u).to_value(u.kg)
    expected = stats.maxwell(scale=np.sqrt(const.k_B.value * 40.0 / m_r)).mean() / 1e3
    assert_allclose(relative_speed(40 * u.K, 28.010 * u.u, H2O_MASS).to_value(u.km / u.s), expected, rtol=1e-12)


def test_dipole_rule_total_rate_out_of_a_level():
    # closed form of the rule: out of J, K [(2J-1)/(4J) + (2J+3)/(4J+4) exp(-(E_{J+1}-E_J)/kT)], K = sigma v_rel
    t_k = 60.0
    sigma = 5e-14
    k_tot = sigma * relative_speed(t_k * u.K, CO.mass).to_value(u.cm / u.s)
    k = neutral_rate_coefficients(CO, t_k * u.K, sigma * u.cm**2, "dipole").to_value(u.cm**3 / u.s)
    e = CO.energy_k.to_value(u.K)
    for j in range(1, 11):
        expected = k_tot * ((2 * j - 1) / (4 * j) + (2 * j + 3) / (4 * j + 4) * np.exp(-(e[j + 1] - e[j]) / t_k))
        assert_allclose(k[j].sum(), expected, rtol=1e-12)
    # and it tends to K at high temperature for a middle level (J = 6: 11/24 + 15/28 = 0.994)
    k_hot = neutral_rate_coefficients(CO, 1e8 * u.K, sigma * u.cm**2, "dipole").to_value(u.cm**3 / u.s)
    k_tot_hot = sigma * relative_speed(1e8 * u.K, CO.mass).to_value(u.cm / u.s)
    assert_allclose(k_hot[6].sum() / k_tot_hot, 11 / 24 + 15 / 28, rtol=1e-6)


def test_uniform_rule_at_high_temperature():
    # K (1 - g_i / G) out of level i when kT >> every level spacing (closed form of the rule)
    k = neutral_rate_coefficients(HCN, 1e9 * u.K, rule="uniform").to_value(u.cm**3 / u.s)
    k_tot = 5e-14 * relative_speed(1e9 * u.K, HCN.mass).to_value(u.cm / u.s)
    g = HCN.weight
    assert_allclose(k.sum(axis=1), k_tot * (1 - g / g.sum()), rtol=1e-5)


def test_neutral_rates_refuse_a_bad_rule_or_a_massless_molecule():
    with pytest.raises(ConfigError, match="collision rule must be one of dipole, uniform"):
        neutral_rate_coefficients(CO, 30 * u.K, rule="sudden")
    with pytest.raises(CatalogueError, match="expected a positive molecular mass"):
        neutral_rate_coefficients(linear_rotor("XY", 50 * u.GHz, 1 * u.D, 3), 30 * u.K)


# ----------------------------------------------------------------------------- electrons (Born)
A0 = const.a0.si.value
RY = (const.Ryd * const.h * const.c).si.value  # J
ME = const.m_e.si.value
KB = const.k_B.si.value
EA0 = (const.e.si * const.a0).si.value  # C m


def _mu_au(mol_name):
    mu_si = ROTOR_CONSTANTS[mol_name].dipole.to_value(u.D) * 1e-21 / const.c.value  # 1 D = 1e-21/c C m
    return mu_si / EA0


def _born_cross_section(energy, gap, j, mu_au):
    """Dipole Born cross-section J -> J+1 (m^2) at electron energy ``energy`` (J) for a gap ``gap`` (J).

    sigma = (8 pi/3) a0^2 mu^2 (J+1)/(2J+1) (Ry/E) ln[(sqrt E + sqrt(E-dE)) / (sqrt E - sqrt(E-dE))]
    (Itikawa & Mason 2005, Phys. Rep. 414, 1; from memory).
    """
    k, kp = np.sqrt(energy), np.sqrt(energy - gap)
    return (8 * np.pi / 3 * A0**2 * mu_au**2 * (j + 1) / (2 * j + 1) * RY / energy * np.log((k + kp) / (k - kp)))


def _maxwell_average(gap, j, mu_au, t_k):
    """<sigma v> over a Maxwellian by scipy.integrate.quad, in cm^3 s^-1 (x = E / kT)."""
    kt = KB * t_k

    def integrand(x):
        e = x * kt
        v = np.sqrt(2 * e / ME)
        f = 2 / np.sqrt(np.pi) * np.sqrt(x) * np.exp(-x)   # Maxwell energy distribution in x
        return _born_cross_section(e, gap, j, mu_au) * v * f

    x0 = gap / kt
    value, err = integrate.quad(integrand, x0, x0 + 60.0, limit=400, epsabs=0, epsrel=1e-11)
    assert err < 1e-8 * value
    return value * 1e6


@pytest.mark.parametrize("name, j", [("CO", 0), ("CO", 4), ("HCN", 0), ("HCN", 3)])
@pytest.mark.parametrize("t_k", [20.0, 300.0, 1e4])
def test_born_rate_against_quadrature_of_the_cross_section(name, j, t_k):
    mol = {"CO": CO, "HCN": HCN}[name]
    gap = (mol.energy_k[j + 1] - mol.energy_k[j]).to_value(u.K) * KB
    expected = _maxwell_average(gap, j, _mu_au(name), t_k)
    got = born_rate_coefficients(mol, t_k * u.K).to_value(u.cm**3 / u.s)[j, j + 1]
    assert_allclose(got, expected, rtol=1e-7)


@pytest.mark.parametrize("t_k", [10.0, 1e3, 1e4])
def test_born_rate_against_the_bessel_closed_form(t_k):
    # <sigma v> = (8 pi/3) a0^2 mu^2 (J+1)/(2J+1) Ry sqrt(2/m_e) (2/sqrt(pi)) (kT)^-1/2 exp(-a) K0(a),
    # a = dE / 2kT (Dickinson et al. 1977, A&A 54, 645; from memory), written here in SI with scipy.special.k0
    j = 2
    gap = (HCN.energy_k[j + 1] - HCN.energy_k[j]).to_value(u.K) * KB
    a = gap / (2 * KB * t_k)
    expected = (8 * np.pi / 3 * A0**2 * _mu_au("HCN")**2 * (j + 1) / (2 * j + 1) * RY * np.sqrt(2 / ME)
                * 2 / np.sqrt(np.pi) / np.sqrt(KB * t_k) * np.exp(-a) * special.k0(a)) * 1e6
    got = born_rate_coefficients(HCN, t_k * u.K).to_value(u.cm**3 / u.s)[j, j + 1]
    assert_allclose(got, expected, rtol=1e-9)
    assert_allclose(BornRates(HCN)(t_k)[j, j + 1], expected, rtol=1e-9)


def test_born_rates_do_not_overflow_when_cold():
    k = born_rate_coefficients(HCN, 0.5 * u.K).to_value(u.cm**3 / u.s)
    assert np.all(np.isfinite(k))
    # detailed balance deep in the Wien limit: k_up / k_down = (g_u / g_l) exp(-dE / kT) (closed form)
    de = (HCN.energy_k[11] - HCN.energy_k[10]).to_value(u.K)
    assert k[11, 10] > 0
    assert_allclose(k[10, 11] / k[11, 10], 23 / 21 * np.exp(-de / 0.5), rtol=1e-10)


# ----------------------------------------------------------------------------- densities
def test_water_density_is_the_haser_parent():
    # n = Q exp(-r/L) / (4 pi r^2 v), L = v r_h^2 / beta (Haser 1957), closed form in cgs
    r = np.array([10.0, 1e3, 1e5]) * u.km
    q, v, r_h, beta = 1e27, 0.6, 1.5, 1.2e-5
    length = v * r_h**2 / beta
    expected = q * np.exp(-r.value / length) / (4 * np.pi * (r.value * 1e5) ** 2 * v * 1e5)
    got = water_density(r, q / u.s, v * u.km / u.s, r_h * u.au, beta / u.s).to_value(u.cm**-3)
    assert_allclose(got, expected, rtol=1e-12)


def test_contact_surface_and_electron_temperature():
    # R_cs = 1125 km x_re (Q / 1e29)^(3/4) (Biver 1997; from memory): ~4.8e3 km at Q = 7e29
    assert_allclose(contact_surface(1e29 / u.s).to_value(u.km), 1125.0)
    assert_allclose(contact_surface(7e29 / u.s, 0.5).to_value(u.km), 0.5 * 1125.0 * 7**0.75)
    rcs = contact_surface(1e27 / u.s).to_value(u.km)
    r = np.array([0.5, 1.0, 1.5, 2.0, 3.0]) * rcs * u.km
    t_e = electron_temperature(r, 1e27 / u.s, 40 * u.K).to_value(u.K)
    # T_kin inside, linear ramp to 1e4 K at 2 R_cs, constant beyond (closed form of the model)
    assert_allclose(t_e, [40.0, 40.0, 0.5 * (40.0 + 1e4), 1e4, 1e4], rtol=1e-12)


def test_electron_density_closed_form():
    # x_ne sqrt(k_i n_H2O / alpha(T_e)), k_i = 4.1e-7 r_h^-2 s^-1, alpha = 7e-7 sqrt(300/T_e) cm^3/s (from memory)
    q, v, r_h, beta, t_kin = 3e26, 0.5, 1.2, 1.21e-5, 35.0
    r = np.array([5.0, 500.0, 5e4]) * u.km
    n_w = water_density(r, q / u.s, v * u.km / u.s, r_h * u.au, beta / u.s).to_value(u.cm**-3)
    t_e = electron_temperature(r, q / u.s, t_kin * u.K).to_value(u.K)
    expected = 0.3 * np.sqrt(4.1e-7 / r_h**2 * n_w / (7e-7 * np.sqrt(300.0 / t_e)))
    got = electron_density(r, q / u.s, v * u.km / u.s, r_h * u.au, beta / u.s, t_kin * u.K, x_ne=0.3)
    assert_allclose(got.to_value(u.cm**-3), expected, rtol=1e-12)
    # falls as 1/r where T_e is constant and the water has not yet decayed (closed form)
    pair = electron_density([1e3, 2e3] * u.km, q / u.s, v * u.km / u.s, r_h * u.au, beta / u.s, t_kin * u.K)
    assert_allclose(pair[1] / pair[0], 0.5 * np.exp(-0.5 * 1e3 / (v * r_h**2 / beta)), rtol=1e-12)


def test_electron_density_refuses_negative_scaling():
    with pytest.raises(ConfigError, match="x_ne must be non-negative"):
        electron_density(1 * u.km, 1e27 / u.s, 1 * u.km / u.s, 1 * u.au, 1e-5 / u.s, 30 * u.K, x_ne=-1)
    with pytest.raises(ConfigError, match="x_re must be positive"):
        contact_surface(1e27 / u.s, 0.0)
