"""How far a line's emission departs from LTE along the line of sight: the non-LTE weighting of the responses.

Under LTE the emissivity of an optically thin line at distance r from the nucleus is
n(r) x_u^LTE(T_kin) h nu A_ul / 4 pi times the background factor 1 - B_nu(T_bg) / B_nu(T_ex) at
T_ex = T_kin (:func:`pipeline.coma.excitation.flux_per_molecule`). Out of LTE the level
populations x_i(r) come from :func:`pipeline.coma.nonlte.population_profile`, and the excess
emissivity over the background is n(r) h nu A_ul / 4 pi times

    e(r) = x_u(r) (1 + n_bg) - x_l(r) (g_u / g_l) n_bg,   n_bg = 1 / (exp(h nu / k T_bg) - 1),

which is x_u (1 - B_nu(T_bg) / B_nu(T_ex)) written in the populations (so the background term is
taken at the local excitation temperature, exactly). The weight w(r) = e(r) / e^LTE(T_kin) turns
the LTE emissivity into the non-LTE one, and the column a pixel sees becomes N(rho) f(rho) with

    f(rho) = int n(r) w(r) dz / int n(r) dz,   r = sqrt(rho^2 + z^2),

the Haser density n of :mod:`pipeline.coma.haser` (parent or daughter). The responses multiply
the molecules each sub-pixel holds by f at its projected distance (:class:`ColumnWeight`), so
that the LTE flux per molecule at T_kin times this weighted count is the non-LTE line flux.

Notes
-----
The line-of-sight integral is taken with z = rho sinh u, r = rho cosh u, dz = r du, by the
trapezoidal rule on 4097 nodes in u from 0 to arccosh(1 + 60 L / rho) (L the longest scale
length), for 161 projected distances from 1e-3 km to 3 r_max of the population solution,
logarithmically spaced; f is interpolated linearly in ln rho between them and held constant
outside (inside r_min the populations are held at LTE, beyond r_max they are frozen). Both
columns share the nodes, so w = 1 gives f = 1 exactly; the unweighted column agrees with the
closed form of :func:`pipeline.coma.haser.parent_column_density` to 1e-9 (tests).

The water production rate drives the collisions (``NonLteSettings.q_h2o_per_s``: the configured value, or the
epoch's own water measurement put in by :func:`pipeline.rates.excitation_water.model_with_water`). The populations are
those of molecules that left the nucleus: a daughter (or a species from a distributed source) made
farther out is given them too, as the population model has no production term (an approximation).
The interferometric surviving fraction is not weighted (see
:func:`pipeline.coma.response.line_response_on_grid`).
"""

from __future__ import annotations

import logging

import math
from collections import OrderedDict
from dataclasses import dataclass
from functools import lru_cache

import astropy.constants as const
import astropy.units as u
import numpy as np

from typing import TYPE_CHECKING

from pipeline.catalogue.entries import Line, Species
from pipeline.coma.excitation import T_CMB
from pipeline.coma.haser import daughter_density, parent_density
from pipeline.errors import CatalogueError, ConfigError
from pipeline.quantities import checked_array

if TYPE_CHECKING:   # the population solver (scipy.integrate) loads where used: every job imports the responses
    from pipeline.coma.lamda import MolecularData
    from pipeline.coma.nonlte import ExcitationModel, PopulationProfile

__all__ = ["NonLteSettings", "ColumnWeight", "molecule_of", "line_levels", "excitation_model_of",
           "emission_departure", "weighted_column_density", "column_ratio", "line_column_weight"]

_log = logging.getLogger(__name__)
_UNPUMPED: set[str] = set()

_H_OVER_K_GHZ = (const.h * u.GHz / const.k_B).to_value(u.K)
#: Highest J of a linear rotor built from the catalogue's constants (then cut by the LTE tail).
_J_CAP = 60
#: LTE tail left out when the levels are cut (:func:`pipeline.coma.nonlte.levels_needed`).
_TAIL = 1e-4
#: Added to T_kin for the LTE tail that decides which levels are modelled.
_T_MARGIN = 30.0 * u.K
#: Relative frequency difference within which a catalogue line is a transition of the molecular data.
_FREQ_TOLERANCE = 2e-5
_N_NODES = 4097
_N_RHO = 161
_RHO_MIN_KM = 1e-3


@dataclass(frozen=True)
class NonLteSettings:
    """The campaign's non-LTE excitation settings (``excitation`` with ``model: nonlte``), plain values.

    Attributes
    ----------
    q_h2o_per_s : float
        Water production rate of the collisions [1/s].
    h2o_rate_1au_per_s : float
        Photodestruction rate of water at 1 au [1/s] (its Haser scale length).
    x_ne : float
        Scaling factor of the electron density.
    sigma_cm2 : float
        Total cross-section of collisions with water [cm^2].
    steady_state : bool
        Statistical equilibrium at each r instead of the time-dependent solution.
    molecular_data : tuple of (species, tuple of paths)
        LAMDA-format files of species (several files for symmetry species, e.g. A and E); others are linear
        rotors built from the catalogue's constants (:func:`pipeline.coma.lamda.species_rotor`).
    pump_rates_1au_per_s : tuple of (species, rate)
        Total infrared pumping rate at 1 au of a species' vibrational bands [1/s]; a species not listed is not
        pumped.
    """

    q_h2o_per_s: float
    h2o_rate_1au_per_s: float
    x_ne: float
    sigma_cm2: float
    steady_state: bool
    molecular_data: tuple[tuple[str, tuple[str, ...]], ...] = ()
    pump_rates_1au_per_s: tuple[tuple[str, float], ...] = ()

    def __post_init__(self):
        for name in ("q_h2o_per_s", "h2o_rate_1au_per_s", "sigma_cm2"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                msg = f"non-LTE excitation: {name} must be a positive number, found {value!r}"
                raise ConfigError(msg)
        if not (math.isfinite(self.x_ne) and self.x_ne >= 0):
            msg = f"non-LTE excitation: x_ne must be a number >= 0, found {self.x_ne!r}"
            raise ConfigError(msg)

    def pump_rate(self, species: str) -> float:
        """The pumping rate at 1 au [1/s] of ``species`` (0 when not listed)."""
        return dict(self.pump_rates_1au_per_s).get(species, 0.0)

    def describe(self) -> str:
        """One sentence for the tables' assumptions."""
        files = "; ".join(f"{s}: {', '.join(p)}" for s, p in self.molecular_data)
        pumped = ", ".join(f"{s} {r:.3g}/s" for s, r in self.pump_rates_1au_per_s if r > 0) or "none"
        return (f"non-LTE ({'steady state' if self.steady_state else 'time-dependent'} level populations along "
                f"the outflow), Q(H2O) = {self.q_h2o_per_s:.3g} /s, water cross-section {self.sigma_cm2:.3g} cm^2, "
                f"x_ne = {self.x_ne:g}, infrared pumping at 1 au: {pumped}; molecular data: "
                f"{files or 'linear rotors from the catalogue'}; optically thin, cosmic background 2.725 K at the "
                "local excitation temperature")


@dataclass(frozen=True)
class ColumnWeight:
    """f(rho): the non-LTE column over the LTE one of a line, tabulated in ln rho (plain values, hashable).

    ``log_rho_km`` holds ln(rho / km) ascending, ``factor`` f there; :meth:`__call__` interpolates linearly in ln rho
    and holds the end values outside.
    """

    log_rho_km: tuple[float, ...]
    factor: tuple[float, ...]

    def __call__(self, rho_km: np.ndarray) -> np.ndarray:
        """f at projected distances ``rho_km`` [km, plain numbers > 0]."""
        return np.interp(np.log(np.asarray(rho_km, dtype=float)), self.log_rho_km, self.factor)


@lru_cache(maxsize=16)
def _read(path: str) -> MolecularData:
    from pipeline.coma.lamda import read_lamda

    return read_lamda(path)


def molecule_of(species: Species, settings: NonLteSettings, t_kin: u.Quantity,
                upper_needed: float = 0.0) -> list[MolecularData]:
    """The level structures that model ``species``: its LAMDA files, or a linear rotor from the catalogue.

    Each is cut to the fewest levels that hold all but 1e-4 of the molecules in LTE at ``t_kin`` + 30 K
    (:func:`pipeline.coma.nonlte.levels_needed`; the margin keeps the levels that hot electrons and pumping
    reach above the LTE tail: for HCN, Q(H2O) = 1e25 and 1e29 /s, T_kin = 5 to 150 K, the J = 3-2 departure
    at 1e3 to 1e5 km changes by at most 2e-5 with the cut at 3 T_kin + 100 K instead, measured), and never
    below the levels up to energy ``upper_needed`` [K] plus two (the line's upper level must be modelled with
    the levels above it).
    """
    from pipeline.coma.lamda import species_rotor
    from pipeline.coma.nonlte import boltzmann_populations, levels_needed

    files = dict(settings.molecular_data).get(species.name)
    if files:
        full = [_read(p) for p in files]
    else:
        try:
            full = [species_rotor(species, _J_CAP)]
        except CatalogueError as err:
            msg = (f"non-LTE excitation of {species.name}: {err}; set excitation.molecular_data.{species.name} to "
                   "the path of a LAMDA-format file, or excitation.model: lte")
            raise CatalogueError(msg) from None
    out = []
    t_cut = u.Quantity(t_kin, u.K) + _T_MARGIN
    for mol in full:
        n = levels_needed(mol, t_cut, _TAIL) if boltzmann_populations(mol, t_cut)[-1] < _TAIL else mol.n_levels
        e = mol.energy_k.to_value(u.K)
        n = max(n, min(mol.n_levels, int(np.searchsorted(e, upper_needed + 1e-6)) + 2))
        out.append(mol.truncated(min(n, mol.n_levels)))
    return out


def line_levels(molecules: list[MolecularData], line: Line) -> tuple[int, int, int]:
    """(which molecule, upper, lower) 0-based levels of the transition of ``line``: the nearest in frequency.

    Raises CatalogueError when no transition lies within 2e-5 of the line's frequency.
    """
    nu = line.freq.to_value(u.GHz)
    best = None
    for k, mol in enumerate(molecules):
        if len(mol.freq) == 0:
            continue
        d = np.abs(mol.freq.to_value(u.GHz) - nu)
        i = int(np.argmin(d))
        if best is None or d[i] < best[0]:
            best = (float(d[i]), k, int(mol.upper[i]), int(mol.lower[i]))
    if best is None or best[0] > _FREQ_TOLERANCE * nu:
        found = "none" if best is None else f"the nearest {best[0] * 1e3:.3f} MHz away"
        sources = ", ".join(m.source for m in molecules)
        msg = (f"non-LTE excitation of line {line.line_id}: the molecular data {sources} have no transition within "
               f"{_FREQ_TOLERANCE:g} of {nu:.6f} GHz ({found}); expected the line's transition among its levels "
               f"(excitation.molecular_data.{line.species})")
        raise CatalogueError(msg)
    return best[1], best[2], best[3]


def excitation_model_of(settings: NonLteSettings, species: Species, molecule: MolecularData, t_kin: u.Quantity,
                        speed: u.Quantity, r_h: u.Quantity) -> ExcitationModel:
    """The :class:`~pipeline.coma.nonlte.ExcitationModel` of a species at one temperature and geometry.

    Infrared pumping is modelled (as Sigma-Sigma bands) only for a ladder J = 0, 1, 2, ... with a pumping rate.
    """
    from pipeline.coma.nonlte import ExcitationModel

    ladder = molecule.j is not None and np.array_equal(molecule.j, np.arange(molecule.n_levels))
    pump = settings.pump_rate(species.name) if ladder else 0.0
    if not ladder and settings.pump_rate(species.name) > 0 and species.name not in _UNPUMPED:
        _UNPUMPED.add(species.name)                     # said once per species and process
        _log.warning("%s: its levels (%s...) are not a J ladder, so its infrared pumping is left out of the non-LTE "
                     "populations", species.name, ", ".join(molecule.labels[:3]))
    return ExcitationModel(q_h2o=settings.q_h2o_per_s / u.s, t_kin=u.Quantity(t_kin, u.K),
                           speed=u.Quantity(speed, u.km / u.s), r_h=u.Quantity(r_h, u.au),
                           h2o_rate_1au=settings.h2o_rate_1au_per_s / u.s, pump_rate_1au=pump / u.s,
                           x_ne=float(settings.x_ne), sigma=settings.sigma_cm2 * u.cm**2,
                           include_pumping=pump > 0, steady_state=bool(settings.steady_state))


def emission_departure(profile: PopulationProfile, upper: int, lower: int,
                       t_bg: u.Quantity = T_CMB) -> np.ndarray:
    """w(r) on ``profile.r``: the line's excess emissivity over the background per molecule, over its LTE value.

    ``upper`` and ``lower`` are 0-based levels of ``profile.molecule``.

    Notes
    -----
    e = x_u (1 + n_bg) - x_l (g_u / g_l) n_bg with n_bg = 1 / (exp(h nu / k T_bg) - 1), the
    populations' form of x_u (1 - B_nu(T_bg) / B_nu(T_ex)) (Einstein relations; Rybicki &
    Lightman 1979, eqs. 1.72-1.73; from memory); the LTE value is the same with the Boltzmann
    fractions at T_kin(r) over the same levels.
    """
    from pipeline.coma.nonlte import boltzmann_populations

    mol = profile.molecule
    k = mol.line_index(upper, lower)
    tb = float(checked_array(t_bg, u.K, "t_bg", sign="non-negative", scalar=True, error=ConfigError))
    x_nu = _H_OVER_K_GHZ * float(mol.freq[k].to_value(u.GHz))
    n_bg = 1.0 / math.expm1(x_nu / tb) if tb > 0 else 0.0
    ratio = mol.weight[upper] / mol.weight[lower]
    x = profile.populations
    lte = boltzmann_populations(mol, u.Quantity(profile.model.temperature(profile.r.to_value(u.km)), u.K))
    e = x[:, upper] * (1.0 + n_bg) - x[:, lower] * ratio * n_bg
    e_lte = lte[:, upper] * (1.0 + n_bg) - lte[:, lower] * ratio * n_bg
    return e / e_lte


def _columns(rho_km: np.ndarray, length_km: float, daughter_km: float | None, weight) -> tuple[np.ndarray, ...]:
    """(column, weighted column) for Q = 1/s and v = 1 km/s at ``rho_km``, in cm^-2 (same nodes for both)."""
    rho = np.asarray(rho_km, dtype=float)[:, None]
    longest = length_km if daughter_km is None else max(length_km, daughter_km)
    u_max = np.arccosh(1.0 + 60.0 * longest / rho)
    s = np.linspace(0.0, 1.0, _N_NODES)[None, :]
    r = rho * np.cosh(u_max * s)
    one = 1.0 / u.s
    speed = 1.0 * u.km / u.s
    n = (parent_density(r * u.km, one, speed, length_km * u.km) if daughter_km is None
         else daughter_density(r * u.km, one, speed, length_km * u.km, daughter_km * u.km)).to_value(u.cm**-3)
    integrand = n * r * 1e5                                   # n dz = n r du, km -> cm
    h = u_max[:, 0] / (_N_NODES - 1)

    def trapezoid(values):
        return 2.0 * h * (values.sum(axis=1) - 0.5 * (values[:, 0] + values[:, -1]))   # both halves of the sight line

    plain = trapezoid(integrand)
    weighted = plain if weight is None else trapezoid(integrand * weight(r))
    return plain, weighted


def weighted_column_density(rho: u.Quantity, q: u.Quantity, speed: u.Quantity, length: u.Quantity,
                            length_daughter: u.Quantity | None = None, weight=None) -> u.Quantity:
    """Column density (cm^-2) int n(r) w(r) dz of the Haser coma at projected distances ``rho``, numerically.

    ``weight`` is a callable w(r) of distances in km (plain numbers), or None for w = 1 (then the
    result is the Haser column, :func:`pipeline.coma.haser.parent_column_density` or its daughter form).
    """
    rr = checked_array(rho, u.km, "rho", error=ConfigError)
    qq = float(checked_array(q, 1 / u.s, "q", sign="non-negative", scalar=True, error=ConfigError))
    v = float(checked_array(speed, u.km / u.s, "speed", scalar=True, error=ConfigError))
    lp = float(checked_array(length, u.km, "length", scalar=True, error=ConfigError))
    ld = None if length_daughter is None else float(checked_array(length_daughter, u.km, "length_daughter",
                                                                  scalar=True, error=ConfigError))
    shape = np.shape(rr)
    _, weighted = _columns(np.ravel(rr), lp, ld, weight)
    return u.Quantity(weighted.reshape(shape) * qq / v, u.cm**-2)


def column_ratio(rho: u.Quantity, length: u.Quantity, length_daughter: u.Quantity | None, weight) -> np.ndarray:
    """f(rho) = int n w dz / int n dz of the Haser coma (parent, or daughter with ``length_daughter``)."""
    rr = checked_array(rho, u.km, "rho", error=ConfigError)
    lp = float(checked_array(length, u.km, "length", scalar=True, error=ConfigError))
    ld = None if length_daughter is None else float(checked_array(length_daughter, u.km, "length_daughter",
                                                                  scalar=True, error=ConfigError))
    plain, weighted = _columns(np.ravel(rr), lp, ld, weight)
    with np.errstate(invalid="ignore", divide="ignore"):
        f = np.where(plain > 0, weighted / np.where(plain > 0, plain, 1.0), 1.0)
    return f.reshape(np.shape(rr))


_WEIGHTS: OrderedDict = OrderedDict()
_WEIGHTS_MAX = 512


def line_column_weight(line: Line, species: Species, t_kin: u.Quantity, r_h: u.Quantity, speed: u.Quantity,
                       length: u.Quantity, length_daughter: u.Quantity | None,
                       settings: NonLteSettings) -> ColumnWeight:
    """f(rho) of ``line`` at kinetic temperature ``t_kin`` (one value) for a Haser coma of scale length(s) given.

    Populations from :func:`pipeline.coma.nonlte.population_profile` (cached per molecule and model); the result is
    kept per (line, species, temperature, geometry, settings) in this process.
    """
    from pipeline.coma.nonlte import population_profile

    t = float(checked_array(t_kin, u.K, "t_kin", scalar=True, error=ConfigError))
    rh = float(checked_array(r_h, u.au, "r_h", scalar=True, error=ConfigError))
    v = float(checked_array(speed, u.km / u.s, "speed", scalar=True, error=ConfigError))
    lp = float(checked_array(length, u.km, "length", scalar=True, error=ConfigError))
    ld = None if length_daughter is None else float(u.Quantity(length_daughter).to_value(u.km))
    key = (line.line_id, float(line.freq.to_value(u.GHz)), float(line.e_up.to_value(u.K)), species.name,
           t, rh, v, lp, ld, settings)
    hit = _WEIGHTS.get(key)
    if hit is not None:
        _WEIGHTS.move_to_end(key)
        return hit
    molecules = molecule_of(species, settings, t * u.K, float(line.e_up.to_value(u.K)))
    k, upper, lower = line_levels(molecules, line)
    mol = molecules[k]
    profile = population_profile(mol, excitation_model_of(settings, species, mol, t * u.K, v * u.km / u.s,
                                                          rh * u.au))
    r_w = profile.r.to_value(u.km)
    w = emission_departure(profile, upper, lower)
    log_r = np.log(r_w)

    def weight(r):
        return np.interp(np.log(r), log_r, w)

    rho = np.geomspace(_RHO_MIN_KM, 3.0 * r_w[-1], _N_RHO)
    f = column_ratio(rho * u.km, lp * u.km, None if ld is None else ld * u.km, weight)
    out = ColumnWeight(log_rho_km=tuple(np.log(rho).tolist()), factor=tuple(f.tolist()))
    _WEIGHTS[key] = out
    if len(_WEIGHTS) > _WEIGHTS_MAX:
        _WEIGHTS.popitem(last=False)
    return out
