"""The solar spectrum model: a blackbody Sun scaled to the nominal solar constant.

The Sun is modelled as a **blackbody, not a measured solar spectrum**: the real
solar spectrum departs from it by several per cent in the near-infrared (and by
much more in the ultraviolet and in the cores of strong absorption lines), so
quantities divided by it (Afρ, reflectance, colours in :mod:`pipeline.dust.afrho`)
carry that model error.

The temperature is the effective temperature of the IAU 2015 Resolution B3
nominal solar luminosity and radius (``astropy.constants.L_sun`` and
``R_sun``, with the exact SI Stefan-Boltzmann constant ``sigma_sb``):
:math:`T_{\\rm eff} = [L_\\odot / (4\\pi R_\\odot^2\\sigma)]^{1/4} \\approx 5772` K.
The spectral flux density at heliocentric distance :math:`r_h` is
:math:`F_\\lambda = \\pi B_\\lambda(T_{\\rm eff})\\,(R_\\odot / r_h)^2`, whose integral
over wavelength is :math:`\\sigma T_{\\rm eff}^4 R_\\odot^2 / r_h^2 = L_\\odot / (4\\pi r_h^2)`:
at 1 au it equals the solar constant, about 1361 W m^-2, by construction.
"""

from __future__ import annotations

import math

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.quantities import checked_array as _checked
from pipeline.errors import EphemerisError

__all__ = ["SOLAR_MODEL", "solar_flux_density", "solar_constant", "solar_effective_temperature"]

_FLAM = u.W / u.m**2 / u.um
_L_SUN = const.L_sun.si.value  # W, IAU 2015 Resolution B3 nominal
_R_SUN = const.R_sun.si.value  # m, IAU 2015 Resolution B3 nominal
_AU = const.au.si.value  # m, IAU 2012 Resolution B2
_T_EFF = (_L_SUN / (4.0 * math.pi * _R_SUN**2 * const.sigma_sb.si.value)) ** 0.25  # K
_HC_KT_UM = const.h.si.value * const.c.si.value / (const.k_B.si.value * _T_EFF) * 1e6  # h c / (k T), in um
# log of pi * 2 h c^2 / (1 um)^5 * (R_sun / 1 au)^2 in W m^-2 um^-1 (the 1e-6 turns per-metre into per-um)
_LOG_C1 = math.log(math.pi * 2.0 * const.h.si.value * const.c.si.value**2 / 1e-30 * 1e-6 * (_R_SUN / _AU) ** 2)

#: One-line description of the solar spectrum model, for the metadata of output tables.
SOLAR_MODEL = (f"blackbody Sun, T_eff = {_T_EFF:.1f} K from IAU 2015 Resolution B3 nominal L_sun and R_sun "
               f"(astropy.constants), F_lambda = pi B_lambda(T_eff) (R_sun / r_h)^2, integral at 1 au = "
               f"{_L_SUN / (4.0 * math.pi * _AU**2):.1f} W m^-2; not a measured solar spectrum")


def solar_effective_temperature() -> u.Quantity:
    """Effective temperature (K) of the model Sun.

    Notes
    -----
    :math:`T_{\\rm eff} = [L_\\odot / (4\\pi R_\\odot^2\\sigma)]^{1/4}` with the nominal
    :math:`L_\\odot = 3.828\\times10^{26}` W and :math:`R_\\odot = 6.957\\times10^{8}` m.

    References
    ----------
    .. [1] IAU 2015 Resolution B3 (nominal solar values), via ``astropy.constants``.
    """
    return _T_EFF * u.K


def solar_constant() -> u.Quantity:
    """Total solar irradiance at 1 au (W m^-2): :math:`L_\\odot / (4\\pi\\,{\\rm au}^2)`, about 1361 W m^-2.

    This is also the integral of :func:`solar_flux_density` over wavelength at 1 au.

    References
    ----------
    .. [1] IAU 2015 Resolution B3 (nominal solar luminosity), via ``astropy.constants``.
    """
    return _L_SUN / (4.0 * math.pi * _AU**2) * (u.W / u.m**2)


def solar_flux_density(wavelength: u.Quantity, r_h: u.Quantity = 1.0 * u.au) -> u.Quantity:
    """Solar spectral flux density per unit wavelength (W m^-2 um^-1) at heliocentric distance ``r_h``.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Wavelength(s), > 0 and finite; any shape.
    r_h : `~astropy.units.Quantity` [length]
        Heliocentric distance, > 0 and finite (default 1 au); broadcasts against ``wavelength``.

    Returns
    -------
    `~astropy.units.Quantity` [W m^-2 um^-1]
        :math:`F_{\\odot,\\lambda}(r_h)`.

    Raises
    ------
    ConfigError
        When ``wavelength`` is not a positive, finite length.
    EphemerisError
        When ``r_h`` is not a positive, finite length.

    Notes
    -----
    :math:`F_\\lambda = \\pi B_\\lambda(T_{\\rm eff})\\,(R_\\odot/r_h)^2`, with the Planck law
    :math:`B_\\lambda = \\frac{2hc^2}{\\lambda^5}\\frac{1}{e^{hc/\\lambda kT} - 1}` evaluated in
    logarithms so that very short or very long wavelengths neither overflow nor warn.
    A blackbody, not a measured solar spectrum (see the module docstring).

    References
    ----------
    .. [1] IAU 2015 Resolution B3 (nominal solar luminosity and radius), via ``astropy.constants``.
    """
    lam = _checked(wavelength, u.um, "wavelength")
    r = _checked(r_h, u.au, "r_h", error=EphemerisError)
    x = _HC_KT_UM / lam
    log_f = _LOG_C1 - 5.0 * np.log(lam) - x - np.log(-np.expm1(-x)) - 2.0 * np.log(r)
    with np.errstate(under="ignore"):
        return u.Quantity(np.exp(log_f), _FLAM)
