"""Tests of pipeline.coma.thermal: the thermal dispersion and the mean thermal speed of molecules.

Checks compare with astropy constants (CODATA) and with scipy.stats.maxwell.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy import stats

from pipeline.coma.line_profile import thermal_dispersion as line_profile_thermal_dispersion
from pipeline.coma.thermal import mean_thermal_speed, thermal_dispersion
from pipeline.errors import BudgetError, ConfigError, GasledgerTypeError


# ----------------------------------------------------------------------------- thermal width
@pytest.mark.parametrize("t_k, mass_u", [(20.0, 28.010), (80.0, 32.042), (10.0, 18.015)])
def test_thermal_dispersion_against_astropy_constants(t_k, mass_u):
    # sigma = sqrt(k T / m), k_B and the atomic mass unit from astropy.constants (CODATA)
    expected = np.sqrt(const.k_B.si.value * t_k / (mass_u * const.u.si.value)) / 1e3
    got = thermal_dispersion(t_k * u.K, mass_u * u.u)
    assert got.unit == u.km / u.s
    assert_allclose(got.value, expected, rtol=1e-12)


def test_thermal_dispersion_vectorised():
    temps = [10.0, 40.0] * u.K
    got = thermal_dispersion(temps, 28.010 * u.u)
    # sigma scales as sqrt(T)
    assert_quantity_allclose(got[1] / got[0], 2.0, rtol=1e-12)


def test_line_profile_uses_this_dispersion():
    assert line_profile_thermal_dispersion is thermal_dispersion


# ----------------------------------------------------------------------------- mean speed
def test_mean_speed_against_scipy_maxwell():
    # mean of the Maxwell distribution: scipy.stats.maxwell with scale sqrt(kT/m)
    t = np.array([30.0, 100.0, 300.0]) * u.K
    m = 18.015 * u.u
    scale = np.sqrt(const.k_B.si.value * t.value / m.to_value(u.kg))
    got = mean_thermal_speed(t, m)
    assert got.unit == u.km / u.s
    assert_allclose(got.to_value(u.m / u.s), stats.maxwell.mean(scale=scale), rtol=1e-12)
    # mean speed = sqrt(8 / pi) x the one-dimensional dispersion (both from the Maxwell distribution)
    assert_quantity_allclose(got, np.sqrt(8 / np.pi) * thermal_dispersion(t, m), rtol=1e-12)


def test_mean_speed_bad_input():
    with pytest.raises(ConfigError, match="'temperature' must be > 0 and finite, found 0.0 K"):
        mean_thermal_speed(0 * u.K, 18 * u.u)
    with pytest.raises(BudgetError, match="'molecular_mass' must have units convertible to kg, found K"):
        mean_thermal_speed(10 * u.K, 18 * u.K, error=BudgetError)
    with pytest.raises(GasledgerTypeError, match="'temperature' must be a Quantity in units of K, found 300"):
        mean_thermal_speed(300, 18 * u.u)
