"""Momentum and energy budget of an outgassing nucleus.

Can outgassing pay for a measured non-gravitational acceleration?  This module
holds the pieces of that budget:

- the nucleus mass from radius and bulk density, the radius from the absolute
  magnitude and geometric albedo;
- the momentum balance ``M a = zeta Mdot v_ej`` and, over an interval, the
  rocket equation;
- the production rate the push needs, and, read the other way, the largest
  nucleus mass (and bulk density) that a production-rate upper limit allows;
- the water-ice non-gravitational law ``g(r)`` and the acceleration from the
  ``A1, A2, A3`` parameters;
- the thermal speed of the gas and the sunlit area that energy-limited
  sublimation needs.

Public functions take and return astropy Quantities.
"""

import math

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.coma.thermal import mean_thermal_speed
from pipeline.errors import BudgetError, GasledgerTypeError
from pipeline.quantities import checked_array

__all__ = [
    "LATENT_HEAT",
    "nucleus_mass",
    "diameter_from_absolute_magnitude",
    "required_mass_loss_rate",
    "rocket_mass_fraction",
    "required_production_rate",
    "max_nucleus_mass",
    "max_bulk_density",
    "marsden_g",
    "nongrav_acceleration",
    "thermal_ejection_speed",
    "solar_irradiance",
    "sublimation_area_required",
]

_ACCEL_AU_D2 = u.au / u.day**2

#: Sublimation latent heats per unit mass, near the temperatures of a sublimating
#: surface.  All three are quoted from memory of the sources named; they are
#: rounded and good to a few per cent, the accuracy energy-limited sublimation needs.
LATENT_HEAT: dict[str, u.Quantity] = {
    # H2O ice Ih: 51.0 kJ/mol at 200 K from the fit of Murphy & Koop 2005, Q. J. R.
    # Meteorol. Soc. 131, 1539, eq. (5) (from memory); / 18.015 g/mol = 2.83e6 J/kg.
    "H2O": 2.83e6 * u.J / u.kg,
    # CO ice: about 8 kJ/mol near 40-60 K, from the sublimation-pressure fits
    # reviewed by Fray & Schmitt 2009, Planet. Space Sci. 57, 2053 (from memory);
    # / 28.010 g/mol = 2.9e5 J/kg.
    "CO": 2.9e5 * u.J / u.kg,
    # CO2 ice: about 26 kJ/mol near 150-195 K (Fray & Schmitt 2009; the NIST Chemistry
    # WebBook lists a similar enthalpy of sublimation, from memory); / 44.009 g/mol = 5.9e5 J/kg.
    "CO2": 5.9e5 * u.J / u.kg,
}


# --------------------------------------------------------------------------- #
# checks
# --------------------------------------------------------------------------- #
def _values(name: str, quantity: u.Quantity, unit: u.UnitBase, *, allow_zero: bool = False) -> np.ndarray:
    """Value of ``quantity`` in ``unit``, checked finite and > 0 (or >= 0)."""
    return checked_array(quantity, unit, name, sign="non-negative" if allow_zero else "positive", error=BudgetError)


def _fraction(name: str, value: float | np.ndarray | u.Quantity) -> np.ndarray:
    """A pure number in (0, 1]."""
    try:
        values = np.asarray(u.Quantity(value, u.dimensionless_unscaled).value, dtype=float)
    except (TypeError, ValueError, u.UnitsError) as exc:
        msg = f"{name!r} must be a number in (0, 1], found {value!r}"
        raise BudgetError(msg) from exc
    bad = ~(np.isfinite(values) & (values > 0) & (values <= 1))
    if np.any(bad):
        msg = f"{name!r} must lie in (0, 1], found {value!r}"
        raise BudgetError(msg)
    return values


# --------------------------------------------------------------------------- #
# nucleus
# --------------------------------------------------------------------------- #
@u.quantity_input(radius=u.m, density=u.kg / u.m**3)
def nucleus_mass(radius: u.Quantity, density: u.Quantity) -> u.Quantity:
    """Mass of a homogeneous sphere.

    Parameters
    ----------
    radius : Quantity ['length']
        Nucleus radius, > 0.
    density : Quantity ['mass density']
        Bulk density, > 0.

    Returns
    -------
    Quantity ['mass']
        ``M = 4/3 pi R^3 rho`` in kg.
    """
    r = _values("radius", radius, u.m)
    rho = _values("density", density, u.kg / u.m**3)
    return (4.0 / 3.0) * math.pi * r**3 * rho * u.kg


def diameter_from_absolute_magnitude(
    h_mag: float | np.ndarray | u.Quantity, albedo: float | np.ndarray | u.Quantity
) -> u.Quantity:
    """Diameter of a body from its absolute magnitude and geometric albedo.

    Parameters
    ----------
    h_mag : float, array or Quantity ['mag']
        Absolute magnitude ``H`` (V band).
    albedo : float, array or dimensionless Quantity
        Geometric albedo ``p_V`` in (0, 1].

    Returns
    -------
    Quantity ['length']
        Diameter in km.

    Notes
    -----
    ``D = 1329 km / sqrt(p_V) * 10^(-H/5)``.  The constant is the diameter of a
    body of ``H = 0`` and ``p_V = 1``.  For an active nucleus ``H`` includes the
    coma, so the diameter is an upper bound.

    References
    ----------
    .. [1] Fowler, J. W. & Chillemi, J. R. 1992, IRAS Minor Planet Survey,
       Phillips Laboratory report PL-TR-92-2049, p. 17.
    .. [2] Pravec, P. & Harris, A. W. 2007, Icarus 190, 250 (from memory).
    """
    h = np.asarray(h_mag.to_value(u.mag) if isinstance(h_mag, u.Quantity) else h_mag, dtype=float)
    if not np.all(np.isfinite(h)):
        msg = f"'h_mag' must be finite, found {h_mag!r}"
        raise BudgetError(msg)
    p = _fraction("albedo", albedo)
    return 1329.0 / np.sqrt(p) * 10.0 ** (-h / 5.0) * u.km


# --------------------------------------------------------------------------- #
# momentum balance
# --------------------------------------------------------------------------- #
@u.quantity_input(mass=u.kg, acceleration=u.m / u.s**2, ejection_speed=u.m / u.s)
def required_mass_loss_rate(
    mass: u.Quantity,
    acceleration: u.Quantity,
    ejection_speed: u.Quantity,
    efficiency: float = 1.0,
) -> u.Quantity:
    """Gas mass-loss rate whose recoil gives ``mass`` the ``acceleration``.

    Parameters
    ----------
    mass : Quantity ['mass']
        Nucleus mass, > 0.
    acceleration : Quantity ['acceleration']
        Magnitude of the non-gravitational acceleration, >= 0.
    ejection_speed : Quantity ['speed']
        Mean speed of the gas leaving the nucleus, > 0.
    efficiency : float, optional
        Momentum-transfer efficiency ``zeta`` in (0, 1]: the fraction of the gas
        momentum that pushes along the acceleration (1 = fully collimated jet).

    Returns
    -------
    Quantity ['mass flow rate']
        ``Mdot`` in kg/s.

    Notes
    -----
    Momentum balance ``M a = zeta Mdot v_ej``, so ``Mdot = M a / (zeta v_ej)``.
    The mass is taken as constant; over a long interval use
    :func:`rocket_mass_fraction`.

    Examples
    --------
    A 1e12 kg nucleus pushed at 1e-8 m/s^2 by gas leaving at 500 m/s, half of whose momentum
    pushes along the acceleration: Mdot = 1e12 x 1e-8 / (0.5 x 500) kg/s.

    >>> import astropy.units as u
    >>> mdot = required_mass_loss_rate(1e12 * u.kg, 1e-8 * u.m / u.s**2, 500 * u.m / u.s, efficiency=0.5)
    >>> print(f"{mdot:.6g}")
    40 kg / s
    """
    m = _values("mass", mass, u.kg)
    a = _values("acceleration", acceleration, u.m / u.s**2, allow_zero=True)
    v = _values("ejection_speed", ejection_speed, u.m / u.s)
    zeta = _fraction("efficiency", efficiency)
    return m * a / (zeta * v) * (u.kg / u.s)


@u.quantity_input(acceleration=u.m / u.s**2, interval=u.s, ejection_speed=u.m / u.s)
def rocket_mass_fraction(
    acceleration: u.Quantity,
    interval: u.Quantity,
    ejection_speed: u.Quantity,
    efficiency: float = 1.0,
) -> u.Quantity:
    """Fraction of the initial mass spent to sustain an acceleration over an interval.

    Parameters
    ----------
    acceleration : Quantity ['acceleration']
        Steady acceleration, >= 0.
    interval : Quantity ['time']
        Duration, >= 0.
    ejection_speed : Quantity ['speed']
        Gas speed, > 0.
    efficiency : float, optional
        Momentum-transfer efficiency ``zeta`` in (0, 1].

    Returns
    -------
    Quantity ['dimensionless']
        ``Delta M / M_0``.

    Notes
    -----
    Tsiolkovsky's rocket equation with an effective exhaust speed
    ``zeta v_ej`` and a velocity change ``Delta v = a Delta t``:

    .. math::

        \\frac{\\Delta M}{M_0} = 1 - \\exp\\left(-\\frac{a\\,\\Delta t}{\\zeta v_{ej}}\\right),

    computed with ``-expm1`` so small pushes keep full precision; for
    ``a Delta t << zeta v_ej`` it tends to ``a Delta t / (zeta v_ej)``.

    References
    ----------
    .. [1] Tsiolkovsky, K. E. 1903, "Exploration of the World Spaces by Reactive
       Devices"; any astrodynamics text, e.g. Curtis, H. D., Orbital Mechanics for
       Engineering Students, ch. 11.

    Examples
    --------
    1e-6 m/s^2 for 1e8 s with gas at 500 m/s is a velocity change of a fifth of the exhaust
    speed, so the nucleus spends 1 - exp(-0.2) of its mass; a small push (1e-8 m/s^2 for
    1e7 s) spends about a dt / v_ej = 2e-4:

    >>> import math
    >>> import astropy.units as u
    >>> spent = rocket_mass_fraction(1e-6 * u.m / u.s**2, 1e8 * u.s, 500 * u.m / u.s)
    >>> print(f"{spent.value:.6f}")
    0.181269
    >>> print(f"{1 - math.exp(-0.2):.6f}")
    0.181269
    >>> small = rocket_mass_fraction(1e-8 * u.m / u.s**2, 1e7 * u.s, 500 * u.m / u.s)
    >>> print(f"{small.value:.4g}")
    0.0002
    """
    a = _values("acceleration", acceleration, u.m / u.s**2, allow_zero=True)
    dt = _values("interval", interval, u.s, allow_zero=True)
    v = _values("ejection_speed", ejection_speed, u.m / u.s)
    zeta = _fraction("efficiency", efficiency)
    return -np.expm1(-a * dt / (zeta * v)) * u.dimensionless_unscaled


@u.quantity_input(mass_loss_rate=u.kg / u.s, molecular_mass=u.kg)
def required_production_rate(mass_loss_rate: u.Quantity, molecular_mass: u.Quantity) -> u.Quantity:
    """Molecular production rate that carries a mass-loss rate.

    Parameters
    ----------
    mass_loss_rate : Quantity ['mass flow rate']
        ``Mdot``, >= 0.
    molecular_mass : Quantity ['mass']
        Mass of one molecule (e.g. ``18.015 * u.u``), > 0.

    Returns
    -------
    Quantity ['frequency']
        ``Q = Mdot / m`` in molecules per second (1/s).
    """
    mdot = _values("mass_loss_rate", mass_loss_rate, u.kg / u.s, allow_zero=True)
    m = _values("molecular_mass", molecular_mass, u.kg)
    return mdot / m / u.s


@u.quantity_input(q_upper=1 / u.s, molecular_mass=u.kg, acceleration=u.m / u.s**2, ejection_speed=u.m / u.s)
def max_nucleus_mass(
    q_upper: u.Quantity,
    molecular_mass: u.Quantity,
    acceleration: u.Quantity,
    ejection_speed: u.Quantity,
    efficiency: float = 1.0,
) -> u.Quantity:
    """Largest nucleus mass whose required production rate stays within a limit.

    Parameters
    ----------
    q_upper : Quantity ['frequency']
        Upper limit (or measurement) of the production rate, molecules/s, >= 0.
    molecular_mass : Quantity ['mass']
        Mass of one molecule, > 0.
    acceleration : Quantity ['acceleration']
        Acceleration to be explained, > 0.
    ejection_speed : Quantity ['speed']
        Gas speed, > 0.
    efficiency : float, optional
        Momentum-transfer efficiency ``zeta`` in (0, 1].

    Returns
    -------
    Quantity ['mass']
        ``M_max = zeta v_ej Q_upper m / a`` in kg.

    Notes
    -----
    The inverse of :func:`required_mass_loss_rate` followed by
    :func:`required_production_rate`: a nucleus heavier than ``M_max`` would
    need more gas than the limit allows.
    """
    q = _values("q_upper", q_upper, 1 / u.s, allow_zero=True)
    m = _values("molecular_mass", molecular_mass, u.kg)
    a = _values("acceleration", acceleration, u.m / u.s**2)
    v = _values("ejection_speed", ejection_speed, u.m / u.s)
    zeta = _fraction("efficiency", efficiency)
    return zeta * v * q * m / a * u.kg


@u.quantity_input(max_mass=u.kg, radius=u.m)
def max_bulk_density(max_mass: u.Quantity, radius: u.Quantity) -> u.Quantity:
    """Bulk density of a sphere of ``radius`` holding ``max_mass``.

    Returns
    -------
    Quantity ['mass density']
        ``rho_max = M_max / (4/3 pi R^3)`` in kg/m^3.
    """
    m = _values("max_mass", max_mass, u.kg, allow_zero=True)
    r = _values("radius", radius, u.m)
    return m / ((4.0 / 3.0) * math.pi * r**3) * (u.kg / u.m**3)


# --------------------------------------------------------------------------- #
# non-gravitational law
# --------------------------------------------------------------------------- #
@u.quantity_input(r_h=u.au, r0=u.au)
def marsden_g(
    r_h: u.Quantity,
    *,
    r0: u.Quantity = 2.808 * u.au,
    m: float = 2.15,
    n: float = 5.093,
    k: float = 4.6142,
    alpha: float = 0.1112,
    normalise: bool = False,
) -> u.Quantity:
    """Non-gravitational force law ``g(r)`` of Marsden, Sekanina & Yeomans.

    Parameters
    ----------
    r_h : Quantity ['length']
        Heliocentric distance, > 0.
    r0 : Quantity ['length'], optional
        Scale distance (2.808 au for water ice).
    m, n, k : float, optional
        Exponents (2.15, 5.093, 4.6142 for water ice).
    alpha : float, optional
        Normalisation (0.1112 published for water ice).  Ignored when
        ``normalise`` is true.
    normalise : bool, optional
        Recompute ``alpha`` so that ``g(1 au) = 1`` exactly (useful for a
        variant law given with other ``r0, m, n, k``).

    Returns
    -------
    Quantity ['dimensionless']
        ``g(r_h)``.

    Notes
    -----
    .. math::

        g(r) = \\alpha \\left(\\frac{r}{r_0}\\right)^{-m}
               \\left[1 + \\left(\\frac{r}{r_0}\\right)^{n}\\right]^{-k},

    the shape of the water-ice sublimation rate against distance; with the
    published constants ``g(1 au) = 0.9995``.

    References
    ----------
    .. [1] Marsden, B. G., Sekanina, Z. & Yeomans, D. K. 1973, AJ 78, 211.
    """
    r = _values("r_h", r_h, u.au)
    scale = _values("r0", r0, u.au)
    for name, value in (("m", m), ("n", n), ("k", k), ("alpha", alpha)):
        if not np.isfinite(value):
            msg = f"{name!r} must be finite, found {value!r}"
            raise BudgetError(msg)

    def shape(x: np.ndarray) -> np.ndarray:
        return x ** (-m) * (1.0 + x**n) ** (-k)

    if normalise:
        alpha = 1.0 / shape(1.0 / scale)
    elif alpha <= 0:
        msg = f"'alpha' must be > 0, found {alpha!r}"
        raise BudgetError(msg)
    return alpha * shape(r / scale) * u.dimensionless_unscaled


@u.quantity_input(a1=_ACCEL_AU_D2, a2=_ACCEL_AU_D2, a3=_ACCEL_AU_D2, r_h=u.au)
def nongrav_acceleration(
    a1: u.Quantity, a2: u.Quantity, a3: u.Quantity, r_h: u.Quantity, **law_params: float | u.Quantity | bool
) -> u.Quantity:
    """Magnitude of the non-gravitational acceleration from ``A1, A2, A3``.

    Parameters
    ----------
    a1, a2, a3 : Quantity ['acceleration']
        Radial, transverse and normal parameters (usually in au/d^2).
    r_h : Quantity ['length']
        Heliocentric distance.
    **law_params
        Keyword arguments passed to :func:`marsden_g` (``r0, m, n, k, alpha,
        normalise``) for a variant law.

    Returns
    -------
    Quantity ['acceleration']
        ``|a| = g(r_h) sqrt(A1^2 + A2^2 + A3^2)`` in m/s^2.

    References
    ----------
    .. [1] Marsden, B. G., Sekanina, Z. & Yeomans, D. K. 1973, AJ 78, 211.
    """
    comps = [q.to_value(_ACCEL_AU_D2) for q in (a1, a2, a3)]
    for name, value, q in zip(("a1", "a2", "a3"), comps, (a1, a2, a3), strict=True):
        if not np.all(np.isfinite(value)):
            msg = f"{name!r} must be finite, found {q!r}"
            raise BudgetError(msg)
    total = np.sqrt(comps[0] ** 2 + comps[1] ** 2 + comps[2] ** 2)
    g = marsden_g(r_h, **law_params).value
    return (g * total * _ACCEL_AU_D2).to(u.m / u.s**2)


# --------------------------------------------------------------------------- #
# gas speed and energy
# --------------------------------------------------------------------------- #
@u.quantity_input(temperature=u.K, molecular_mass=u.kg, equivalencies=u.temperature())
def thermal_ejection_speed(temperature: u.Quantity, molecular_mass: u.Quantity) -> u.Quantity:
    """Mean speed of a Maxwell-Boltzmann gas.

    Parameters
    ----------
    temperature : Quantity ['temperature']
        Gas temperature, > 0 K.
    molecular_mass : Quantity ['mass']
        Mass of one molecule, > 0.

    Returns
    -------
    Quantity ['speed']
        ``v = sqrt(8 k T / (pi m))`` in km/s.

    Notes
    -----
    The mean of the Maxwell speed distribution
    (:func:`pipeline.coma.thermal.mean_thermal_speed`, the home of the
    thermal-speed formulas; ``temperature`` may be in any temperature unit).
    It is a lower estimate of the terminal speed of gas that expands into
    vacuum, which gains speed from its internal energy.
    """
    return mean_thermal_speed(temperature.to(u.K, equivalencies=u.temperature()), molecular_mass,
                              error=BudgetError)


@u.quantity_input(r_h=u.au)
def solar_irradiance(r_h: u.Quantity) -> u.Quantity:
    """Solar flux at heliocentric distance ``r_h``.

    Returns
    -------
    Quantity ['energy flux']
        ``S = L_sun / (4 pi r_h^2)`` in W/m^2, with the IAU 2015 nominal solar
        luminosity (:data:`astropy.constants.L_sun`).

    References
    ----------
    .. [1] IAU 2015 Resolution B3 (nominal solar luminosity and irradiance).
    """
    r = _values("r_h", r_h, u.m)
    return const.L_sun.to_value(u.W) / (4.0 * math.pi * r**2) * (u.W / u.m**2)


@u.quantity_input(mass_loss_rate=u.kg / u.s, r_h=u.au)
def sublimation_area_required(
    mass_loss_rate: u.Quantity,
    r_h: u.Quantity,
    latent_heat: u.Quantity | str,
    absorbed_fraction: float = 1.0,
) -> u.Quantity:
    """Sunlit area whose absorbed sunlight pays the latent heat of a mass-loss rate.

    Parameters
    ----------
    mass_loss_rate : Quantity ['mass flow rate']
        ``Mdot``, >= 0.
    r_h : Quantity ['length']
        Heliocentric distance, > 0.
    latent_heat : Quantity ['specific energy'] or str
        Latent heat of sublimation per unit mass, or a key of
        :data:`LATENT_HEAT` (``'H2O'``, ``'CO'``, ``'CO2'``).
    absorbed_fraction : float, optional
        Fraction ``f`` in (0, 1] of the incident sunlight that goes into
        sublimation (``1 - A_bond`` at most).

    Returns
    -------
    Quantity ['area']
        ``A = Mdot L / (f S(r_h))`` in m^2.

    Notes
    -----
    Energy-limited sublimation, with ``S(r_h) = L_sun / (4 pi r_h^2)`` the solar
    flux on a surface facing the Sun.  Thermal re-radiation, conduction into the
    interior and oblique illumination are ignored, so the result is a lower
    bound on the active area; compare it with the nucleus cross-section
    ``pi R^2`` (or half the surface, ``2 pi R^2``).
    """
    if isinstance(latent_heat, str):
        try:
            latent_heat = LATENT_HEAT[latent_heat]
        except KeyError as exc:
            msg = f"'latent_heat' names an unknown species {latent_heat!r}, expected one of {sorted(LATENT_HEAT)}"
            raise BudgetError(msg) from exc
    if not isinstance(latent_heat, u.Quantity):
        msg = f"'latent_heat' must be a Quantity in J/kg or a species name, found {latent_heat!r}"
        raise GasledgerTypeError(msg)
    mdot = _values("mass_loss_rate", mass_loss_rate, u.kg / u.s, allow_zero=True)
    heat = _values("latent_heat", latent_heat, u.J / u.kg)
    f = _fraction("absorbed_fraction", absorbed_fraction)
    flux = solar_irradiance(r_h).to_value(u.W / u.m**2)
    return mdot * heat / (f * flux) * u.m**2
