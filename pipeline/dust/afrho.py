"""Dust continuum: Afρ, reflectance, the spectral slope (colour) and the dust production rate.

The continuum of a coma is sunlight scattered by dust.  Divided by the solar
spectrum (:func:`pipeline.dust.solar.solar_flux_density`, a blackbody Sun) it gives
the quantity Afρ of A'Hearn et al. (1984): the albedo A times the filling
factor f of the grains in the aperture times the aperture radius ρ, which is
independent of ρ for a steady coma whose density falls as 1/r^2 (brightness as
1/ρ).  Afρ at several wavelengths gives the dust colour as a normalised
reflectivity gradient S' (Jewitt & Meech 1986), and with a grain size, density,
speed and albedo a dust mass production rate.

Afρ and the reflectance are linear in the measured flux, so fluxes may be
negative (noisy data) and keep their sign, and the 1σ error of Afρ is Afρ of
the 1σ flux error: ``afrho(sigma_flux, wavelength, rho, r_h, delta)`` (the
geometry taken as exact).  The scale factors (wavelengths, distances, sizes,
densities, speeds, albedos) must be positive.  Array arguments broadcast with
numpy's rules.
"""

from __future__ import annotations

import math

import astropy.units as u
import numpy as np

from pipeline.errors import ConfigError, EphemerisError
from pipeline.quantities import checked_array as _checked
from pipeline.dust.solar import solar_flux_density
from pipeline.rates.statistics import inverse_variance_mean

__all__ = ["afrho", "reflectance", "spectral_slope", "slope_percent_per_100nm", "dust_production_rate",
           "dust_momentum_rate"]

_FLAM = u.W / u.m**2 / u.um
_SLOPE = 1 / u.um
_MASS_RATE = u.kg / u.s


def _flux_lambda(flux_density, wavelength) -> tuple[np.ndarray, np.ndarray]:
    """Checked wavelength [um] and flux density F_lambda [W m^-2 um^-1] (F_nu converted), any sign."""
    lam = _checked(wavelength, u.um, "wavelength")
    if isinstance(flux_density, u.Quantity) and not flux_density.unit.is_equivalent(_FLAM):
        try:
            flux_density = flux_density.to(_FLAM, equivalencies=u.spectral_density(lam * u.um))
        except u.UnitsError as exc:
            msg = (f"'flux_density' must be a spectral flux density per unit wavelength (such as {_FLAM}) or per "
                   f"unit frequency (such as Jy), found {flux_density.unit}")
            raise ConfigError(msg) from exc
    return lam, _checked(flux_density, _FLAM, "flux_density", sign="any")


def afrho(flux_density: u.Quantity, wavelength: u.Quantity, rho: u.Quantity, r_h: u.Quantity,
          delta: u.Quantity) -> u.Quantity:
    """Afρ (cm) of the dust continuum measured in a circular aperture.

    Parameters
    ----------
    flux_density : `~astropy.units.Quantity` [W m^-2 um^-1 or Jy]
        Continuum flux density in the aperture (any sign), per unit wavelength
        (:math:`F_\\lambda`) or per unit frequency (:math:`F_\\nu`, converted with
        ``astropy.units.spectral_density(wavelength)``).
    wavelength : `~astropy.units.Quantity` [length]
        Wavelength of the measurement, > 0.
    rho : `~astropy.units.Quantity` [length]
        Aperture radius at the target, > 0.
    r_h, delta : `~astropy.units.Quantity` [length]
        Heliocentric and observer distances, > 0.

    Returns
    -------
    `~astropy.units.Quantity` [cm]
        :math:`A f\\rho`.  Linear in ``flux_density``: the 1σ error is
        ``afrho(sigma_flux, wavelength, rho, r_h, delta)``.

    Raises
    ------
    ConfigError
        For a bad ``flux_density``, ``wavelength`` or ``rho``.
    EphemerisError
        For a bad ``r_h`` or ``delta``.

    Notes
    -----
    :math:`A f\\rho = \\frac{(2\\Delta r_h)^2}{\\rho}\\frac{F_{\\rm comet}}{F_\\odot}`, with
    :math:`r_h` in au (a pure number), :math:`\\Delta` and :math:`\\rho` lengths, and
    :math:`F_\\odot` the solar flux density at 1 au at the same wavelength
    (:func:`pipeline.dust.solar.solar_flux_density`, a blackbody Sun).

    References
    ----------
    .. [1] A'Hearn, M. F., Schleicher, D. G., Millis, R. L., Feldman, P. D. & Thompson, D. T.
       1984, AJ 89, 579.
    """
    lam, flux = _flux_lambda(flux_density, wavelength)
    aperture = _checked(rho, u.cm, "rho")
    r = _checked(r_h, u.au, "r_h", error=EphemerisError)
    dist = _checked(delta, u.cm, "delta", error=EphemerisError)
    sun = solar_flux_density(lam * u.um).to_value(_FLAM)
    return u.Quantity(4.0 * (dist * r) ** 2 / aperture * flux / sun, u.cm)


def reflectance(flux_density: u.Quantity, wavelength: u.Quantity, r_h: u.Quantity,
                delta: u.Quantity) -> u.Quantity:
    """Comet-to-Sun flux ratio reduced to an observer distance of 1 au (dimensionless).

    Parameters
    ----------
    flux_density, wavelength
        As in :func:`afrho` (F_lambda or F_nu, any sign).
    r_h, delta : `~astropy.units.Quantity` [length]
        Heliocentric and observer distances, > 0.

    Returns
    -------
    `~astropy.units.Quantity` [dimensionless]
        :math:`R = \\frac{F_{\\rm comet}(\\lambda)}{F_\\odot(\\lambda, r_h)}
        \\left(\\frac{\\Delta}{1\\,{\\rm au}}\\right)^2`.

    Notes
    -----
    :math:`F_\\odot(\\lambda, r_h)` is the solar flux density at the comet
    (:func:`pipeline.dust.solar.solar_flux_density`).  For the same aperture,
    :math:`R = A f\\rho\\cdot\\rho / (4\\,{\\rm au}^2)`, so the reflectance and Afρ have the
    same wavelength dependence (the colour, :func:`spectral_slope`); only their scale
    differs.  Linear in ``flux_density`` like :func:`afrho`.

    References
    ----------
    .. [1] A'Hearn, M. F. et al. 1984, AJ 89, 579.
    """
    lam, flux = _flux_lambda(flux_density, wavelength)
    r = _checked(r_h, u.au, "r_h", error=EphemerisError)
    dist = _checked(delta, u.au, "delta", error=EphemerisError)
    sun = solar_flux_density(lam * u.um, r * u.au).to_value(_FLAM)
    return u.Quantity(flux / sun * dist * dist, u.dimensionless_unscaled)


def spectral_slope(wavelength: u.Quantity, afrho_values: u.Quantity, afrho_errors: u.Quantity, *,
                   absolute_sigma: bool = True) -> tuple[u.Quantity, u.Quantity]:
    """Normalised reflectivity gradient S' (1/um) of Afρ (or a reflectance) against wavelength.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length], shape (n,)
        Wavelengths, > 0, at least two different ones.
    afrho_values : `~astropy.units.Quantity`, shape (n,)
        Afρ (a length) or a reflectance (dimensionless) at each wavelength, any sign,
        with a weighted mean > 0.
    afrho_errors : `~astropy.units.Quantity`, shape (n,)
        1σ errors of ``afrho_values``, same dimension, > 0.
    absolute_sigma : bool
        True (default): the errors are taken as they are.  False: the fit covariance is
        scaled by the reduced chi-square (needs n > 2), as ``numpy.polyfit(cov=True)`` does.

    Returns
    -------
    slope, slope_error : `~astropy.units.Quantity` [1/um]
        S' and its 1σ error, as fractional change of Afρ per micrometre; multiply by
        10 (or use :func:`slope_percent_per_100nm`) for the usual per cent per 100 nm.

    Raises
    ------
    ConfigError
        For bad or mismatched inputs, fewer than two different wavelengths, or a weighted
        mean Afρ <= 0 (the normalisation of S').

    Notes
    -----
    A weighted (weights :math:`w_i = 1/\\sigma_i^2`) straight line
    :math:`A f\\rho(\\lambda) = a + b(\\lambda - \\bar\\lambda)` is fitted, with
    :math:`\\bar\\lambda = \\sum w_i\\lambda_i / \\sum w_i`; centred there, :math:`a` is the
    weighted mean Afρ and :math:`a`, :math:`b` are uncorrelated, with variances
    :math:`1/\\sum w_i` and :math:`1/\\sum w_i(\\lambda_i - \\bar\\lambda)^2`.  Then
    :math:`S' = b / a`, the gradient normalised to the fitted Afρ at :math:`\\bar\\lambda`,
    and to first order :math:`\\sigma_{S'}^2 = (\\sigma_b/a)^2 + (b\\sigma_a/a^2)^2`.  For two
    points of equal error this is the two-point formula
    :math:`S' = \\frac{R_2 - R_1}{\\lambda_2 - \\lambda_1}\\,\\frac{2}{R_1 + R_2}`.  Grey dust
    (Afρ independent of wavelength) has S' = 0.

    References
    ----------
    .. [1] Jewitt, D. & Meech, K. J. 1986, ApJ 310, 937.
    .. [2] A'Hearn, M. F. et al. 1984, AJ 89, 579.
    """
    lam = _checked(wavelength, u.um, "wavelength")
    if not isinstance(afrho_values, u.Quantity):
        afrho_values = u.Quantity(afrho_values, u.dimensionless_unscaled)
    unit = u.cm if afrho_values.unit.physical_type == "length" else u.dimensionless_unscaled
    y = _checked(afrho_values, unit, "afrho_values", sign="any")
    sig = _checked(afrho_errors, unit, "afrho_errors")
    if lam.ndim != 1 or y.shape != lam.shape or sig.shape != lam.shape:
        msg = (f"'wavelength', 'afrho_values' and 'afrho_errors' must be 1-D of the same length, found shapes "
               f"{lam.shape}, {y.shape} and {sig.shape}")
        raise ConfigError(msg)
    if np.unique(lam).size < 2:
        msg = f"'wavelength' must hold at least two different values to fit a slope, found {lam.tolist()} um"
        raise ConfigError(msg)
    if not absolute_sigma and lam.size < 3:
        msg = (f"'absolute_sigma' = False scales the errors by the reduced chi-square, which needs at least 3 "
               f"points; found {lam.size}")
        raise ConfigError(msg)
    w = 1.0 / sig**2
    lam_bar, _ = inverse_variance_mean(lam, sig)
    d = lam - lam_bar
    a, _ = inverse_variance_mean(y, sig)
    if not a > 0:
        msg = (f"'afrho_values' must have a weighted mean > 0 to normalise the slope, found {a!r} {unit}; "
               "expected a detected continuum")
        raise ConfigError(msg)
    sdd = np.sum(w * d * d)
    b = np.sum(w * d * y) / sdd
    var_a, var_b = 1.0 / np.sum(w), 1.0 / sdd
    if not absolute_sigma:
        chi2 = float(np.sum(w * (y - a - b * d) ** 2))
        var_a, var_b = var_a * chi2 / (lam.size - 2), var_b * chi2 / (lam.size - 2)
    slope = b / a
    error = math.sqrt(var_b / a**2 + b * b * var_a / a**4)
    return u.Quantity(slope, _SLOPE), u.Quantity(error, _SLOPE)


def slope_percent_per_100nm(slope: u.Quantity) -> float:
    """A normalised reflectivity gradient (inverse length, e.g. from :func:`spectral_slope`) in per cent per 100 nm.

    :math:`1\\ {\\rm um^{-1}} = 10\\ \\%/(100\\ {\\rm nm})`.
    """
    s = _checked(slope, _SLOPE, "slope", sign="any")
    if s.ndim:
        msg = f"'slope' must be a scalar Quantity, found shape {s.shape}"
        raise ConfigError(msg)
    return float(s * 1e-3 * 100.0 * 100.0)  # per um -> per nm, times 100 nm, times 100 %


def dust_production_rate(afrho_value: u.Quantity, grain_radius: u.Quantity, grain_density: u.Quantity,
                         speed: u.Quantity, albedo: float) -> u.Quantity:
    """Dust mass production rate (kg/s) of a steady coma of identical spheres with the given Afρ.

    Parameters
    ----------
    afrho_value : `~astropy.units.Quantity` [length]
        Afρ (any sign, e.g. from :func:`afrho`).
    grain_radius : `~astropy.units.Quantity` [length]
        Radius a of every grain, > 0.
    grain_density : `~astropy.units.Quantity` [mass / volume]
        Bulk density of a grain, > 0.
    speed : `~astropy.units.Quantity` [speed]
        Outflow speed of the grains, > 0.
    albedo : float
        The A of Afρ, in (0, 4].  It is about 4 × geometric albedo × phase function
        normalised to 1 at zero phase; A ≈ 0.16 (geometric albedo 0.04 at zero phase)
        is common practice, no source.

    Returns
    -------
    `~astropy.units.Quantity` [kg/s]
        :math:`Q_{\\rm mass} = \\frac{8}{3}\\frac{\\rho_d\\,a\\,v\\,A f\\rho}{A}`.

    Raises
    ------
    ConfigError
        For a bad argument (named in the message).

    Notes
    -----
    Assumptions: a steady, isotropic coma with no fragmentation, sublimation or
    destruction of grains; all grains spherical, of one radius a and density
    :math:`\\rho_d`, leaving the nucleus at one constant speed v (no acceleration
    zone, no radiation pressure), so the number density is
    :math:`n = Q_N / (4\\pi r^2 v)`; geometric optics, each grain scattering with cross
    section :math:`\\pi a^2` and the albedo A of the definition of Afρ.

    The column density at projected distance p is :math:`Q_N/(4vp)`, so a cylinder of
    radius ρ holds :math:`N = \\pi Q_N\\rho/(2v)` grains; their filling factor is
    :math:`f = N\\pi a^2/(\\pi\\rho^2)`, so :math:`A f\\rho = A N a^2/\\rho` and
    :math:`Q_N = 2 v A f\\rho / (\\pi A a^2)`.  The mass rate is
    :math:`Q_{\\rm mass} = \\frac{4}{3}\\pi a^3\\rho_d Q_N`.

    References
    ----------
    .. [1] A'Hearn, M. F. et al. 1984, AJ 89, 579 (definition of Afρ).
    """
    af = _checked(afrho_value, u.m, "afrho_value", sign="any")
    a = _checked(grain_radius, u.m, "grain_radius")
    rho_d = _checked(grain_density, u.kg / u.m**3, "grain_density")
    v = _checked(speed, u.m / u.s, "speed")
    alb = _checked(albedo, u.dimensionless_unscaled, "albedo")
    if np.any(alb > 4.0):
        msg = (f"'albedo' is the A of Afρ (about 4 x geometric albedo x phase function) and must lie in (0, 4], "
               f"found {float(np.max(alb))!r}")
        raise ConfigError(msg)
    return u.Quantity(8.0 / 3.0 * rho_d * a * v * af / alb, _MASS_RATE)


def dust_momentum_rate(q_mass: u.Quantity, speed: u.Quantity) -> u.Quantity:
    """Momentum carried away per second by the dust (N): :math:`Q_{\\rm mass}\\,v`.

    Parameters
    ----------
    q_mass : `~astropy.units.Quantity` [mass / time]
        Dust mass production rate (any sign), e.g. from :func:`dust_production_rate`.
    speed : `~astropy.units.Quantity` [speed]
        Grain outflow speed, > 0.

    Returns
    -------
    `~astropy.units.Quantity` [N]
        The push on the nucleus if every grain left in the same direction: an upper
        bound.  The real recoil is this times the ejection asymmetry, which the dust
        continuum alone does not give.
    """
    q = _checked(q_mass, _MASS_RATE, "q_mass", sign="any")
    v = _checked(speed, u.m / u.s, "speed")
    return u.Quantity(q * v, u.N)

