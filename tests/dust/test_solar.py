"""Tests of pipeline.dust.solar: the blackbody solar spectrum.

Physics checks compare with the Stefan-Boltzmann law (closed form), the IAU 2015
Resolution B3 nominal values (published), Wien's displacement law with the
scipy.constants Wien constant, astropy.modeling's BlackBody, and a published
solar irradiance at 550 nm (from memory).
"""

import math

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
import scipy.constants as sc
from astropy.modeling.models import BlackBody
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy.integrate import quad
from scipy.optimize import minimize_scalar

from pipeline.dust import solar
from pipeline.errors import ConfigError, EphemerisError, GasledgerError, GasledgerTypeError

FLAM = u.W / u.m**2 / u.um


def _f_um(lam_um: float, r_au: float = 1.0) -> float:
    return float(solar.solar_flux_density(lam_um * u.um, r_au * u.au).to_value(FLAM))


def test_integral_equals_solar_constant():
    # Stefan-Boltzmann (closed form): the integral of pi B_lambda (R/au)^2 is sigma T^4 (R/au)^2 = L/(4 pi au^2)
    edges = [1e-3, 0.1, 0.3, 1.0, 3.0, 10.0, 100.0]
    total = sum(quad(_f_um, lo, hi, epsrel=1e-10, limit=200)[0] for lo, hi in zip(edges[:-1], edges[1:]))
    total += quad(_f_um, 100.0, np.inf, epsrel=1e-10)[0]  # long-wavelength tail
    total += quad(_f_um, 0.0, 1e-3)[0]  # short-wavelength tail (numerically zero)
    expected = const.L_sun.si.value / (4 * math.pi * const.au.si.value**2)
    assert_allclose(total, expected, rtol=1e-3)
    assert_allclose(solar.solar_constant().to_value(u.W / u.m**2), expected, rtol=1e-12)
    # IAU 2015 Resolution B3 nominal total solar irradiance 1361 W m^-2 (published)
    assert_allclose(solar.solar_constant().to_value(u.W / u.m**2), 1361.0, rtol=1e-3)


def test_effective_temperature_iau_nominal():
    # IAU 2015 Resolution B3 nominal solar effective temperature: 5772 K (published)
    assert_quantity_allclose(solar.solar_effective_temperature(), 5772 * u.K, atol=1 * u.K)
    # closed form from the published nominal L = 3.828e26 W and R = 6.957e8 m, scipy's sigma
    t = (3.828e26 / (4 * math.pi * 6.957e8**2 * sc.Stefan_Boltzmann)) ** 0.25
    assert_allclose(solar.solar_effective_temperature().to_value(u.K), t, rtol=1e-12)


def test_matches_astropy_blackbody():
    # astropy.modeling.models.BlackBody (general library): F = pi sr B_lambda (R_sun / r_h)^2
    lam = np.geomspace(0.2, 30.0, 25) * u.um
    bb = BlackBody(temperature=solar.solar_effective_temperature(), scale=1.0 * FLAM / u.sr)
    expected = math.pi * u.sr * bb(lam) * (const.R_sun / (2.5 * u.au)).decompose() ** 2
    assert_quantity_allclose(solar.solar_flux_density(lam, 2.5 * u.au), expected, rtol=1e-10)


def test_value_at_550nm():
    # published solar irradiance at 550 nm ~ 1.86 W m^-2 nm^-1 (from memory); a blackbody is within 10 %
    f = solar.solar_flux_density(550 * u.nm).to_value(u.W / u.m**2 / u.nm)
    assert abs(f - 1.86) < 0.1 * 1.86


def test_inverse_square_and_units():
    # F ~ r_h^-2 (closed form: flux from a point source), any length units, broadcasting
    lam = np.array([4000.0, 12000.0, 35000.0]) * u.AA
    r = np.array([[0.5], [1.0], [3.2]]) * u.au
    f = solar.solar_flux_density(lam, r)
    assert f.shape == (3, 3) and f.unit == FLAM
    assert_quantity_allclose(f, solar.solar_flux_density(lam.to(u.um)) / r.to_value(u.au) ** 2, rtol=1e-12)
    assert_quantity_allclose(solar.solar_flux_density(0.5 * u.um, 1.496e8 * u.km),
                             solar.solar_flux_density(0.5 * u.um) * (const.au / (1.496e8 * u.km)).decompose() ** 2,
                             rtol=1e-12)


def test_wien_peak():
    # Wien's displacement law (closed form) with scipy.constants.Wien = 2.897771955e-3 m K
    res = minimize_scalar(lambda lam: -_f_um(lam), bounds=(0.2, 1.5), method="bounded",
                          options={"xatol": 1e-8})
    peak_um = sc.Wien / solar.solar_effective_temperature().to_value(u.K) * 1e6
    assert_allclose(sc.Wien, 2.897771955e-3, rtol=1e-9)
    assert_allclose(res.x, peak_um, rtol=1e-5)


def test_extreme_wavelengths_quiet_and_finite():
    # Wien and Rayleigh-Jeans limits (closed forms): nil at short wavelength; at long wavelength
    # B = (2 c k T / lambda^4) (1 - x/2 + O(x^2)), x = h c / (lambda k T) (series of x / (e^x - 1))
    f = solar.solar_flux_density(np.array([1e-6, 1e-3, 1e6]) * u.um)
    assert np.all(np.isfinite(f.value)) and f[0].value == 0.0 and f[1].value >= 0
    t = solar.solar_effective_temperature().to_value(u.K)
    lam = 1.0  # m
    x = sc.h * sc.c / (lam * sc.k * t)
    rj = math.pi * 2 * sc.c * sc.k * t / lam**4 * (const.R_sun.si.value / const.au.si.value) ** 2 * 1e-6
    assert_allclose(f[2].to_value(FLAM), rj, rtol=1e-5)
    assert_allclose(f[2].to_value(FLAM), rj * (1 - x / 2), rtol=1e-10)


def test_model_string():
    assert "blackbody" in solar.SOLAR_MODEL and "IAU 2015" in solar.SOLAR_MODEL and "\n" not in solar.SOLAR_MODEL


@pytest.mark.parametrize("wavelength, error", [(0 * u.um, ConfigError), (-1 * u.um, ConfigError),
                                               (np.nan * u.um, ConfigError), (np.inf * u.um, ConfigError),
                                               ([0.5, -0.1] * u.um, ConfigError), (5 * u.s, ConfigError),
                                               (0.5, GasledgerTypeError)])
def test_bad_wavelength(wavelength, error):
    with pytest.raises(error, match="'wavelength'") as info:
        solar.solar_flux_density(wavelength)
    assert isinstance(info.value, GasledgerError) and str(info.value).count(". ") == 0


@pytest.mark.parametrize("r_h", [0 * u.au, -2 * u.au, np.inf * u.au, 1 * u.kg])
def test_bad_distance(r_h):
    with pytest.raises(EphemerisError, match="'r_h'"):
        solar.solar_flux_density(0.5 * u.um, r_h)
