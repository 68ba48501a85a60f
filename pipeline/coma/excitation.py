"""Optically thin LTE emission of rotational lines, with the cosmic background.

Converts between a number of molecules in the field of view and the
velocity-integrated flux density of one line.
"""

from __future__ import annotations

import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import Line, Species
from pipeline.errors import CatalogueError, OpacityWarning
from pipeline.io.memo import inputs_key

__all__ = [
    "T_CMB",
    "upper_level_fraction",
    "background_factor",
    "flux_per_molecule",
    "line_optical_depth",
]

#: Cosmic microwave background temperature (Fixsen 2009, ApJ 707, 916).
T_CMB = 2.72548 * u.K


def upper_level_fraction(line: Line, species: Species, t_kin: u.Quantity) -> np.ndarray:
    """Fraction of molecules in the upper level in LTE at ``t_kin``.

    Notes
    -----
    f_u = g_u exp(-E_u / T) / Q(T), with E_u in kelvin and Q the catalogue's
    partition function (Boltzmann distribution). g_u and Q carry the
    nuclear-spin statistical weights of the same CDMS or JPL entry (the
    catalogue's convention), so f_u is the fraction of all molecules, ortho and
    para (or A and E) together, in the upper level.
    """
    temp = u.Quantity(t_kin, u.K).value
    q_t = species.partition_function(temp * u.K)
    return line.g_up * np.exp(-line.e_up.to_value(u.K) / temp) / q_t


def background_factor(freq: u.Quantity, t_ex: u.Quantity, t_bg: u.Quantity = T_CMB) -> np.ndarray:
    """Factor 1 - B_nu(T_bg) / B_nu(T_ex) that removes the absorbed background.

    Notes
    -----
    For an optically thin line seen against a background of brightness
    B_nu(T_bg), the emerging excess intensity is (B_nu(T_ex) - B_nu(T_bg)) tau,
    i.e. the emission h nu A N_u / (4 pi) times this factor
    (e.g. Mangum & Shirley 2015, PASP 127, 266, eq. 27).
    With x = h nu / kT, the ratio (e^x_ex - 1)/(e^x_bg - 1) is evaluated as
    e^(x_ex - x_bg) (1 - e^-x_ex)/(1 - e^-x_bg), which stays finite as
    T_bg -> 0 (no background: factor 1, also at T_bg = 0 K).
    """
    h_nu_k = (const.h * u.Quantity(freq) / const.k_B).to_value(u.K)
    with np.errstate(divide="ignore"):  # t_bg = 0 K: x_bg = inf, no background
        x_ex = h_nu_k / u.Quantity(t_ex, u.K).value
        x_bg = h_nu_k / u.Quantity(t_bg, u.K).value
    return 1.0 - np.exp(x_ex - x_bg) * np.expm1(-x_ex) / np.expm1(-x_bg)


#: flux_per_molecule's results in this process, by the identity of the line and species entries (kept alive here,
#: so an identity is never reused while its entry is kept) and the exact values of the quantities; at most
#: _FLUX_KEPT entries, then forgotten. The injection asks the same values again for every sky position.
_FLUX: dict[tuple, tuple[Line, Species, u.Quantity]] = {}
_FLUX_KEPT = 4096


def _exact(value) -> tuple[str, str]:
    """A hashable key of a quantity's (or number's) exact value: its unit and the digest of its array
    (:func:`pipeline.io.memo.inputs_key`: dtype, shape, bytes)."""
    q = u.Quantity(value)
    return q.unit.to_string(), inputs_key(np.asarray(q.value))


def flux_per_molecule(line: Line, species: Species, t_kin: u.Quantity,
                      delta: u.Quantity, t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Velocity-integrated flux density of ``line`` per molecule at distance ``delta``.

    Parameters
    ----------
    line, species : catalogue entries
    t_kin : Quantity [temperature]
        LTE excitation temperature (taken equal to the kinetic temperature).
    delta : Quantity [length]
        Observer-target distance.
    t_bg : Quantity [temperature]
        Background radiation temperature, default the CMB.

    Returns
    -------
    Quantity [Jy km/s]
        Integrated line flux ∫S dv produced by one molecule in the aperture.

    Notes
    -----
    F = f_u(T) h nu A_ul / (4 pi Delta^2) (1 - B_nu(T_bg)/B_nu(T)) in W m^-2,
    and ∫S dv = F c / nu. Optically thin, LTE. Does not include any
    instrumental or interferometric filtering.
    """
    key = (id(line), id(species), _exact(t_kin), _exact(delta), _exact(t_bg))
    kept = _FLUX.get(key)
    if kept is not None and kept[0] is line and kept[1] is species:
        return kept[2].copy()
    nu = line.freq
    frac = upper_level_fraction(line, species, t_kin)
    bg = background_factor(nu, t_kin, t_bg)
    power = frac * bg * const.h * nu * line.a_ul / (4 * np.pi * u.Quantity(delta) ** 2)
    flux = (power * const.c / nu).to(u.Jy * u.km / u.s)
    if len(_FLUX) >= _FLUX_KEPT:
        _FLUX.clear()
    _FLUX[key] = (line, species, flux.copy())
    return flux


def line_optical_depth(line: Line, species: Species, t_kin: u.Quantity,
                       column_density: u.Quantity, linewidth: u.Quantity,
                       warn_above: float = 0.1) -> np.ndarray:
    """Peak optical depth of a line for a column density and a (FWHM) velocity width.

    A warning of class :class:`OpacityWarning` is emitted when the depth exceeds
    ``warn_above``, since the optically thin conversion then underestimates Q.

    Notes
    -----
    tau_0 = c^3 A_ul N_u (exp(h nu / kT) - 1) / (8 pi nu^3 Δv) times the peak of a
    Gaussian profile of unit area, sqrt(4 ln 2 / pi) (Mangum & Shirley 2015, eq. 29).
    """
    nu = line.freq
    n_up = upper_level_fraction(line, species, t_kin) * u.Quantity(column_density)
    x = (const.h * nu / (const.k_B * u.Quantity(t_kin, u.K))).decompose().value
    dv = u.Quantity(linewidth)
    if np.any(dv <= 0):
        msg = f"linewidth must be positive, found {linewidth!r}"
        raise CatalogueError(msg)
    tau = (const.c**3 * line.a_ul * n_up * np.expm1(x) / (8 * np.pi * nu**3 * dv)
           * np.sqrt(4 * np.log(2) / np.pi)).decompose().value
    if np.any(tau > warn_above):
        warnings.warn(f"line {line.line_id}: peak optical depth {np.max(tau):.2g} exceeds "
                      f"{warn_above}; the optically thin production rate is a lower bound",
                      OpacityWarning, stacklevel=2)
    return tau
