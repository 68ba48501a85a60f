"""Molecular data for level-population models: a reader of the LAMDA format and a linear-rotor builder.

:class:`MolecularData` holds what a rotational level-population calculation needs:
the levels (energy, statistical weight, quantum numbers), the radiative transitions
(upper and lower level, Einstein A, frequency) and, optionally, tables of
collisional de-excitation rate coefficients per collision partner.
:func:`read_lamda` reads it from a file in the format of the Leiden Atomic and
Molecular Database; :func:`linear_rotor` builds it for a linear molecule from its
rotational constants and dipole moment, so that a species without a data file
can still be modelled.

Level indices are 0-based here (the file's are 1-based).

References
----------
.. [1] Schöier, F. L., van der Tak, F. F. S., van Dishoeck, E. F. & Black, J. H. 2005,
   A&A 432, 369 (the LAMDA database and its file format, section 2 and appendix).
.. [2] Gordy, W. & Cook, R. L. 1984, Microwave Molecular Spectra (Wiley), chapters 2-3
   (rigid and centrifugally distorted linear rotor; the Einstein A of a rotational line;
   from memory).
"""

from __future__ import annotations

import hashlib
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import Species
from pipeline.errors import CatalogueError
from pipeline.quantities import checked_array

__all__ = [
    "CollisionTable",
    "MolecularData",
    "read_lamda",
    "linear_rotor",
    "species_rotor",
    "RotorConstants",
    "ROTOR_CONSTANTS",
    "HC_OVER_K",
]

#: Second radiation constant h c / k in K cm (CODATA via astropy): E[K] = HC_OVER_K * E[cm^-1].
HC_OVER_K = (const.h * const.c / const.k_B).to_value(u.K * u.cm)
_H_CGS = const.h.cgs.value
_C_CGS = const.c.cgs.value
_DEBYE_CGS = 1e-18  # statC cm


def _digest(*arrays) -> str:
    sha = hashlib.sha256()
    for a in arrays:
        if isinstance(a, str):
            sha.update(a.encode())
        else:
            sha.update(np.ascontiguousarray(np.asarray(a, dtype=float)).tobytes())
        sha.update(b"|")
    return sha.hexdigest()


@dataclass(frozen=True, eq=False)
class CollisionTable:
    """Collisional de-excitation rate coefficients of one collision partner.

    Attributes
    ----------
    partner_id : int
        The LAMDA partner code (1 H2, 2 para-H2, 3 ortho-H2, 4 electrons, 5 H, 6 He, 7 H+).
    label : str
        The text of the file's partner line after the code (e.g. ``'CO-pH2 from ...'``).
    temperature : Quantity [K], shape (n_temp,)
        Ascending kinetic temperatures of the table.
    upper, lower : ndarray of int, shape (n_trans,)
        0-based upper and lower level of each tabulated transition.
    rates : Quantity [cm^3 s^-1], shape (n_trans, n_temp)
        Downward rate coefficients k_ul(T).
    """

    partner_id: int
    label: str
    temperature: u.Quantity
    upper: np.ndarray
    lower: np.ndarray
    rates: u.Quantity

    def downward(self, t_kin: u.Quantity) -> u.Quantity:
        """Downward rate coefficients (cm^3 s^-1) at ``t_kin``, shape (n_trans,).

        Linear interpolation in T between tabulated temperatures; a temperature outside the
        table raises a :class:`~pipeline.errors.CatalogueError`.
        """
        t = float(checked_array(t_kin, u.K, "t_kin", scalar=True, error=CatalogueError))
        grid = self.temperature.to_value(u.K)
        if not grid[0] <= t <= grid[-1]:
            msg = (f"collision table {self.label!r} covers {grid[0]:g} to {grid[-1]:g} K, found t_kin = {t:g} K; "
                   "expected a temperature within the table (or use the cross-section rule for this partner)")
            raise CatalogueError(msg)
        k = self.rates.to_value(u.cm**3 / u.s)
        out = np.array([np.interp(t, grid, row) for row in k]) if len(grid) > 1 else k[:, 0]
        return u.Quantity(out, u.cm**3 / u.s)


@dataclass(frozen=True, eq=False)
class MolecularData:
    """Levels, radiative transitions and collision tables of one molecule.

    Attributes
    ----------
    name : str
        Molecule name (from the file, or given to :func:`linear_rotor`).
    source : str
        Where the data came from (a file path, or the builder and its arguments).
    mass : Quantity [u]
        Molecular mass.
    energy : Quantity [cm^-1], shape (n_levels,)
        Level energies above the lowest level (see :attr:`energy_k` for kelvin).
    weight : ndarray, shape (n_levels,)
        Statistical weights g (any nuclear-spin factor included).
    labels : tuple of str
        Quantum numbers of each level as written in the source.
    j : ndarray of int or None
        Rotational quantum number J of each level when every label is a plain integer, else None.
    upper, lower : ndarray of int, shape (n_lines,)
        0-based levels of each radiative transition.
    a_ul : Quantity [1/s], shape (n_lines,)
        Einstein A coefficients.
    freq : Quantity [GHz], shape (n_lines,)
        Rest frequencies.
    collisions : tuple of CollisionTable
        Collision partners' rate tables (may be empty).

    Notes
    -----
    Instances compare equal and hash alike when their numbers agree (a SHA-256 digest
    of the levels, lines and tables), so they can key caches.
    """

    name: str
    source: str
    mass: u.Quantity
    energy: u.Quantity
    weight: np.ndarray
    labels: tuple[str, ...]
    j: np.ndarray | None
    upper: np.ndarray
    lower: np.ndarray
    a_ul: u.Quantity
    freq: u.Quantity
    collisions: tuple[CollisionTable, ...] = ()
    digest: str = field(default="", compare=False)

    def __post_init__(self):
        parts = [self.name, self.mass.to_value(u.u), self.energy.to_value(u.cm**-1), self.weight,
                 self.upper, self.lower, self.a_ul.to_value(1 / u.s), self.freq.to_value(u.GHz)]
        for table in self.collisions:
            parts += [str(table.partner_id), table.temperature.to_value(u.K), table.upper, table.lower,
                      table.rates.to_value(u.cm**3 / u.s)]
        object.__setattr__(self, "digest", _digest(*parts))

    def __hash__(self) -> int:
        return hash(self.digest)

    def __eq__(self, other) -> bool:
        return isinstance(other, MolecularData) and other.digest == self.digest

    @property
    def n_levels(self) -> int:
        """Number of levels."""
        return len(self.weight)

    @property
    def energy_k(self) -> u.Quantity:
        """Level energies in kelvin, E / k."""
        return u.Quantity(self.energy.to_value(u.cm**-1) * HC_OVER_K, u.K)

    def level_of(self, j: int) -> int:
        """The 0-based index of the level with rotational quantum number ``j``."""
        if self.j is None:
            msg = (f"molecular data {self.source!r}: levels are labelled {self.labels[:3]}..., not by a single "
                   "integer J; expected plain J labels to look a level up by J")
            raise CatalogueError(msg)
        hits = np.flatnonzero(self.j == int(j))
        if len(hits) != 1:
            msg = (f"molecular data {self.source!r}: found {len(hits)} levels with J = {j}; expected exactly one "
                   f"(J from {int(self.j.min())} to {int(self.j.max())})")
            raise CatalogueError(msg)
        return int(hits[0])

    def line_index(self, upper: int, lower: int) -> int:
        """Index of the radiative transition between 0-based levels ``upper`` and ``lower``."""
        hits = np.flatnonzero((self.upper == upper) & (self.lower == lower))
        if len(hits) != 1:
            msg = (f"molecular data {self.source!r} has no radiative transition from level {upper} "
                   f"({self.labels[upper] if 0 <= upper < self.n_levels else '?'}) to level {lower}; "
                   "expected a listed transition")
            raise CatalogueError(msg)
        return int(hits[0])

    def collision_table(self, partner: int | str) -> CollisionTable:
        """The collision table of ``partner``: a LAMDA partner code or a text its label starts with."""
        for table in self.collisions:
            if (isinstance(partner, int) and table.partner_id == partner) or \
                    (isinstance(partner, str) and table.label.lower().startswith(partner.lower())):
                return table
        found = ", ".join(f"{t.partner_id} {t.label!r}" for t in self.collisions) or "none"
        msg = (f"molecular data {self.source!r} has no collision table for partner {partner!r}; found: {found}")
        raise CatalogueError(msg)

    def truncated(self, n_levels: int) -> MolecularData:
        """The lowest ``n_levels`` levels, with the transitions and table rows among them."""
        n = int(n_levels)
        if not 2 <= n <= self.n_levels:
            msg = (f"molecular data {self.source!r} has {self.n_levels} levels, asked for {n}; "
                   f"expected 2 to {self.n_levels} levels")
            raise CatalogueError(msg)
        order = np.argsort(self.energy.to_value(u.cm**-1), kind="stable")
        if not np.array_equal(order, np.arange(self.n_levels)):
            msg = f"molecular data {self.source!r}: levels are not in order of energy; expected ascending energies"
            raise CatalogueError(msg)
        if n == self.n_levels:
            return self
        keep = (self.upper < n) & (self.lower < n)
        tables = []
        for t in self.collisions:
            k = (t.upper < n) & (t.lower < n)
            tables.append(CollisionTable(t.partner_id, t.label, t.temperature, t.upper[k], t.lower[k], t.rates[k]))
        return MolecularData(name=self.name, source=f"{self.source} (lowest {n} levels)", mass=self.mass,
                             energy=self.energy[:n], weight=self.weight[:n], labels=self.labels[:n],
                             j=None if self.j is None else self.j[:n], upper=self.upper[keep],
                             lower=self.lower[keep], a_ul=self.a_ul[keep], freq=self.freq[keep],
                             collisions=tuple(tables))


# ----------------------------------------------------------------------------- LAMDA reader
class _Records:
    """The non-comment lines of a LAMDA file with their 1-based line numbers."""

    def __init__(self, path: Path):
        self.path = path
        try:
            text = path.read_text(encoding="utf-8", errors="replace")
        except FileNotFoundError:
            msg = f"molecular data file {str(path)!r} does not exist"
            raise CatalogueError(msg) from None
        self.items = [(k + 1, line.strip()) for k, line in enumerate(text.splitlines())
                      if line.strip() and not line.lstrip().startswith("!")]
        self.pos = 0

    def at_end(self) -> bool:
        return self.pos >= len(self.items)

    def next(self, what: str) -> tuple[int, str]:
        if self.at_end():
            last = self.items[-1][0] if self.items else 0
            msg = (f"molecular data file {str(self.path)!r} ends after line {last}; expected {what}")
            raise CatalogueError(msg)
        item = self.items[self.pos]
        self.pos += 1
        return item

    def fail(self, number: int, found: str, what: str):
        found = " ".join(found.split())
        msg = f"molecular data file {str(self.path)!r}, line {number}: found {found!r}, expected {what}"
        raise CatalogueError(msg)

    def count(self, what: str) -> int:
        number, text = self.next(what)
        token = text.split()[0]
        try:
            value = int(token)
        except ValueError:
            self.fail(number, text, what)
        if value < 0:
            self.fail(number, text, what)
        return value

    def numbers(self, what: str, n_min: int, types: tuple = ()) -> tuple[int, list[str]]:
        number, text = self.next(what)
        tokens = text.split()
        if len(tokens) < n_min:
            self.fail(number, text, what)
        try:
            for tok, kind in zip(tokens, types):
                kind(tok)
        except ValueError:
            self.fail(number, text, what)
        return number, tokens


def read_lamda(path: str | Path) -> MolecularData:
    """Read a molecular data file in the LAMDA format.

    Parameters
    ----------
    path : str or Path
        The file (a text file; lines starting with ``!`` are comments and headers).

    Returns
    -------
    MolecularData

    Raises
    ------
    CatalogueError
        A missing file, or a malformed one: the message names the file, the line number,
        what was found and what was expected.

    Notes
    -----
    The layout, in order: molecule name; molecular weight; number of levels, then one line
    per level (index, energy in cm^-1, statistical weight, quantum numbers); number of
    radiative transitions, then one line each (index, upper level, lower level, A in s^-1,
    frequency in GHz, upper-level energy in K); optionally the number of collision partners
    and, per partner, a line with the partner code and a description, the number of
    collisional transitions, the number of temperatures, the temperatures, then one line per
    transition (index, upper, lower, downward rate coefficients in cm^3 s^-1 at each
    temperature) (Schöier et al. 2005, A&A 432, 369, appendix B).
    """
    path = Path(path)
    rec = _Records(path)
    _, name = rec.next("the molecule's name")
    number, text = rec.next("the molecular weight (a number)")
    try:
        mass = float(text.split()[0])
    except ValueError:
        rec.fail(number, text, "the molecular weight (a number)")
    n_lev = rec.count("the number of energy levels (an integer)")
    energy, weight, labels = np.empty(n_lev), np.empty(n_lev), []
    for k in range(n_lev):
        what = f"level {k + 1}: index, energy (cm^-1), statistical weight, quantum numbers"
        number, tok = rec.numbers(what, 3, (int, float, float))
        if int(tok[0]) != k + 1:
            rec.fail(number, " ".join(tok), f"level index {k + 1} ({what})")
        energy[k], weight[k] = float(tok[1]), float(tok[2])
        if not (np.isfinite(energy[k]) and weight[k] > 0):
            rec.fail(number, " ".join(tok), "a finite energy and a positive statistical weight")
        labels.append(" ".join(tok[3:]))
    n_rad = rec.count("the number of radiative transitions (an integer)")
    upper, lower = np.empty(n_rad, dtype=int), np.empty(n_rad, dtype=int)
    a_ul, freq = np.empty(n_rad), np.empty(n_rad)
    for k in range(n_rad):
        what = f"transition {k + 1}: index, upper level, lower level, A (s^-1), frequency (GHz)"
        number, tok = rec.numbers(what, 5, (int, int, int, float, float))
        up, lo = int(tok[1]), int(tok[2])
        if not (1 <= up <= n_lev and 1 <= lo <= n_lev and energy[up - 1] > energy[lo - 1]):
            rec.fail(number, " ".join(tok), f"upper and lower levels between 1 and {n_lev}, the upper one higher")
        upper[k], lower[k], a_ul[k], freq[k] = up - 1, lo - 1, float(tok[3]), float(tok[4])
        if not (a_ul[k] > 0 and freq[k] > 0):
            rec.fail(number, " ".join(tok), "a positive Einstein A and frequency")
    tables = []
    n_part = 0 if rec.at_end() else rec.count("the number of collision partners (an integer)")
    for _ in range(n_part):
        number, text = rec.next("a collision partner: its code (1-7) and a description")
        head = text.split(None, 1)
        try:
            partner = int(head[0])
        except ValueError:
            rec.fail(number, text, "a collision partner: its code (1-7) and a description")
        label = head[1].strip() if len(head) > 1 else ""
        n_trans = rec.count("the number of collisional transitions (an integer)")
        n_temp = rec.count("the number of collision temperatures (an integer)")
        number, tok = rec.numbers(f"{n_temp} collision temperatures (K)", n_temp, (float,) * n_temp)
        temps = np.array([float(t) for t in tok[:n_temp]])
        if len(tok) != n_temp or np.any(temps <= 0) or np.any(np.diff(temps) <= 0):
            rec.fail(number, " ".join(tok), f"{n_temp} positive ascending temperatures (K)")
        cu, cl = np.empty(n_trans, dtype=int), np.empty(n_trans, dtype=int)
        rates = np.empty((n_trans, n_temp))
        for k in range(n_trans):
            what = f"collisional transition {k + 1}: index, upper, lower and {n_temp} rate coefficients"
            number, tok = rec.numbers(what, 3 + n_temp, (int, int, int) + (float,) * n_temp)
            up, lo = int(tok[1]), int(tok[2])
            if len(tok) != 3 + n_temp or not (1 <= up <= n_lev and 1 <= lo <= n_lev and up != lo):
                rec.fail(number, " ".join(tok), f"{what}, levels between 1 and {n_lev}")
            cu[k], cl[k] = up - 1, lo - 1
            rates[k] = [float(x) for x in tok[3:]]
            if np.any(rates[k] < 0) or not np.all(np.isfinite(rates[k])):
                rec.fail(number, " ".join(tok), "non-negative finite rate coefficients")
        tables.append(CollisionTable(partner_id=partner, label=label, temperature=u.Quantity(temps, u.K),
                                     upper=cu, lower=cl, rates=u.Quantity(rates, u.cm**3 / u.s)))
    return MolecularData(name=name.split()[0] if name.split() else name, source=str(path),
                         mass=u.Quantity(mass, u.u), energy=u.Quantity(energy, u.cm**-1), weight=weight,
                         labels=tuple(labels), j=_integer_labels(labels), upper=upper, lower=lower,
                         a_ul=u.Quantity(a_ul, 1 / u.s), freq=u.Quantity(freq, u.GHz), collisions=tuple(tables))


def _integer_labels(labels) -> np.ndarray | None:
    """The levels' J when every label is a plain integer, else None: the file's levels are then not a J ladder
    (e.g. J_Ka_Kc); :meth:`MolecularData.level_of` refuses a lookup by J and the pumping scheme, which needs a
    ladder, refuses (nonlte.pumping_rates) or leaves the molecule unpumped with a logged warning (departure)."""
    text = [str(s).strip() for s in labels]
    if not all(re.fullmatch(r"[+-]?[0-9]+", s) for s in text):
        return None                              # a label like 1_0_1: not a J ladder (a signal, not an error)
    return np.array([int(s) for s in text], dtype=int)


# ----------------------------------------------------------------------------- linear rotor
@dataclass(frozen=True)
class RotorConstants:
    """Centrifugal distortion constant D and permanent dipole moment of a linear rotor."""

    d: u.Quantity
    dipole: u.Quantity
    source: str


#: Distortion constants and dipole moments of the catalogue's linear rotors (B comes from species.ecsv).
ROTOR_CONSTANTS = {
    "CO": RotorConstants(d=0.18350 * u.MHz, dipole=0.11011 * u.D,
                         source="D: CDMS entry 028503; dipole: Goorvitch 1994, ApJS 95, 535 (both from memory)"),
    "HCN": RotorConstants(d=87.24 * u.kHz, dipole=2.9852 * u.D,
                          source="D: CDMS entry 027501; dipole: Ebenstein & Muenter 1984, J. Chem. Phys. 80, "
                                 "3989 (both from memory)"),
    "CS": RotorConstants(d=40.25 * u.kHz, dipole=1.958 * u.D,
                         source="D: CDMS entry 044501; dipole: Winnewisser & Cook 1968, J. Mol. Spectrosc. 28, 266 "
                                "(both from memory)"),
    "HNC": RotorConstants(d=100.7 * u.kHz, dipole=3.05 * u.D,
                          source="D: CDMS entry 027502; dipole: Blackman et al. 1976, Nature 261, 395 "
                                 "(both from memory)"),
}


def linear_rotor(name: str, b: u.Quantity, dipole: u.Quantity, j_max: int, *, d: u.Quantity = 0 * u.MHz,
                 mass: u.Quantity = 0 * u.u, spin_weight: float = 1.0) -> MolecularData:
    """Levels J = 0..j_max and lines J -> J-1 of a linear rotor in its ground vibrational state.

    Parameters
    ----------
    name : str
        Molecule name.
    b, d : Quantity [frequency]
        Rotational constant B and centrifugal distortion constant D (default 0).
    dipole : Quantity [D]
        Permanent electric dipole moment.
    j_max : int
        Highest rotational level (>= 1).
    mass : Quantity [u]
        Molecular mass (stored only).
    spin_weight : float
        Nuclear-spin factor common to every level (e.g. 3 for the 14N of HCN when the
        degeneracies follow a catalogue that includes it).

    Notes
    -----
    E_J / h = B J(J+1) - D J^2 (J+1)^2, g_J = spin_weight (2J+1), and the line J -> J-1 at
    nu = (E_J - E_{J-1}) / h has, in cgs units,

    A_{J,J-1} = 64 pi^4 nu^3 mu^2 J / (3 h c^3 (2J+1))

    (Gordy & Cook 1984, Microwave Molecular Spectra, eq. for the spontaneous emission rate
    of a linear molecule with the line strength J/(2J+1); from memory). A common spin factor
    changes g_J but not A.
    """
    b_hz = float(checked_array(b, u.Hz, "b", scalar=True, error=CatalogueError))
    d_hz = float(checked_array(d, u.Hz, "d", sign="non-negative", scalar=True, error=CatalogueError))
    mu = float(checked_array(dipole, u.D, "dipole", scalar=True, error=CatalogueError)) * _DEBYE_CGS
    m = float(checked_array(mass, u.u, "mass", sign="non-negative", scalar=True, error=CatalogueError))
    if int(j_max) != j_max or j_max < 1:
        msg = f"linear_rotor {name!r}: j_max must be an integer >= 1, found {j_max!r}"
        raise CatalogueError(msg)
    if not spin_weight > 0:
        msg = f"linear_rotor {name!r}: spin_weight must be positive, found {spin_weight!r}"
        raise CatalogueError(msg)
    j = np.arange(int(j_max) + 1)
    e_hz = b_hz * j * (j + 1) - d_hz * (j * (j + 1)) ** 2
    if np.any(np.diff(e_hz) <= 0):
        msg = (f"linear_rotor {name!r}: with B = {b_hz:g} Hz and D = {d_hz:g} Hz the levels stop rising "
               f"before J = {j_max}; expected D << B or a smaller j_max")
        raise CatalogueError(msg)
    ju = j[1:]
    nu = e_hz[1:] - e_hz[:-1]
    a = 64.0 * math.pi**4 * nu**3 * mu**2 * ju / (3.0 * _H_CGS * _C_CGS**3 * (2 * ju + 1))
    source = (f"linear_rotor({name}, B={b_hz / 1e6:.6f} MHz, D={d_hz / 1e3:.4f} kHz, mu={mu / _DEBYE_CGS:g} D, "
              f"j_max={int(j_max)}, spin_weight={spin_weight:g})")
    return MolecularData(name=name, source=source, mass=u.Quantity(m, u.u),
                         energy=u.Quantity(e_hz / _C_CGS, u.cm**-1), weight=spin_weight * (2.0 * j + 1.0),
                         labels=tuple(str(x) for x in j), j=j.copy(), upper=ju.copy(), lower=ju - 1,
                         a_ul=u.Quantity(a, 1 / u.s), freq=u.Quantity(nu / 1e9, u.GHz))


def species_rotor(species: Species, j_max: int, constants: RotorConstants | None = None) -> MolecularData:
    """:func:`linear_rotor` for a catalogue species: its B, mass and spin factor, D and dipole from ``constants``.

    Parameters
    ----------
    species : Species
        A linear molecule of the catalogue (rot_a = rot_c = 0, rot_b > 0).
    j_max : int
        Highest rotational level.
    constants : RotorConstants or None
        D and the dipole moment; None takes :data:`ROTOR_CONSTANTS` [species.name].

    Notes
    -----
    The levels' statistical weights carry the species' ``multiplicity`` when its partition
    function is the linear closed form (the catalogue's nuclear-spin factor common to every
    level, e.g. 3 for HCN), so that g_J matches the catalogue's g_up.
    """
    b = species.rot_b.to_value(u.GHz)
    if not (b > 0 and species.rot_a.to_value(u.GHz) == 0 and species.rot_c.to_value(u.GHz) == 0):
        msg = (f"species {species.name!r} has rot_a, rot_b, rot_c = {species.rot_a}, {species.rot_b}, "
               f"{species.rot_c}; expected a linear rotor (rot_a = rot_c = 0, rot_b > 0) or a LAMDA file")
        raise CatalogueError(msg)
    if constants is None:
        if species.name not in ROTOR_CONSTANTS:
            msg = (f"species {species.name!r} has no entry in ROTOR_CONSTANTS (known: {', '.join(ROTOR_CONSTANTS)}); "
                   "expected its dipole moment and distortion constant as RotorConstants, or a LAMDA file")
            raise CatalogueError(msg)
        constants = ROTOR_CONSTANTS[species.name]
    spin = species.multiplicity if species.partition == "linear" else 1.0
    return linear_rotor(species.name, species.rot_b, constants.dipole, j_max, d=constants.d, mass=species.mass,
                        spin_weight=spin)
