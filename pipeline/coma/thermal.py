"""Thermal speeds of molecules in a Maxwell-Boltzmann gas.

The one home of the two kinetic-theory speeds the pipeline uses; they are
different quantities:

- :func:`thermal_dispersion`, the one-dimensional velocity dispersion
  :math:`\\sigma = \\sqrt{kT/m}`: the Gaussian thermal broadening of a line
  (:mod:`pipeline.coma.line_profile`, :func:`pipeline.coma.response.window_capture`);
- :func:`mean_thermal_speed`, the mean of the Maxwell speed distribution
  :math:`\\bar v = \\sqrt{8kT/(\\pi m)} = \\sqrt{8/\\pi}\\,\\sigma`: a speed of the gas itself,
  e.g. the ejection speed of the momentum budget
  (:func:`pipeline.budget.momentum.thermal_ejection_speed`,
  :func:`pipeline.coma.haser.thermal_speed`).

References
----------
.. [1] Reif, F. 1965, Fundamentals of Statistical and Thermal Physics (McGraw-Hill),
   sections 7.9-7.10 (the Maxwell velocity and speed distributions; from memory).
"""

from __future__ import annotations

import math

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.errors import ConfigError, GasledgerError
from pipeline.quantities import checked_array

__all__ = ["thermal_dispersion", "mean_thermal_speed"]


def thermal_dispersion(t_kin: u.Quantity, mass: u.Quantity) -> u.Quantity:
    """One-dimensional thermal velocity dispersion sqrt(kT/m)."""
    return np.sqrt(const.k_B * u.Quantity(t_kin, u.K) / u.Quantity(mass)).to(u.km / u.s)


def mean_thermal_speed(temperature: u.Quantity, molecular_mass: u.Quantity, *,
                       error: type[GasledgerError] = ConfigError) -> u.Quantity:
    """Mean speed of a Maxwell-Boltzmann gas, in km/s.

    Parameters
    ----------
    temperature : `~astropy.units.Quantity` [temperature]
        Kinetic temperature, > 0 K (convertible to K without equivalencies).
    molecular_mass : `~astropy.units.Quantity` [mass]
        Mass of one molecule (e.g. in ``u.u``), > 0.
    error : subclass of `~pipeline.errors.GasledgerError`
        The class raised for a bad value (a non-Quantity raises
        `~pipeline.errors.GasledgerTypeError`).

    Notes
    -----
    :math:`\\bar v = \\sqrt{8 k T / (\\pi m)}`.
    """
    t = checked_array(temperature, u.K, "temperature", error=error)
    m = checked_array(molecular_mass, u.kg, "molecular_mass", error=error)
    k_b = const.k_B.to_value(u.J / u.K)
    return (np.sqrt(8.0 * k_b * t / (math.pi * m)) * (u.m / u.s)).to(u.km / u.s)
