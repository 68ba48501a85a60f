"""Tests of pipeline.budget.momentum against hand-worked numbers, closed forms, scipy and astropy."""

import inspect
import math

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from scipy import stats

from pipeline.errors import BudgetError, GasledgerError, GasledgerTypeError
from pipeline.budget.momentum import (
    LATENT_HEAT,
    diameter_from_absolute_magnitude,
    marsden_g,
    max_bulk_density,
    max_nucleus_mass,
    nongrav_acceleration,
    nucleus_mass,
    required_mass_loss_rate,
    required_production_rate,
    rocket_mass_fraction,
    solar_irradiance,
    sublimation_area_required,
    thermal_ejection_speed,
)

ACC = u.m / u.s**2
AU_D2 = u.au / u.day**2
M_H2O = 18.015 * u.u  # 2 x 1.008 + 15.999 (IUPAC standard atomic weights)
M_CO2 = 44.009 * u.u  # 12.011 + 2 x 15.999


# --------------------------------------------------------------------------- #
# nucleus
# --------------------------------------------------------------------------- #
def test_nucleus_mass_closed_form_and_units():
    # 4/3 pi R^3 rho, R = 1 km, rho = 500 kg/m^3:
    # 4/3 * 3.14159265 * 1e9 m^3 * 500 = 2.0943951e12 kg (hand)
    assert_quantity_allclose(nucleus_mass(1 * u.km, 500 * u.kg / u.m**3), 2.0943951e12 * u.kg, rtol=1e-7)
    # same in metres and g/cm^3 (astropy unit conversion)
    assert_quantity_allclose(nucleus_mass(1000 * u.m, 0.5 * u.g / u.cm**3), 2.0943951e12 * u.kg, rtol=1e-7)
    # broadcasting: R^3 scaling, 2 km -> 8 x
    masses = nucleus_mass([1, 2] * u.km, 500 * u.kg / u.m**3)
    assert_quantity_allclose(masses[1] / masses[0], 8.0)
    assert masses.unit == u.kg


def test_diameter_from_absolute_magnitude():
    # closed form: H = 15, p = 0.25 -> D = 1329 / 0.5 * 10^-3 = 2.658 km
    assert_quantity_allclose(diameter_from_absolute_magnitude(15.0, 0.25), 2.658 * u.km, rtol=1e-12)
    # H = 0, p = 1 -> the 1329 km constant itself (Fowler & Chillemi 1992)
    assert_quantity_allclose(diameter_from_absolute_magnitude(0.0, 1.0), 1329 * u.km)
    # 5 magnitudes fainter -> 10 x smaller (definition of the magnitude scale), H as a Quantity
    d = diameter_from_absolute_magnitude(np.array([10.0, 15.0]) * u.mag, 0.04)
    assert_quantity_allclose(d[0] / d[1], 10.0)
    with pytest.raises(BudgetError, match=r"'albedo' must lie in \(0, 1\], found 0"):
        diameter_from_absolute_magnitude(15.0, 0.0)


# --------------------------------------------------------------------------- #
# momentum balance and rocket equation
# --------------------------------------------------------------------------- #
def test_required_mass_loss_rate_hand_worked():
    # M a = zeta Mdot v  ->  Mdot = M a / (zeta v)
    # M = 1e12 kg, a = 1e-6 m/s^2, v = 500 m/s, zeta = 0.5:
    # M a = 1e6 N; zeta v = 250 m/s; Mdot = 1e6 / 250 = 4000 kg/s
    mdot = required_mass_loss_rate(1e12 * u.kg, 1e-6 * ACC, 500 * u.m / u.s, efficiency=0.5)
    assert_quantity_allclose(mdot, 4000 * u.kg / u.s, rtol=1e-12)
    # same in km/s and km/s^2 (astropy conversions)
    mdot_km = required_mass_loss_rate(1e9 * u.t, 1e-9 * u.km / u.s**2, 0.5 * u.km / u.s, efficiency=0.5)
    assert_quantity_allclose(mdot_km, 4000 * u.kg / u.s, rtol=1e-12)
    # Q = Mdot / m: m(H2O) = 18.015 u = 18.015 * 1.66053906892e-27 kg = 2.99146113e-26 kg
    # (CODATA 2022 atomic mass constant); Q = 4000 / 2.99146113e-26 = 1.33713922e29 /s
    q = required_production_rate(mdot, M_H2O)
    assert_quantity_allclose(q, 1.33713922e29 / u.s, rtol=1e-8)
    assert q.unit.is_equivalent(1 / u.s)


def test_rocket_fraction_hand_worked():
    # a = 1e-5 m/s^2, dt = 10 d = 864000 s, v = 400 m/s, zeta = 0.8:
    # a dt = 8.64 m/s; zeta v = 320 m/s; ratio = 0.027; 1 - exp(-0.027) = 0.0266387585
    frac = rocket_mass_fraction(1e-5 * ACC, 10 * u.day, 400 * u.m / u.s, efficiency=0.8)
    assert_quantity_allclose(frac, 0.0266387585 * u.one, rtol=1e-9)
    # a dt / v = ln 2 gives exactly half the mass (Tsiolkovsky: M1/M0 = exp(-dv/v))
    dt = 300 * math.log(2) / 1e-5 * u.s
    assert_quantity_allclose(rocket_mass_fraction(1e-5 * ACC, dt, 300 * u.m / u.s), 0.5 * u.one, rtol=1e-12)


def test_rocket_fraction_rule_of_thumb():
    # common practice (rule of thumb): 2e-5 m/s^2 for 30 days with gas at 300 m/s costs
    # about a sixth of the mass.  Hand: a dt = 2e-5 * 2.592e6 = 51.84 m/s; / 300 = 0.1728;
    # 1 - exp(-0.1728) = 0.1587
    frac = rocket_mass_fraction(2e-5 * ACC, 30 * u.day, 300 * u.m / u.s)
    assert 0.14 < frac.value < 0.18
    assert frac.unit == u.dimensionless_unscaled


def test_rocket_fraction_small_push_limit():
    # first order of the Taylor series of 1 - exp(-x): x (closed form); 1e-9 relative
    # precision requires expm1 (1 - exp(-1e-9) in floating point is off by ~1e-7)
    a, v = 1e-12 * ACC, 1000 * u.m / u.s
    dt = 1e3 * u.s  # a dt / v = 1e-12
    assert_quantity_allclose(rocket_mass_fraction(a, dt, v), 1e-12 * u.one, rtol=1e-11)
    dt = 1e6 * u.s  # a dt / v = 1e-9
    assert_quantity_allclose(rocket_mass_fraction(a, dt, v), 1e-9 * u.one, rtol=1e-8)


def test_rocket_fraction_matches_momentum_balance_for_short_intervals():
    # over a short interval the mass spent is Mdot dt with Mdot = M a / (zeta v)
    # (momentum balance), i.e. the first-order rocket equation; the second-order term of
    # 1 - exp(-x) = x - x^2/2 + ... makes the rocket fraction smaller by x/2 relative
    # (Taylor series); here x = 4e-7 * 86400 / 270 = 1.28e-4
    mass, a, v, zeta = 3e12 * u.kg, 4e-7 * ACC, 450 * u.m / u.s, 0.6
    dt = 1 * u.day
    spent = required_mass_loss_rate(mass, a, v, zeta) * dt
    frac = rocket_mass_fraction(a, dt, v, zeta)
    linear = (spent / mass).to(u.one)
    assert_quantity_allclose(linear, 1.28e-4 * u.one, rtol=1e-12)
    assert_quantity_allclose(frac, linear * (1 - linear / 2), rtol=1e-8)


def test_max_nucleus_mass_hand_worked_and_inverse():
    # M = zeta v q m / a; q = 1e27 /s, m = 44.009 u (CO2), a = 1e-7 m/s^2, v = 0.5 km/s, zeta = 0.7:
    # m = 44.009 * 1.66053906892e-27 = 7.30786e-26 kg; zeta v q m = 0.7 * 500 * 1e27 * 7.30786e-26
    # = 2.5577532e4 N; / 1e-7 = 2.5577532e11 kg
    m_max = max_nucleus_mass(1e27 / u.s, M_CO2, 1e-7 * ACC, 0.5 * u.km / u.s, efficiency=0.7)
    assert_quantity_allclose(m_max, 2.5577532e11 * u.kg, rtol=1e-7)
    # rho = M / (4/3 pi R^3), R = 0.5 km: V = 5.2359878e8 m^3; 2.5577532e11 / 5.2359878e8 = 488.4949 kg/m^3
    assert_quantity_allclose(max_bulk_density(m_max, 0.5 * u.km), 488.4949 * u.kg / u.m**3, rtol=1e-6)
    assert_quantity_allclose(max_bulk_density(m_max, 500 * u.m), max_bulk_density(m_max, 0.5 * u.km))
    # the largest mass requires exactly q_upper (inverse of required_mass_loss_rate
    # followed by required_production_rate)
    masses = np.array([1e10, 3e11, 5e13]) * u.kg
    a, v, zeta = 2e-7 * ACC, 0.35 * u.km / u.s, 0.45
    q_needed = required_production_rate(required_mass_loss_rate(masses, a, v, zeta), M_H2O)
    assert_quantity_allclose(max_nucleus_mass(q_needed, M_H2O, a, v, zeta), masses, rtol=1e-12)


# --------------------------------------------------------------------------- #
# non-gravitational law
# --------------------------------------------------------------------------- #
def test_marsden_g_published_constants_and_normalisation():
    # Marsden, Sekanina & Yeomans 1973 (AJ 78, 211) water-ice law: r0 = 2.808 au,
    # m = 2.15, n = 5.093, k = 4.6142, alpha = 0.1112 (from memory), normalised to g(1 au) = 1
    params = inspect.signature(marsden_g).parameters
    assert params["r0"].default == 2.808 * u.au
    assert (params["m"].default, params["n"].default, params["k"].default) == (2.15, 5.093, 4.6142)
    assert params["alpha"].default == 0.1112
    assert abs(marsden_g(1 * u.au).value - 1.0) < 1e-3
    assert marsden_g(1.496e8 * u.km).value == pytest.approx(marsden_g(1 * u.au).value, rel=1e-3)
    assert marsden_g(1 * u.au, normalise=True).value == pytest.approx(1.0, rel=1e-14)
    # at r = r0 the law is alpha * 2^-k (closed form): 0.1112 * 2^-4.6142 = 0.0045400
    assert marsden_g(2.808 * u.au).value == pytest.approx(0.1112 * 2**-4.6142, rel=1e-12)
    assert marsden_g(2.808 * u.au).value == pytest.approx(0.0045400, rel=1e-4)
    # inside r0 the law tends to r^-m: g(0.05)/g(0.1) -> 2^2.15 (closed form of the limit)
    g = marsden_g([0.05, 0.1] * u.au).value
    assert g[0] / g[1] == pytest.approx(2**2.15, rel=1e-4)


def test_marsden_g_variant_law_normalised():
    # a variant law (other r0, m, n, k) with normalise=True is 1 at 1 au by construction
    variant = {"r0": 5.0 * u.au, "m": 2.0, "n": 3.0, "k": 2.6}
    assert marsden_g(1 * u.au, normalise=True, **variant).value == pytest.approx(1.0, rel=1e-14)
    # and keeps the shape: the ratio of two distances does not depend on alpha
    g = marsden_g([1.0, 2.0] * u.au, normalise=True, **variant).value
    x1, x2 = 1 / 5, 2 / 5
    expected = (x2**-2.0 * (1 + x2**3.0) ** -2.6) / (x1**-2.0 * (1 + x1**3.0) ** -2.6)
    assert g[1] / g[0] == pytest.approx(expected, rel=1e-12)


def test_nongrav_acceleration_hand_worked():
    # |A| = sqrt(3^2 + 4^2 + 12^2) e-9 = 13e-9 au/d^2; 1 au/d^2 = 149597870700 m / 86400^2 s^2
    # = 149597870700 / 7464960000 = 20.040010 m/s^2 (IAU 2012 au);
    # 13e-9 * 20.040010 = 2.6052013e-7 m/s^2; times g(1 au) = 1
    acc = nongrav_acceleration(3e-9 * AU_D2, -4e-9 * AU_D2, 12e-9 * AU_D2, 1 * u.au, normalise=True)
    assert_quantity_allclose(acc, 2.6052013e-7 * ACC, rtol=1e-7)
    assert acc.unit == ACC
    # with the published alpha: times g(1 au) = 0.99944 (within 1e-3 of 1)
    acc_pub = nongrav_acceleration(3e-9 * AU_D2, -4e-9 * AU_D2, 12e-9 * AU_D2, 1 * u.au)
    assert_quantity_allclose(acc_pub, 2.6052013e-7 * ACC, rtol=1e-3)
    # A in other units of acceleration (astropy conversion)
    acc_m = nongrav_acceleration((3e-9 * AU_D2).to(ACC), 0 * ACC, 0 * ACC, 1 * u.au, normalise=True)
    assert_quantity_allclose(acc_m, 3e-9 * 20.040010 * ACC, rtol=1e-7)


# --------------------------------------------------------------------------- #
# gas speed and energy
# --------------------------------------------------------------------------- #
def test_thermal_speed_against_scipy_maxwell():
    # mean of the Maxwell distribution: scipy.stats.maxwell with scale sqrt(kT/m)
    t = np.array([100.0, 200.0]) * u.K
    m = M_H2O.to_value(u.kg)
    scale = np.sqrt(const.k_B.value * t.value / m)
    expected = stats.maxwell.mean(scale=scale) * u.m / u.s
    got = thermal_ejection_speed(t, M_H2O)
    assert_quantity_allclose(got, expected, rtol=1e-12)
    assert got.unit == u.km / u.s
    # hand: sqrt(8 * 1.380649e-23 * 200 / (pi * 2.99146e-26)) = 484.8 m/s
    assert_quantity_allclose(got[1], 0.4848 * u.km / u.s, rtol=1e-4)
    # temperature in Celsius (astropy temperature equivalency)
    assert_quantity_allclose(thermal_ejection_speed(-73.15 * u.deg_C, M_H2O), got[1], rtol=1e-12)


def test_solar_irradiance_iau_nominal():
    # IAU 2015 Resolution B3: nominal total solar irradiance 1361 W/m^2 at 1 au
    assert_quantity_allclose(solar_irradiance(1 * u.au), 1361 * u.W / u.m**2, rtol=1e-3)
    # inverse square law
    assert_quantity_allclose(solar_irradiance(2 * u.au), solar_irradiance(1 * u.au) / 4)


def test_sublimation_area_hand_worked():
    # A = Mdot L / (f S): Mdot = 100 kg/s, L = 2.83e6 J/kg -> 2.83e8 W;
    # S(1 au) = 3.828e26 W / (4 pi (1.495978707e11 m)^2) = 1361.1665 W/m^2 (astropy L_sun, au);
    # A = 2.83e8 / 1361.1665 = 2.0791e5 m^2
    area = sublimation_area_required(100 * u.kg / u.s, 1 * u.au, LATENT_HEAT["H2O"])
    assert_quantity_allclose(area, 2.0791e5 * u.m**2, rtol=1e-4)
    assert area.unit == u.m**2
    # species key, half the absorbed light -> twice the area; at 2 au -> 4 x (inverse square)
    assert_quantity_allclose(sublimation_area_required(100 * u.kg / u.s, 1 * u.au, "H2O", 0.5), 2 * area)
    assert_quantity_allclose(sublimation_area_required(0.1 * u.t / u.s, 2 * u.au, "H2O"), 4 * area)
    # latent heat in kJ/g (unit conversion)
    assert_quantity_allclose(
        sublimation_area_required(100 * u.kg / u.s, 1 * u.au, 2.83 * u.kJ / u.g), area, rtol=1e-12
    )


def test_latent_heat_h2o_murphy_koop():
    # Murphy & Koop 2005, Q. J. R. Meteorol. Soc. 131, 1539, eq. (5) (from memory):
    # L_sub(T) = 46782.5 + 35.8925 T - 0.07414 T^2 + 541.5 exp(-(T/123.75)^2) J/mol
    t = 200.0
    l_mol = 46782.5 + 35.8925 * t - 0.07414 * t**2 + 541.5 * math.exp(-((t / 123.75) ** 2))
    expected = l_mol / 18.015e-3 * u.J / u.kg
    assert_quantity_allclose(LATENT_HEAT["H2O"], expected, rtol=0.01)
    # Hess's law at the triple point: fusion 6.01 + vaporisation 45.05 kJ/mol = 51.06 kJ/mol
    # (CRC Handbook, from memory)
    assert_quantity_allclose(LATENT_HEAT["H2O"], 51.06e3 / 18.015e-3 * u.J / u.kg, rtol=0.01)


def test_latent_heat_co2_clausius_clapeyron():
    # Clausius-Clapeyron between the sublimation point (194.7 K, 1 atm) and the triple point
    # (216.58 K, 5.185 bar) of CO2 (CRC Handbook, from memory):
    # L = R ln(p2/p1) / (1/T1 - 1/T2) = 8.314 * 1.6326 / 5.189e-4 = 26.16 kJ/mol
    r_gas = const.R.to_value(u.J / u.mol / u.K)
    l_mol = r_gas * math.log(5.185e5 / 101325.0) / (1 / 194.7 - 1 / 216.58)
    assert_quantity_allclose(LATENT_HEAT["CO2"], l_mol / 44.009e-3 * u.J / u.kg, rtol=0.03)


def test_latent_heat_co_hess_lower_bound():
    # Hess's law for CO: alpha-beta transition 0.633 + fusion 0.833 + vaporisation at the
    # boiling point 6.04 kJ/mol = 7.51 kJ/mol (CRC Handbook, from memory); the vaporisation
    # enthalpy grows toward the lower sublimation temperatures, so this is a lower bound
    hess = (0.633 + 0.833 + 6.04) * 1e3 / 28.010e-3 * u.J / u.kg
    assert hess <= LATENT_HEAT["CO"] <= 1.15 * hess
    # hydrogen-bonded water ice binds far more strongly than the CO2 and CO ices
    assert LATENT_HEAT["H2O"] > LATENT_HEAT["CO2"] > LATENT_HEAT["CO"]


# --------------------------------------------------------------------------- #
# invalid input
# --------------------------------------------------------------------------- #
def test_negative_radius_raises():
    with pytest.raises(BudgetError, match=r"'radius' must be > 0 and finite, found -1\.0 km"):
        nucleus_mass(-1 * u.km, 500 * u.kg / u.m**3)
    with pytest.raises(BudgetError, match=r"'radius' must be > 0 and finite, found -2\.0 km"):
        max_bulk_density(1e12 * u.kg, [1.0, -2.0] * u.km)


@pytest.mark.parametrize("eff", [0.0, -0.1, 1.5, np.nan])
def test_efficiency_outside_unit_interval_raises(eff):
    match = r"'efficiency' must lie in \(0, 1\], found"
    with pytest.raises(BudgetError, match=match):
        required_mass_loss_rate(1e12 * u.kg, 1e-7 * ACC, 300 * u.m / u.s, efficiency=eff)
    with pytest.raises(BudgetError, match=match):
        rocket_mass_fraction(1e-7 * ACC, 1 * u.day, 300 * u.m / u.s, efficiency=eff)
    with pytest.raises(BudgetError, match=match):
        max_nucleus_mass(1e27 / u.s, M_H2O, 1e-7 * ACC, 300 * u.m / u.s, efficiency=eff)


@pytest.mark.parametrize("speed", [0.0, -300.0])
def test_non_positive_speed_raises(speed):
    v = speed * u.m / u.s
    match = rf"'ejection_speed' must be > 0 and finite, found {speed!r} m / s"
    with pytest.raises(BudgetError, match=match):
        required_mass_loss_rate(1e12 * u.kg, 1e-7 * ACC, v)
    with pytest.raises(BudgetError, match=match):
        rocket_mass_fraction(1e-7 * ACC, 1 * u.day, v)
    with pytest.raises(BudgetError, match=match):
        max_nucleus_mass(1e27 / u.s, M_H2O, 1e-7 * ACC, v)


def test_other_invalid_inputs():
    with pytest.raises(BudgetError, match=r"'acceleration' must be > 0 and finite"):
        max_nucleus_mass(1e27 / u.s, M_H2O, 0 * ACC, 300 * u.m / u.s)
    with pytest.raises(BudgetError, match=r"'temperature' must be > 0 and finite"):
        thermal_ejection_speed(0 * u.K, M_H2O)
    with pytest.raises(BudgetError, match=r"unknown species 'N2', expected one of \['CO', 'CO2', 'H2O'\]"):
        sublimation_area_required(1 * u.kg / u.s, 1 * u.au, "N2")
    with pytest.raises(GasledgerTypeError, match=r"'latent_heat' must be a Quantity in J/kg or a species name, "
                                                 r"found 5\.0"):
        sublimation_area_required(1 * u.kg / u.s, 1 * u.au, 5.0)
    with pytest.raises(BudgetError, match=r"'absorbed_fraction' must lie in \(0, 1\]"):
        sublimation_area_required(1 * u.kg / u.s, 1 * u.au, "H2O", absorbed_fraction=2.0)
    with pytest.raises(BudgetError, match=r"'r_h' must be > 0 and finite"):
        marsden_g(0 * u.au)
    # wrong physical type is refused by astropy's quantity_input
    with pytest.raises(u.UnitsError):
        nucleus_mass(1 * u.kg, 500 * u.kg / u.m**3)
    # project errors are ValueErrors and GasledgerErrors
    with pytest.raises(GasledgerError):
        nucleus_mass(1 * u.km, -5 * u.kg / u.m**3)
    with pytest.raises(ValueError, match="'density'"):
        nucleus_mass(1 * u.km, -5 * u.kg / u.m**3)
