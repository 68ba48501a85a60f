"""Tests of pipeline.catalogue: the built-in molecular catalogue and its reader.

Physics checks compare the catalogue with things outside it: the dipole formula
for the Einstein A of a linear rotor with published dipole moments, the rigid-rotor
level energies, the partition function summed level by level with numpy, a widely
quoted approximation for methanol, and the IUPAC standard atomic weights.
"""

import re

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, vstack
from numpy.testing import assert_allclose

from pipeline.catalogue import (DEFAULT_LINES_FILE, DEFAULT_SPECIES_FILE, Catalogue, Line,
                                Species, load_catalogue)
from pipeline.errors import CatalogueError


@pytest.fixture(scope="module")
def cat() -> Catalogue:
    return load_catalogue()


# ----------------------------------------------------------------------------- independent references
def einstein_a_linear(freq_ghz: float, dipole_debye: float, j_up: int) -> float:
    """A(J -> J-1) = 64 pi^4 nu^3 mu^2 / (3 h c^3) * J / (2J + 1), cgs.

    Gordy & Cook, Microwave Molecular Spectra (1984): the line strength of a linear
    rotor, S = J, and g_u = 2J + 1.  1 debye = 1e-18 esu cm.
    """
    nu = freq_ghz * 1e9
    mu = dipole_debye * 1e-18
    h = const.h.cgs.value
    c = const.c.cgs.value
    return 64 * np.pi**4 * nu**3 * mu**2 / (3 * h * c**3) * j_up / (2 * j_up + 1)


def linear_partition_sum(b_ghz: float, t_k: float, j_step: int = 1) -> float:
    """Q(T) = sum over J of (2J + 1) exp(-h B J(J+1) / kT), summed directly (J to 3000)."""
    x = (const.h * b_ghz * u.GHz / (const.k_B * t_k * u.K)).decompose().value
    j = np.arange(0, 3000, j_step, dtype=float)
    return float(np.sum((2 * j + 1) * np.exp(-x * j * (j + 1))))


# IUPAC standard atomic weights (conventional values, from memory)
ATOMIC_WEIGHT = {"H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999}


def formula_mass(formula: str) -> float:
    """Sum of the IUPAC atomic weights over a formula such as 'CH3OH'."""
    total = 0.0
    for element, count in re.findall(r"([A-Z][a-z]?)(\d*)", formula):
        total += ATOMIC_WEIGHT[element] * (int(count) if count else 1)
    return total


# ----------------------------------------------------------------------------- the built-in tables
def test_builtin_catalogue_loads(cat):
    assert set(cat.species) >= {"CO", "HCN", "CH3OH", "H2O", "CO2"}
    assert len(cat.lines) >= 7
    assert cat.source == (str(DEFAULT_SPECIES_FILE), str(DEFAULT_LINES_FILE))
    assert all(isinstance(sp, Species) for sp in cat.species.values())
    assert all(isinstance(ln, Line) for ln in cat.lines)


def test_every_line_has_its_species(cat):
    for ln in cat.lines:
        assert cat.get_species(ln.species).name == ln.species
        assert ln in cat.lines_of(ln.species)


def test_lines_of_sorted_by_frequency(cat):
    freqs = [ln.freq.to_value(u.GHz) for ln in cat.lines_of("CH3OH")]
    assert len(freqs) == 5
    assert freqs == sorted(freqs)


@pytest.mark.parametrize("line_id, dipole_debye, j_up", [
    ("CO_230538", 0.11011, 2),   # CO dipole moment 0.11011 D (from memory)
    ("HCN_265886", 2.985, 3),    # HCN dipole moment 2.985 D (from memory)
])
def test_einstein_a_against_dipole_formula(cat, line_id, dipole_debye, j_up):
    # Gordy & Cook (1984) dipole formula for a linear rotor, ~2 %
    ln = cat.get_line(line_id)
    expected = einstein_a_linear(ln.freq.to_value(u.GHz), dipole_debye, j_up)
    assert_allclose(ln.a_ul.to_value(1 / u.s), expected, rtol=0.02)
    # degeneracy 2J + 1 (no nuclear spin), the catalogue's stated convention
    assert ln.g_up == 2 * j_up + 1


@pytest.mark.parametrize("line_id, j_up", [("CO_230538", 2), ("HCN_265886", 3)])
def test_upper_energy_rigid_rotor(cat, line_id, j_up):
    # rigid rotor: E_J = h B J(J+1); E/k from astropy constants, 0.5 %
    ln = cat.get_line(line_id)
    b = cat.get_species(ln.species).rot_b
    e_up = (const.h * b * j_up * (j_up + 1) / const.k_B).to(u.K)
    assert_allclose(ln.e_up.to_value(u.K), e_up.value, rtol=5e-3)
    # and the line frequency nu = 2 B J (rigid rotor; centrifugal distortion < 1e-4 here)
    assert_allclose(ln.freq.to_value(u.GHz), (2 * b * j_up).to_value(u.GHz), rtol=1e-4)


@pytest.mark.parametrize("name", ["CO", "HCN"])
@pytest.mark.parametrize("t_k", [10.0, 20.0, 40.0, 80.0])
def test_linear_partition_against_direct_sum(cat, name, t_k):
    # direct sum over levels with numpy; the high-T expansion is good to 0.5 % from 10 K
    sp = cat.get_species(name)
    expected = linear_partition_sum(sp.rot_b.to_value(u.GHz), t_k)
    assert_allclose(sp.partition_function(t_k * u.K), expected, rtol=5e-3)


@pytest.mark.parametrize("t_k", [10.0, 40.0])
def test_symmetric_linear_rotor_counts_even_levels(cat, t_k):
    # O=C=O (spinless 16O nuclei): only even J exist, so Q is the direct sum over even J
    # (Gordy & Cook 1984, symmetry number 2); the catalogue encodes it as multiplicity 0.5
    sp = cat.get_species("CO2")
    expected = linear_partition_sum(sp.rot_b.to_value(u.GHz), t_k, j_step=2)
    assert_allclose(sp.partition_function(t_k * u.K), expected, rtol=2e-3)


def test_partition_function_vectorised(cat):
    sp = cat.get_species("HCN")
    temps = np.array([10.0, 20.0, 40.0, 80.0])
    expected = [linear_partition_sum(sp.rot_b.to_value(u.GHz), t) for t in temps]
    got = sp.partition_function(temps * u.K)
    assert got.shape == (4,)
    assert_allclose(got, expected, rtol=5e-3)


@pytest.mark.parametrize("t_k", [10.0, 50.0, 150.0])
def test_methanol_partition_function(cat, t_k):
    # Q(CH3OH) = 1.2327 T^1.5, a widely quoted cometary approximation (from memory)
    sp = cat.get_species("CH3OH")
    assert_allclose(sp.partition_function(t_k * u.K), 1.2327 * t_k**1.5, rtol=1e-3)


def test_partition_function_rejects_bad_temperature(cat):
    sp = cat.get_species("CO")
    for bad in (0.0, -5.0, np.nan, np.inf):
        with pytest.raises(CatalogueError, match="t_kin must be positive"):
            sp.partition_function(bad * u.K)


@pytest.mark.parametrize("name", ["CO", "HCN", "CH3OH", "H2O", "CO2"])
def test_masses_from_atomic_weights(cat, name):
    # IUPAC standard atomic weights: H 1.008, C 12.011, N 14.007, O 15.999 (from memory)
    assert_allclose(cat.get_species(name).mass.to_value(u.u), formula_mass(name), atol=1e-9)


def test_photo_rate(cat):
    sp = cat.get_species("CO")
    assert sp.photo_rate("quiet") == sp.photo_quiet
    assert sp.photo_rate("active") == sp.photo_active
    assert sp.photo_active > sp.photo_quiet  # a more active Sun destroys faster
    with pytest.raises(CatalogueError, match="solar_activity must be 'quiet' or 'active'"):
        sp.photo_rate("medium")


def test_parents(cat):
    assert all(sp.parent is None for sp in cat.species.values())


# ----------------------------------------------------------------------------- errors
def test_unknown_species(cat):
    with pytest.raises(CatalogueError, match=r"species 'NH3' is not in the catalogue .*species\.ecsv"):
        cat.get_species("NH3")
    with pytest.raises(CatalogueError, match="'NH3' is not in the catalogue"):
        cat.lines_of("NH3")


def test_unknown_line(cat):
    with pytest.raises(CatalogueError, match=r"line 'CO_000000' is not in the catalogue .*lines\.ecsv"):
        cat.get_line("CO_000000")


def test_missing_file(tmp_path):
    missing = tmp_path / "nothing.ecsv"
    with pytest.raises(CatalogueError, match="nothing.ecsv' does not exist"):
        load_catalogue(species_file=missing)


def test_unreadable_file(tmp_path):
    bad = tmp_path / "garbage.ecsv"
    bad.write_text("# %ECSV 1.0\n# ---\n# datatype: [this is not\n")
    with pytest.raises(CatalogueError, match="garbage.ecsv' is not a readable ECSV table"):
        load_catalogue(species_file=bad)


def test_species_file_missing_a_column(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    table.remove_column("photo_active")
    path = tmp_path / "no_photo.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"no_photo\.ecsv' has no column 'photo_active'"):
        load_catalogue(species_file=path)


def test_species_column_with_wrong_unit(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    table["rot_b"] = table["rot_b"].value * u.km
    path = tmp_path / "bad_unit.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"bad_unit\.ecsv': column 'rot_b' has unit km"):
        load_catalogue(species_file=path)


def test_duplicated_line_id(tmp_path):
    table = QTable.read(DEFAULT_LINES_FILE, format="ascii.ecsv")
    path = tmp_path / "dup_lines.ecsv"
    vstack([table, table[:1]]).write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"dup_lines\.ecsv': line_id 'CO_230538' is duplicated"):
        load_catalogue(lines_file=path)


def test_duplicated_species(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    path = tmp_path / "dup_species.ecsv"
    vstack([table, table[1:2]]).write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"dup_species\.ecsv' lists 'HCN' twice"):
        load_catalogue(species_file=path)


def test_line_of_undefined_species(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    table.remove_row(1)  # HCN
    path = tmp_path / "no_hcn.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"line 'HCN_265886' belongs to species 'HCN', "
                                             r"which .*no_hcn\.ecsv' does not define"):
        load_catalogue(species_file=path)


def test_unknown_partition_kind(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    table["partition"][0] = "symtop"
    path = tmp_path / "symtop.ecsv"
    table.write(path, format="ascii.ecsv")
    sp = load_catalogue(species_file=path).get_species("CO")
    with pytest.raises(CatalogueError, match="column 'partition' must be 'linear' or 'asymmetric', "
                                             "found 'symtop'"):
        sp.partition_function(20 * u.K)
