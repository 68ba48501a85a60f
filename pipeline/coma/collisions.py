"""Collisional excitation in a cometary coma: water and electron rate coefficients, and the coma's densities.

Rate coefficients are returned as full square matrices ``k[i, j]`` (cm^3 s^-1) of the
transition from level ``i`` to level ``j``; multiplied by the partner's density they are
rates per molecule (s^-1). Every pair obeys detailed balance at the partner's
temperature T,

    g_i exp(-E_i/kT) k[i, j] = g_j exp(-E_j/kT) k[j, i],

because the upward coefficient is always built from the downward one.

References
----------
.. [1] Crovisier, J. 1987, A&AS 68, 223 (H2O-H2O collisions in comae as n sigma v with a
   cross-section of a few 1e-14 cm^2; from memory).
.. [2] Itikawa, Y. & Mason, N. 2005, Phys. Rep. 414, 1 (the dipole Born cross-section of
   rotational excitation by electrons; from memory).
.. [3] Dickinson, A. S., Phillips, T. G., Goldsmith, P. F., Percival, I. C. & Richards, D. J.
   1977, A&A 54, 645 (its Maxwellian average with the Bessel function K0; from memory).
.. [4] Biver, N. 1997, PhD thesis, Université Paris 7; Biver, N. et al. 1999, AJ 118, 1850;
   Zakharov, V. et al. 2007, A&A 473, 303 (the cometary electron density scaled by x_ne and
   the electron temperature rising from T_kin at the contact surface to 1e4 K at twice its
   distance; from memory).
.. [5] Bergman, P. et al. 2022, A&A 660, A118 (time-dependent HCN excitation with this electron
   model; the caption of its Fig. A.2 states the rise of T_e from 90 K to 1e4 K between R_cs
   and 2 R_cs; read).
"""

from __future__ import annotations

import math

import astropy.constants as const
import astropy.units as u
import numpy as np
from scipy.special import k0e

from pipeline.coma.haser import parent_density, scale_length
from pipeline.coma.lamda import HC_OVER_K, CollisionTable, MolecularData
from pipeline.coma.thermal import mean_thermal_speed
from pipeline.errors import CatalogueError, ConfigError
from pipeline.quantities import checked_array

__all__ = [
    "H2O_MASS",
    "SIGMA_H2O",
    "NEUTRAL_RULES",
    "detailed_balance",
    "relative_speed",
    "neutral_rate_coefficients",
    "NeutralRates",
    "table_rate_coefficients",
    "born_rate_coefficients",
    "BornRates",
    "water_density",
    "contact_surface",
    "electron_temperature",
    "electron_density",
    "IONISATION_RATE_1AU",
    "T_E_HOT",
]

#: Mass of a water molecule (IUPAC standard atomic weights, H 1.008, O 15.999).
H2O_MASS = 18.015 * u.u
#: Total cross-section of rotational de-excitation by water: 5e-14 cm^2, common practice in coma models
#: (e.g. Biver et al. 1999, AJ 118, 1850; from memory).
SIGMA_H2O = 5e-14 * u.cm**2
#: How a total collision rate n sigma v is shared among final levels (see neutral_rate_coefficients).
NEUTRAL_RULES = ("dipole", "uniform")
#: Photoionisation rate of H2O at 1 au, quiet Sun (Huebner, Keady & Lyon 1992, Ap&SS 195, 1; from memory).
IONISATION_RATE_1AU = 4.1e-7 / u.s
#: Electron temperature outside twice the contact-surface distance (Biver 1997; from memory).
T_E_HOT = 1e4 * u.K

_A0_CM = const.a0.cgs.value
_RY_ERG = (const.Ryd * const.h * const.c).cgs.value  # 13.606 eV
_ME_G = const.m_e.cgs.value
_K_ERG = const.k_B.cgs.value
_H_CGS = const.h.cgs.value
_C_CGS = const.c.cgs.value
_E_A0 = (const.e.esu * const.a0).cgs.value  # atomic unit of dipole moment, statC cm
_ALPHA_300 = 7e-7  # cm^3 s^-1, dissociative recombination of H3O+/H2O+ at 300 K (from memory)
_R_CS_KM = 1125.0  # km at Q = 1e29 /s (from memory)


def _temperature(t, name="t_kin") -> float:
    return float(checked_array(t, u.K, name, scalar=True, error=ConfigError))


def detailed_balance(downward: np.ndarray, molecule: MolecularData, t_kin: u.Quantity) -> np.ndarray:
    """Full rate-coefficient matrix from the downward one, the upward half by detailed balance.

    Parameters
    ----------
    downward : ndarray (n, n)
        ``downward[u, l]``: coefficient from the upper level u to the lower level l (entries with
        E_u <= E_l are ignored).
    molecule : MolecularData
    t_kin : Quantity [K]

    Notes
    -----
    k_lu = k_ul (g_u / g_l) exp(-(E_u - E_l) / kT) (the principle of detailed balance, e.g.
    Rybicki & Lightman 1979, Radiative Processes in Astrophysics, eq. 10.6; from memory).
    """
    t = _temperature(t_kin)
    return _balanced(np.asarray(downward, dtype=float), molecule.energy.to_value(u.cm**-1) * HC_OVER_K,
                     molecule.weight, t)


def _balanced(down: np.ndarray, e: np.ndarray, g: np.ndarray, t: float) -> np.ndarray:
    """detailed_balance on plain arrays: energies ``e`` in K, weights ``g``, temperature ``t`` in K."""
    higher = e[:, None] > e[None, :]
    down = np.where(higher, down, 0.0)
    with np.errstate(over="ignore"):
        boltz = np.where(higher, (g[:, None] / g[None, :]) * np.exp(-(e[:, None] - e[None, :]) / t), 0.0)
    full = down + (down * boltz).T
    np.fill_diagonal(full, 0.0)
    return full


def relative_speed(t_kin: u.Quantity, mass: u.Quantity, partner_mass: u.Quantity = H2O_MASS) -> u.Quantity:
    """Mean relative speed of two Maxwellian gases at one temperature (km/s).

    Notes
    -----
    v_rel = sqrt(8 k T / (pi m_r)), m_r = m m_p / (m + m_p): the mean thermal speed of a
    particle of the reduced mass (Reif 1965, section 12.2; from memory), computed with
    :func:`pipeline.coma.thermal.mean_thermal_speed`.
    """
    m = checked_array(mass, u.u, "mass", error=CatalogueError)
    mp = checked_array(partner_mass, u.u, "partner_mass", error=CatalogueError)
    return mean_thermal_speed(t_kin, u.Quantity(m * mp / (m + mp), u.u))


def neutral_rate_coefficients(molecule: MolecularData, t_kin: u.Quantity, sigma: u.Quantity = SIGMA_H2O,
                              rule: str = "dipole") -> u.Quantity:
    """Rate coefficients of collisions with water from a total cross-section.

    Parameters
    ----------
    molecule : MolecularData
        Needs a positive ``mass`` (for the relative speed).
    t_kin : Quantity [K]
        Gas kinetic temperature.
    sigma : Quantity [area]
        Total de-excitation cross-section (default :data:`SIGMA_H2O`, 5e-14 cm^2, common practice).
    rule : {'dipole', 'uniform'}
        How the collision rate is shared among final levels.

    Returns
    -------
    Quantity [cm^3 s^-1], shape (n, n)
        ``k[i, j]`` from level i to level j; the rate per molecule is n_H2O k.

    Notes
    -----
    With K = sigma v_rel (v_rel from :func:`relative_speed`):

    - ``'dipole'``: only pairs joined by a listed radiative (dipole) transition collide, as the
      dipole-dipole interaction with water favours Delta J = +-1 (a choice; cf. Chin & Weaver
      1984, ApJ 285, 858, from memory); downward k_ul = K g_l / (g_l + g_u), so that at kT much
      above the level spacing a level J of a linear rotor leaves at K [(2J-1)/(4J) + (2J+3)/(4J+4)]
      ~ K in total.
    - ``'uniform'``: every pair collides; downward k_ul = K g_l / G, G the sum of all weights,
      so that at high temperature a level i leaves at K (1 - g_i / G), each final level
      reached in proportion to its statistical weight.

    Upward coefficients follow by detailed balance (:func:`detailed_balance`).
    """
    return u.Quantity(NeutralRates(molecule, sigma, rule)(_temperature(t_kin)), u.cm**3 / u.s)


class NeutralRates:
    """Water rate coefficients of one molecule, cross-section and rule, evaluated at any temperature.

    The constants of :func:`neutral_rate_coefficients` are computed once; calling the object with a
    temperature in kelvin (a plain number) returns the (n, n) matrix in cm^3 s^-1 as an array. The
    relative speed scales as sqrt(T) (:func:`relative_speed` at 1 K times sqrt(T)).
    """

    def __init__(self, molecule: MolecularData, sigma: u.Quantity = SIGMA_H2O, rule: str = "dipole"):
        if rule not in NEUTRAL_RULES:
            msg = f"collision rule must be one of {', '.join(NEUTRAL_RULES)}, found {rule!r}"
            raise ConfigError(msg)
        if not molecule.mass.to_value(u.u) > 0:
            msg = (f"molecular data {molecule.source!r} has mass {molecule.mass}; expected a positive molecular "
                   "mass for the collision speed (give linear_rotor a mass)")
            raise CatalogueError(msg)
        s = float(checked_array(sigma, u.cm**2, "sigma", scalar=True, error=ConfigError))
        self.k_1k = s * relative_speed(1.0 * u.K, molecule.mass).to_value(u.cm / u.s)
        g = molecule.weight
        n = molecule.n_levels
        self.shape = np.zeros((n, n))
        if rule == "dipole":
            up, lo = molecule.upper, molecule.lower
            self.shape[up, lo] = g[lo] / (g[lo] + g[up])
        else:
            self.shape[:] = g[None, :] / g.sum()
        self.e = molecule.energy.to_value(u.cm**-1) * HC_OVER_K
        self.g = g

    def __call__(self, t: float) -> np.ndarray:
        return _balanced(self.k_1k * math.sqrt(t) * self.shape, self.e, self.g, t)


def table_rate_coefficients(molecule: MolecularData, table: CollisionTable, t_kin: u.Quantity) -> u.Quantity:
    """Rate coefficients (cm^3 s^-1, n x n) from a LAMDA collision table at ``t_kin``.

    Notes
    -----
    The table's downward coefficients, linearly interpolated in T
    (:meth:`~pipeline.coma.lamda.CollisionTable.downward`); upward ones by detailed balance.
    Pairs the table lacks do not collide.
    """
    n = molecule.n_levels
    down = np.zeros((n, n))
    k = table.downward(t_kin).to_value(u.cm**3 / u.s)
    e = molecule.energy.to_value(u.cm**-1)
    for a, b, kk in zip(table.upper, table.lower, k):
        hi, lo = (a, b) if e[a] > e[b] else (b, a)
        if hi < n and lo < n:
            down[hi, lo] = kk
    return u.Quantity(detailed_balance(down, molecule, t_kin), u.cm**3 / u.s)


class BornRates:
    """Electron-impact rate coefficients of one molecule's dipole transitions, evaluated at any temperature.

    The constants of :func:`born_rate_coefficients` are computed once; calling the object with a
    temperature in kelvin (a plain number) returns the (n, n) matrix in cm^3 s^-1 as an array.
    """

    def __init__(self, molecule: MolecularData):
        up, lo = molecule.upper, molecule.lower
        nu = molecule.freq.to_value(u.Hz)
        a = molecule.a_ul.to_value(1 / u.s)
        g = molecule.weight
        s_mu2 = 3.0 * _H_CGS * _C_CGS**3 * g[up] * a / (64.0 * math.pi**4 * nu**3) / _E_A0**2
        self.e = molecule.energy.to_value(u.cm**-1) * HC_OVER_K
        self.g = g
        self.up, self.lo = up, lo
        self.half_gap = 0.5 * (self.e[up] - self.e[lo])
        # downward k_ul = k_lu (g_l / g_u) exp(2x): with k_lu = c exp(-x) K0(x) = c exp(-2x) k0e(x),
        # k_ul = c (g_l / g_u) k0e(x), free of overflow at large x = dE / 2kT
        self.c_down = (16.0 * math.sqrt(2.0 * math.pi) / 3.0 * _A0_CM**2 * _RY_ERG / math.sqrt(_ME_G * _K_ERG)
                       * s_mu2 / g[up])
        self.n = molecule.n_levels

    def __call__(self, t: float) -> np.ndarray:
        down = np.zeros((self.n, self.n))
        down[self.up, self.lo] = self.c_down / math.sqrt(t) * k0e(self.half_gap / t)
        return _balanced(down, self.e, self.g, t)


def born_rate_coefficients(molecule: MolecularData, t_e: u.Quantity) -> u.Quantity:
    """Electron-impact rate coefficients of the dipole-allowed transitions, first Born approximation.

    Parameters
    ----------
    molecule : MolecularData
        Every listed radiative transition is taken as dipole-allowed.
    t_e : Quantity [K]
        Electron temperature.

    Returns
    -------
    Quantity [cm^3 s^-1], shape (n, n)

    Notes
    -----
    The Born cross-section of a dipole transition l -> u (energy gap dE) at electron energy E
    (Itikawa & Mason 2005, Phys. Rep. 414, 1; from memory), in atomic units of length, energy
    (Rydberg, Ry) and dipole moment (e a0), for a linear rotor J -> J+1 with dipole mu:

        sigma(E) = (8 pi / 3) a0^2 mu^2 (J+1)/(2J+1) (Ry / E) ln[(sqrt E + sqrt(E - dE)) /
                   (sqrt E - sqrt(E - dE))];

    generally mu^2 (J+1) is the line strength S mu^2 = 3 h c^3 g_u A_ul / (64 pi^4 nu^3) and
    2J+1 is g_l, so the rates follow from each line's A and frequency. Averaged over a
    Maxwellian of temperature T (with E = dE cosh^2 s the integral is a Bessel-function
    integral),

        k_lu = (16 sqrt(2 pi) / 3) a0^2 Ry (m_e k T)^(-1/2) (S mu^2 / (e a0)^2) / g_l
               * exp(-dE / 2kT) K0(dE / 2kT),

    the closed form of Dickinson et al. 1977 (A&A 54, 645; from memory). Downward
    coefficients follow by detailed balance.
    """
    return u.Quantity(BornRates(molecule)(_temperature(t_e, "t_e")), u.cm**3 / u.s)


# ----------------------------------------------------------------------------- coma densities
def water_density(r: u.Quantity, q_h2o: u.Quantity, speed: u.Quantity, r_h: u.Quantity,
                  rate_1au: u.Quantity) -> u.Quantity:
    """Water number density (cm^-3): a Haser parent.

    Notes
    -----
    n(r) = Q exp(-r / L) / (4 pi r^2 v), L = v (r_h / 1 au)^2 / beta_1au
    (:func:`pipeline.coma.haser.parent_density`, :func:`pipeline.coma.haser.scale_length`;
    Haser 1957).
    """
    return parent_density(r, q_h2o, speed, scale_length(speed, rate_1au, r_h))


def contact_surface(q_h2o: u.Quantity, x_re: float = 1.0) -> u.Quantity:
    """Distance of the contact surface (km) inside which electrons are as cold as the neutrals.

    Notes
    -----
    R_cs = 1125 km x_re (Q / 1e29 s^-1)^(3/4) (Biver 1997; Biver et al. 1999, AJ 118, 1850;
    coefficient and exponent from memory). It gives about 5000 km for Q = 7e29 s^-1.
    """
    q = checked_array(q_h2o, 1 / u.s, "q_h2o", error=ConfigError)
    if not x_re > 0:
        msg = f"x_re must be positive, found {x_re!r}"
        raise ConfigError(msg)
    return u.Quantity(_R_CS_KM * x_re * (q / 1e29) ** 0.75, u.km)


def electron_temperature(r: u.Quantity, q_h2o: u.Quantity, t_kin: u.Quantity, x_re: float = 1.0,
                         t_hot: u.Quantity = T_E_HOT) -> u.Quantity:
    """Electron temperature (K) at distance ``r`` from the nucleus.

    Notes
    -----
    T_e = T_kin for r < R_cs, T_kin + (T_hot - T_kin)(r / R_cs - 1) for R_cs <= r <= 2 R_cs,
    T_hot (1e4 K) beyond (Biver 1997; Zakharov et al. 2007, A&A 473, 303, from memory; the rise
    between R_cs and 2 R_cs as stated in Bergman et al. 2022, A&A 660, A118, Fig. A.2), with
    R_cs from :func:`contact_surface`.
    """
    rr = checked_array(r, u.km, "r", error=ConfigError)
    rcs = contact_surface(q_h2o, x_re).to_value(u.km)
    t0 = checked_array(t_kin, u.K, "t_kin", error=ConfigError)
    th = _temperature(t_hot, "t_hot")
    ramp = t0 + (th - t0) * np.clip(rr / rcs - 1.0, 0.0, 1.0)
    return u.Quantity(ramp, u.K)


def electron_density(r: u.Quantity, q_h2o: u.Quantity, speed: u.Quantity, r_h: u.Quantity, rate_1au: u.Quantity,
                     t_kin: u.Quantity, x_ne: float = 0.2, x_re: float = 1.0,
                     ionisation_1au: u.Quantity = IONISATION_RATE_1AU) -> u.Quantity:
    """Electron density (cm^-3) of a water coma's ionosphere, scaled by ``x_ne``.

    Parameters
    ----------
    r, q_h2o, speed, r_h, rate_1au : Quantity
        Distance, water production rate, outflow speed, heliocentric distance and water
        photodestruction rate at 1 au (as :func:`water_density`).
    t_kin : Quantity [K]
        Neutral temperature (the electrons' inside the contact surface); a scalar or an array
        broadcast with ``r``.
    x_ne : float
        Scaling factor of the density (0.2 to 0.3 fit water lines in Biver's work; from memory).
    x_re : float
        Scaling factor of the contact-surface distance.
    ionisation_1au : Quantity [1/s]
        Ionisation rate of water at 1 au (scaled as r_h^-2).

    Notes
    -----
    Photochemical equilibrium of ionisation and dissociative recombination,

        n_e(r) = x_ne sqrt(k_i n_H2O(r) / alpha(T_e(r))),
        k_i = k_i(1 au) (r_h / 1 au)^-2,  alpha(T_e) = 7e-7 (300 K / T_e)^(1/2) cm^3 s^-1,

    with n_H2O from :func:`water_density` and T_e from :func:`electron_temperature`. This is
    the form of the model of Biver (1997) and Zakharov et al. (2007), in which n_e falls as
    1/r and the scaling factor x_ne is fitted to observations; its constants are from memory
    and its recombination-surface correction at large r is left out.
    """
    if not x_ne >= 0:
        msg = f"x_ne must be non-negative, found {x_ne!r}"
        raise ConfigError(msg)
    rh = checked_array(r_h, u.au, "r_h", error=ConfigError)
    k_i = checked_array(ionisation_1au, 1 / u.s, "ionisation_1au", error=ConfigError) / rh**2
    n_w = water_density(r, q_h2o, speed, r_h, rate_1au).to_value(u.cm**-3)
    t_e = electron_temperature(r, q_h2o, t_kin, x_re).to_value(u.K)
    alpha = _ALPHA_300 * np.sqrt(300.0 / t_e)
    return u.Quantity(x_ne * np.sqrt(k_i * n_w / alpha), u.cm**-3)
