"""Tests of pipeline.dust.afrho: Afρ, reflectance, spectral slope and dust production.

Physics checks compare with the defining formula of Afρ of A'Hearn et al. (1984,
AJ 89, 579) worked by hand with a Planck Sun written here from scipy.constants and
the IAU 2015 Resolution B3 nominal solar values, astropy's spectral_density
equivalency, the closed form of the aperture flux of a 1/ρ coma, numpy.polyfit
(weighted straight line and covariance), a Monte Carlo of the slope error, and a
numerical line-of-sight integral (scipy.integrate) of the number density of a
steady 1/r^2 coma.
"""

import math

import astropy.units as u
import numpy as np
import pytest
import scipy.constants as sc
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy.integrate import quad

from pipeline.dust import afrho as dust
from pipeline.errors import ConfigError, EphemerisError, GasledgerError, GasledgerTypeError

FLAM = u.W / u.m**2 / u.um
# IAU 2015 Resolution B3 nominal solar luminosity and radius (published values)
L_SUN, R_SUN = 3.828e26, 6.957e8  # W, m
T_SUN = (L_SUN / (4 * math.pi * R_SUN**2 * sc.Stefan_Boltzmann)) ** 0.25  # K


def sun_1au(lam_um: float) -> float:
    """Blackbody solar flux density at 1 au in W m^-2 um^-1, written out from the Planck law (scipy.constants)."""
    lam = lam_um * 1e-6
    b_lam = 2 * sc.h * sc.c**2 / lam**5 / math.expm1(sc.h * sc.c / (lam * sc.k * T_SUN))  # W m^-3 sr^-1
    return math.pi * b_lam * (R_SUN / sc.au) ** 2 * 1e-6


# ----------------------------------------------------------------------------- Afrho
@pytest.mark.parametrize("lam_um", [0.55, 2.5])
def test_afrho_hand_example(lam_um):
    # A'Hearn et al. 1984 (AJ 89, 579): Afrho = (2 Delta r_h)^2 / rho * F / F_sun, r_h in au, worked with floats
    r_h, delta_au, rho_km, flux = 1.5, 0.8, 1.0e4, 3.0e-14  # flux in W m^-2 um^-1 (chosen)
    delta_cm, rho_cm = delta_au * sc.au * 100, rho_km * 1e5
    expected = 4 * r_h**2 * delta_cm**2 * flux / (rho_cm * sun_1au(lam_um))
    got = dust.afrho(flux * FLAM, lam_um * u.um, rho_km * u.km, r_h * u.au, delta_au * u.au)
    assert got.unit == u.cm
    assert_allclose(got.value, expected, rtol=1e-10)


def test_afrho_100cm_convention():
    # A'Hearn et al. 1984 convention: at r_h = Delta = 1 au, rho = 1e4 km, F/F_sun = Afrho rho / (4 r_h^2 Delta^2)
    au_cm = sc.au * 100
    ratio = 100.0 * 1e9 / (4 * au_cm**2)  # Afrho = 100 cm, rho = 1e9 cm
    assert_allclose(ratio, 1.1171e-16, rtol=1e-4)  # the closed form, evaluated
    lam = np.array([0.45, 0.55, 0.7, 1.25, 2.2])
    flux = ratio * np.array([sun_1au(x) for x in lam]) * FLAM
    got = dust.afrho(flux, lam * u.um, 1e4 * u.km, 1 * u.au, 1 * u.au)
    assert_quantity_allclose(got, 100 * u.cm, rtol=1e-10)
    # the reflectance at r_h = Delta = 1 au is the plain flux ratio F / F_sun
    assert_allclose(dust.reflectance(flux, lam * u.um, 1 * u.au, 1 * u.au).value, ratio, rtol=1e-10)


def test_reflectance_hand_example_and_afrho_relation():
    # definition: R = F / F_sun(r_h) (Delta / au)^2, with F_sun(r_h) = F_sun(1 au) / r_h^2 (inverse square law)
    r_h, delta_au, flux, lam = 2.3, 1.7, 4.0e-15, 1.6
    expected = flux / (sun_1au(lam) / r_h**2) * delta_au**2
    got = dust.reflectance(flux * FLAM, lam * u.um, r_h * u.au, delta_au * u.au)
    assert got.unit == u.dimensionless_unscaled
    assert_allclose(got.value, expected, rtol=1e-10)
    # and R = Afrho rho / (4 au^2) (both from the definitions of A'Hearn et al. 1984)
    rho = 3000 * u.km
    a = dust.afrho(flux * FLAM, lam * u.um, rho, r_h * u.au, delta_au * u.au)
    assert_allclose((a * rho / (4 * u.au**2)).decompose().value, expected, rtol=1e-10)


def test_f_nu_input_equals_f_lambda():
    # astropy spectral_density equivalency (general library) and by hand: F_lambda = F_nu c / lambda^2
    lam = np.array([0.55, 2.5, 4.45]) * u.um
    f_nu = np.array([2.0, -0.3, 15.0]) * u.mJy
    f_lam = f_nu.to(FLAM, equivalencies=u.spectral_density(lam))
    by_hand = f_nu.to_value(u.W / u.m**2 / u.Hz) * sc.c / lam.to_value(u.m) ** 2 * 1e-6
    assert_allclose(f_lam.to_value(FLAM), by_hand, rtol=1e-12)
    args = (lam, 5000 * u.km, 1.2 * u.au, 0.4 * u.au)
    assert_quantity_allclose(dust.afrho(f_nu, *args), dust.afrho(f_lam, *args), rtol=1e-12)
    assert_quantity_allclose(dust.reflectance(f_nu, lam, 1.2 * u.au, 0.4 * u.au),
                             dust.reflectance(f_lam, lam, 1.2 * u.au, 0.4 * u.au), rtol=1e-12)
    # photon flux density per wavelength is a spectral density too (astropy's PHOTLAM-type units)
    f_phot = f_lam.to(u.photon / u.s / u.cm**2 / u.AA, equivalencies=u.spectral_density(lam))
    assert_quantity_allclose(dust.afrho(f_phot, *args), dust.afrho(f_lam, *args), rtol=1e-12)


def test_afrho_independent_of_aperture_for_1_over_rho_coma():
    # a 1/rho coma has surface brightness k / p; its aperture flux is F(rho) = int_0^rho 2 pi p (k / p) dp
    # (= 2 pi k rho, the closed form) -- integrated here numerically -- and Afrho does not depend on rho
    k = 1.0e-18  # W m^-2 um^-1 per km of aperture radius per 2 pi (chosen)
    radii = np.array([300.0, 2000.0, 1.0e4, 8.0e4])
    flux = np.array([quad(lambda p: 2 * math.pi * p * (k / p), 0.0, r)[0] for r in radii])
    assert_allclose(flux, 2 * math.pi * k * radii, rtol=1e-12)
    got = dust.afrho(flux * FLAM, 1.25 * u.um, radii * u.km, 1.1 * u.au, 0.6 * u.au)
    assert_allclose(got.value, got.value[0], rtol=1e-12)


def test_afrho_linear_sign_and_broadcast():
    # linear in the flux (A'Hearn et al. 1984 definition), so the error is afrho of the flux error
    args = (np.array([[0.55], [2.5]]) * u.um, np.array([1e3, 1e4, 1e5]) * u.km, 1.5 * u.au, 0.8 * u.au)
    one = dust.afrho(1e-15 * FLAM, *args)
    assert one.shape == (2, 3)
    assert_quantity_allclose(dust.afrho(-3e-15 * FLAM, *args), -3 * one, rtol=1e-13)
    # Afrho ~ 1/rho at fixed flux, ~ Delta^2 r_h^2 (the definition)
    assert_allclose(one.value[:, 0] / one.value[:, 2], 100.0, rtol=1e-12)
    assert_quantity_allclose(dust.afrho(1e-15 * FLAM, args[0], args[1], 3.0 * u.au, 0.4 * u.au), one, rtol=1e-12)


# ----------------------------------------------------------------------------- slope
def test_slope_linear_reflectance_recovered():
    # closed form: for R = c0 + c1 lambda the fit is exact and S' = c1 / R(lambda_bar), lambda_bar the mean
    lam = np.array([0.45, 0.55, 0.65, 0.8, 1.25])
    c0, c1 = 80.0, 30.0  # cm, cm/um
    s, e = dust.spectral_slope(lam * u.um, (c0 + c1 * lam) * u.cm, np.full(5, 2.0) * u.cm)
    assert s.unit == 1 / u.um and e.unit == 1 / u.um
    assert_allclose(s.value, c1 / (c0 + c1 * lam.mean()), rtol=1e-12)
    assert_allclose(dust.slope_percent_per_100nm(s), (s * 100 * u.nm).decompose().value * 100, rtol=1e-12)
    # a reflectance (dimensionless) gives the same slope as Afrho in cm
    s2, _ = dust.spectral_slope(lam * u.um, (c0 + c1 * lam) * 1e-3 * u.one, np.full(5, 2e-3) * u.one)
    assert_allclose(s2.value, s.value, rtol=1e-12)


def test_slope_grey_dust_is_zero():
    # grey dust: F proportional to the solar spectrum (Planck law written here) gives constant Afrho, S' = 0
    lam = np.array([0.4, 0.55, 0.9, 1.6, 2.2])
    flux = 2.0e-14 * np.array([sun_1au(x) for x in lam]) * FLAM
    a = dust.afrho(flux, lam * u.um, 1e4 * u.km, 1.3 * u.au, 0.9 * u.au)
    s, _ = dust.spectral_slope(lam * u.um, a, 0.05 * a)
    assert abs(s.value) < 1e-12


def test_slope_two_points():
    # two-point formula (Jewitt & Meech 1986): S' = (R2 - R1) / (lambda2 - lambda1) * 2 / (R1 + R2)
    r1, r2, l1, l2 = 120.0, 150.0, 0.5, 0.7
    s, e = dust.spectral_slope([l1, l2] * u.um, [r1, r2] * u.cm, [5.0, 5.0] * u.cm)
    expected = (r2 - r1) / (l2 - l1) * 2 / (r1 + r2)
    assert_allclose(s.value, expected, rtol=1e-12)
    assert_allclose(dust.slope_percent_per_100nm(s), expected * 10, rtol=1e-12)  # 1/um = 10 % per 100 nm
    # first-order error of the ratio, by hand: S' = 2 D / (lambda2 - lambda1) / (R1 + R2), D = R2 - R1
    sig = 5.0
    ds_dr1 = (-2 / (l2 - l1)) * (r1 + r2 + (r2 - r1)) / (r1 + r2) ** 2
    ds_dr2 = (2 / (l2 - l1)) * (r1 + r2 - (r2 - r1)) / (r1 + r2) ** 2
    assert_allclose(e.value, sig * math.hypot(ds_dr1, ds_dr2), rtol=1e-12)


def test_slope_against_numpy_polyfit():
    # numpy.polyfit (general library) weighted straight line and its covariance, propagated to S' = b / R(lambda_bar)
    lam = np.array([0.44, 0.52, 0.61, 0.73, 0.86, 1.02])
    y = np.array([101.0, 104.5, 103.0, 110.2, 112.0, 118.7])
    sig = np.array([2.0, 1.5, 3.0, 2.5, 1.0, 4.0])
    w = 1 / sig**2
    lam_bar = np.sum(w * lam) / np.sum(w)
    for absolute, cov_kind in ((True, "unscaled"), (False, True)):
        (p1, p0), cov = np.polyfit(lam, y, 1, w=1 / sig, cov=cov_kind)
        den = p1 * lam_bar + p0
        jac = np.array([p0 / den**2, -p1 / den**2])  # d(p1 / den) / d(p1, p0)
        s, e = dust.spectral_slope(lam * u.um, y * u.cm, sig * u.cm, absolute_sigma=absolute)
        assert_allclose(s.value, p1 / den, rtol=1e-10)
        assert_allclose(e.value, math.sqrt(jac @ cov @ jac), rtol=1e-10)
    # absolute errors: the slope is unchanged and its error scales with the error bars
    s1, e1 = dust.spectral_slope(lam * u.um, y * u.cm, sig * u.cm)
    s3, e3 = dust.spectral_slope(lam * u.um, y * u.cm, 3 * sig * u.cm)
    assert_allclose(s3.value, s1.value, rtol=1e-12)
    assert_allclose(e3.value, 3 * e1.value, rtol=1e-12)


def test_slope_error_monte_carlo():
    # Monte Carlo (statistics): the spread of S' over noisy realisations matches the first-order 1-sigma error
    rng = np.random.default_rng(20240611)
    lam = np.array([0.45, 0.55, 0.65, 0.8])
    truth = 100.0 * (1 + 0.3 * (lam - 0.6))
    sig = np.full(4, 1.0)
    _, e = dust.spectral_slope(lam * u.um, truth * u.cm, sig * u.cm)
    draws = [dust.spectral_slope(lam * u.um, (truth + rng.normal(0, sig)) * u.cm, sig * u.cm)[0].value
             for _ in range(4000)]
    assert_allclose(np.std(draws, ddof=1), e.value, rtol=0.05)


# ----------------------------------------------------------------------------- dust production
def _grains_in_cylinder(q_n: float, rho_m: float, v_ms: float) -> float:
    """Number of grains in a cylinder of radius rho through a coma n = Q / (4 pi r^2 v), by a 2-D quadrature."""
    # dimensionless s = p / rho, t = z / rho: N = Q rho / (4 pi v) int_0^1 2 pi s ds int_-inf^inf dt / (s^2 + t^2)
    def column(s):
        return 2 * quad(lambda t: 1 / (s * s + t * t), 0.0, np.inf, epsabs=0, epsrel=1e-12)[0]
    integral = quad(lambda s: 2 * math.pi * s * column(s), 0.0, 1.0, epsabs=0, epsrel=1e-11)[0]
    return q_n * rho_m / (4 * math.pi * v_ms) * integral


def test_dust_production_rate_numerical_coma():
    # steady 1/r^2 coma of identical spheres, integrated numerically through the aperture (scipy.integrate):
    # Afrho = A N a^2 / rho (A'Hearn et al. 1984 definition, f = N pi a^2 / (pi rho^2)), inverted for Q
    afrho_cm, a_m, dens, v, albedo, rho_m = 250.0, 5e-6, 500.0, 20.0, 0.16, 1.0e7
    n_unit = _grains_in_cylinder(1.0, rho_m, v)  # grains per (1 grain / s)
    afrho_unit = albedo * n_unit * a_m**2 / rho_m  # metres of Afrho per (1 grain / s)
    q_number = afrho_cm / 100 / afrho_unit
    q_mass = 4 / 3 * math.pi * a_m**3 * dens * q_number
    got = dust.dust_production_rate(afrho_cm * u.cm, a_m * u.m, dens * u.kg / u.m**3, v * u.m / u.s, albedo)
    assert got.unit == u.kg / u.s
    assert_allclose(got.value, q_mass, rtol=1e-8)
    # the result does not depend on the aperture used for the numerical route (a 1/rho coma)
    n_small = _grains_in_cylinder(1.0, 1.0e5, v)
    assert_allclose(n_small / 1.0e5, n_unit / rho_m, rtol=1e-8)


def test_dust_production_rate_hand_value_and_units():
    # (8/3) rho_d a v Afrho / A by hand: 8/3 * 1000 kg m^-3 * 1e-6 m * 100 m/s * 1 m / 0.16 = 5/3 kg/s
    got = dust.dust_production_rate(100 * u.cm, 1 * u.um, 1 * u.g / u.cm**3, 0.1 * u.km / u.s, 0.16)
    assert_quantity_allclose(got, 5 / 3 * u.kg / u.s, rtol=1e-12)
    # linear in Afrho, any sign (noisy data); arrays broadcast
    arr = dust.dust_production_rate([-100, 0, 200] * u.cm, 1 * u.um, 1 * u.g / u.cm**3, 0.1 * u.km / u.s, 0.16)
    assert_quantity_allclose(arr, [-5 / 3, 0, 10 / 3] * u.kg / u.s, rtol=1e-12, atol=1e-15 * u.kg / u.s)


def test_dust_momentum_rate():
    # closed form: momentum flux = Q_mass v
    p = dust.dust_momentum_rate(1.5 * u.kg / u.s, 20 * u.m / u.s)
    assert p.unit == u.N
    assert_quantity_allclose(p, 30 * u.N, rtol=1e-12)
    assert_quantity_allclose(dust.dust_momentum_rate(3.6 * u.t / u.h, 0.02 * u.km / u.s), 20 * u.N, rtol=1e-12)


# ----------------------------------------------------------------------------- bad input
GOOD = {"flux_density": 1e-15 * FLAM, "wavelength": 0.55 * u.um, "rho": 1e4 * u.km, "r_h": 1.5 * u.au,
        "delta": 0.8 * u.au}


@pytest.mark.parametrize("name, value, error", [
    ("flux_density", 1e-15, GasledgerTypeError),
    ("flux_density", 3 * u.K, ConfigError),
    ("flux_density", np.nan * FLAM, ConfigError),
    ("wavelength", 0 * u.um, ConfigError),
    ("wavelength", 3 * u.GHz, ConfigError),
    ("rho", -1 * u.km, ConfigError),
    ("rho", np.inf * u.km, ConfigError),
    ("r_h", 0 * u.au, EphemerisError),
    ("delta", -0.1 * u.au, EphemerisError),
    ("delta", 1 * u.s, EphemerisError),
])
def test_afrho_bad_input(name, value, error):
    kwargs = dict(GOOD, **{name: value})
    with pytest.raises(error, match=f"'{name}'") as info:
        dust.afrho(**kwargs)
    assert isinstance(info.value, GasledgerError) and ". " not in str(info.value)


@pytest.mark.parametrize("lam, vals, errs, match", [
    ([0.5, 0.6], [1.0, 2.0, 3.0], [0.1, 0.1, 0.1], "same length"),
    ([0.5, 0.5], [1.0, 2.0], [0.1, 0.1], "two different"),
    ([0.5, 0.6], [1.0, 2.0], [0.1, 0.0], "'afrho_errors'"),
    ([0.5, -0.6], [1.0, 2.0], [0.1, 0.1], "'wavelength'"),
    ([0.5, 0.6], [-1.0, -2.0], [0.1, 0.1], "weighted mean"),
])
def test_slope_bad_input(lam, vals, errs, match):
    with pytest.raises(ConfigError, match=match):
        dust.spectral_slope(lam * u.um, vals * u.cm, errs * u.cm)


def test_slope_bad_units_and_chi2_scaling_needs_three_points():
    with pytest.raises(ConfigError, match="'afrho_errors'"):
        dust.spectral_slope([0.5, 0.6] * u.um, [1.0, 2.0] * u.cm, [0.1, 0.1] * u.s)
    with pytest.raises(ConfigError, match="'absolute_sigma'"):
        dust.spectral_slope([0.5, 0.6] * u.um, [1.0, 2.0] * u.cm, [0.1, 0.1] * u.cm, absolute_sigma=False)
    with pytest.raises(ConfigError, match="'slope'"):
        dust.slope_percent_per_100nm(3 * u.km)


DUST_GOOD = {"afrho_value": 100 * u.cm, "grain_radius": 1 * u.um, "grain_density": 1000 * u.kg / u.m**3,
             "speed": 50 * u.m / u.s, "albedo": 0.16}


@pytest.mark.parametrize("name, value", [
    ("afrho_value", 100 * u.s), ("grain_radius", 0 * u.um),
    ("grain_density", -1 * u.kg / u.m**3), ("speed", 0 * u.m / u.s), ("speed", np.nan * u.m / u.s),
    ("albedo", 0.0), ("albedo", 4.5), ("albedo", np.inf),
])
def test_dust_production_bad_input(name, value):
    kwargs = dict(DUST_GOOD, **{name: value})
    with pytest.raises(ConfigError, match=f"'{name}'"):
        dust.dust_production_rate(**kwargs)


def test_dust_production_plain_number_for_a_length():
    # a plain number where a Quantity is needed is the wrong kind of object
    with pytest.raises(GasledgerTypeError, match="'grain_radius'"):
        dust.dust_production_rate(**dict(DUST_GOOD, grain_radius=1.0))


def test_dust_momentum_bad_input():
    with pytest.raises(ConfigError, match="'speed'"):
        dust.dust_momentum_rate(1 * u.kg / u.s, -1 * u.m / u.s)
    with pytest.raises(ConfigError, match="'q_mass'"):
        dust.dust_momentum_rate(1 * u.kg, 1 * u.m / u.s)
