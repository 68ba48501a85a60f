"""Tests of pipeline.catalogue.entries: the built-in molecular catalogue and its reader.

Physics checks compare the catalogue with things outside it: the dipole formula
for the Einstein A of linear rotors, symmetric tops and (through line strengths
from a rigid-rotor diagonalisation written here) asymmetric tops, with published
dipole moments; the rigid-rotor and centrifugally distorted level energies; a
Hund's case (a) fine-structure Hamiltonian of a 3Sigma molecule diagonalised here;
partition functions summed level by level with numpy, with the nuclear-spin
weights of the catalogue entries, against the CDMS and JPL partition-function
tables that astroquery ships (reference_files.py); infrared band origins; the
fluorescence rate of a diluted blackbody Sun; and the IUPAC standard atomic
weights. test_reference_catalogues.py compares the catalogue with those files
directly.
"""

import math
import re

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, vstack
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from reference_files import cdms_log_q, jpl_log_q

from pipeline.catalogue.entries import (DEFAULT_BANDS_FILE, DEFAULT_LINES_FILE, DEFAULT_PARTITION_FILE,
                                        DEFAULT_SPECIES_FILE, EXTRAPOLATION_FACTOR, Band, Catalogue, Line,
                                        PartitionTable, Species, load_catalogue)
from pipeline.errors import CatalogueError

H_K = (const.h * u.GHz / const.k_B).to_value(u.K)  # h * 1 GHz / k in kelvin
LINEAR_ROTORS = ("CO", "HCN", "HNC", "CS")
# nuclear-spin factor common to every level of a linear rotor in its CDMS entry: 3 for the 14N of HCN
# (CDMS 027501 lists hyperfine components with g = 2F+1, summing to 3(2J+1)); none for HNC (027502)
LINEAR_SPIN = {"CO": 1, "HCN": 3, "HNC": 1, "CS": 1}
# permanent dipole moments in debye (from memory; CDMS / JPL documentation values; CH3OH mu_a from the CDMS
# 032504 documentation)
DIPOLE = {"CO": 0.11011, "HCN": 2.985, "HNC": 3.05, "CS": 1.958, "CH3CN": 3.92197, "SO": 1.535,
          "H2CO": 2.3317, "H2S": 0.978, "CH3OH": 0.899}
# centrifugal distortion constants D in GHz (from memory; CDMS fits)
DISTORTION = {"CO": 183.5e-6, "HCN": 87.2e-6, "HNC": 100.0e-6, "CS": 40.0e-6}


@pytest.fixture(scope="module")
def cat() -> Catalogue:
    return load_catalogue()


# ----------------------------------------------------------------------------- independent references
def einstein_a(freq_ghz: float, dipole_debye: float, strength: float, g_up: float) -> float:
    """A = 64 pi^4 nu^3 mu^2 S / (3 h c^3 g_u), cgs (Gordy & Cook, Microwave Molecular Spectra, 1984).

    S is the dimensionless line strength (J for a linear rotor, g_u = 2J + 1);
    1 debye = 1e-18 esu cm.
    """
    nu = freq_ghz * 1e9
    mu = dipole_debye * 1e-18
    return 64 * np.pi**4 * nu**3 * mu**2 * strength / (3 * const.h.cgs.value * const.c.cgs.value**3 * g_up)


def einstein_a_linear(freq_ghz: float, dipole_debye: float, j_up: int) -> float:
    """Linear rotor: S = J, g_u = 2J + 1 (Gordy & Cook 1984)."""
    return einstein_a(freq_ghz, dipole_debye, j_up, 2 * j_up + 1)


def linear_partition_sum(b_ghz: float, t_k: float, j_step: int = 1) -> float:
    """Q(T) = sum over J of (2J + 1) exp(-h B J(J+1) / kT), summed directly (J to 3000)."""
    x = (const.h * b_ghz * u.GHz / (const.k_B * t_k * u.K)).decompose().value
    j = np.arange(0, 3000, j_step, dtype=float)
    return float(np.sum((2 * j + 1) * np.exp(-x * j * (j + 1))))


def symmetric_top_partition_sum(a_ghz: float, b_ghz: float, t_k: float, j_max: int = 250) -> float:
    """Q = sum over J and K = -J..J of (2J+1) exp(-E/kT), E = hBJ(J+1) + h(A-B)K^2.

    Prolate rigid symmetric top (Gordy & Cook 1984): +-K counted separately (g_K = 2
    for K > 0), no nuclear-spin weights and hence no symmetry number.
    """
    j = np.arange(j_max + 1.0)[:, None]
    k = np.arange(-j_max, j_max + 1.0)[None, :]
    e_k = (b_ghz * j * (j + 1) + (a_ghz - b_ghz) * k**2) * H_K
    return float(np.sum(np.where(np.abs(k) <= j, (2 * j + 1) * np.exp(-e_k / t_k), 0.0)))


def wigner_3j(j1: int, j2: int, j3: int, m1: int, m2: int, m3: int) -> float:
    """Wigner 3j symbol by the Racah formula (Edmonds, Angular Momentum in QM, 1957, eq. 3.7.3)."""
    if m1 + m2 + m3 != 0 or abs(m1) > j1 or abs(m2) > j2 or abs(m3) > j3 or not abs(j1 - j2) <= j3 <= j1 + j2:
        return 0.0
    f = math.factorial
    pre = math.sqrt(f(j1 + j2 - j3) * f(j1 - j2 + j3) * f(-j1 + j2 + j3) / f(j1 + j2 + j3 + 1)
                    * f(j1 + m1) * f(j1 - m1) * f(j2 + m2) * f(j2 - m2) * f(j3 + m3) * f(j3 - m3))
    total = 0.0
    for t in range(max(0, j2 - j3 - m1, j1 - j3 + m2), min(j1 + j2 - j3, j1 - m1, j2 + m2) + 1):
        total += (-1) ** t / (f(t) * f(j3 - j2 + t + m1) * f(j3 - j1 + t - m2) * f(j1 + j2 - j3 - t)
                              * f(j1 - t - m1) * f(j2 - t + m2))
    return (-1) ** (j1 - j2 - m3) * pre * total


def asymmetric_levels(a: float, b: float, c: float, j: int):
    """Rigid asymmetric rotor H = A Ja^2 + B Jb^2 + C Jc^2 in the |J K> basis (I^r, z = a).

    Returns the energies (GHz, ascending), eigenvectors and (Ka, Kc) labels; level i of
    2J+1 has Ka = (i+1)//2, Kc = J - i//2 (Townes & Schawlow, Microwave Spectroscopy, 1955).
    """
    ks = np.arange(-j, j + 1)
    h = np.diag((b + c) / 2 * (j * (j + 1) - ks**2) + a * ks**2).astype(float)
    for i, k in enumerate(ks[:-2]):
        v = (b - c) / 4 * math.sqrt((j * (j + 1) - k * (k + 1)) * (j * (j + 1) - (k + 1) * (k + 2)))
        h[i, i + 2] = h[i + 2, i] = v
    energies, vectors = np.linalg.eigh(h)
    labels = [((i + 1) // 2, j - i // 2) for i in range(2 * j + 1)]
    return energies, vectors, ks, labels


def asymmetric_state(consts, j: int, ka: int, kc: int):
    energies, vectors, ks, labels = asymmetric_levels(*consts, j)
    i = labels.index((ka, kc))
    return energies[i], vectors[:, i], ks


def asymmetric_line_strength(consts, up, lo, axis: str) -> tuple[float, float, float]:
    """Line strength S (sum over M of the squared direction-cosine elements) and E_u, E_l in GHz.

    The dipole along a (q = 0) or b (x: (mu_-1 - mu_+1)/sqrt 2) of the rigid rotor, with
    <J' K'|D^1_q|J K> proportional to (-1)^(J'-K') (J' 1 J; -K' q K) (Zare, Angular Momentum, 1988).
    """
    e_u, v_u, k_u = asymmetric_state(consts, *up)
    e_l, v_l, k_l = asymmetric_state(consts, *lo)
    comps = {0: 1.0} if axis == "a" else {-1: 1 / math.sqrt(2), 1: -1 / math.sqrt(2)}
    amp = 0.0
    for i, k in enumerate(k_u):
        for m, kp in enumerate(k_l):
            for q, w in comps.items():
                amp += v_u[i] * v_l[m] * w * (-1) ** int(up[0] - k) * wigner_3j(up[0], 1, lo[0], -int(k), q, int(kp))
    return amp**2 * (2 * up[0] + 1) * (2 * lo[0] + 1), e_u, e_l


def asymmetric_partition_sum(consts, t_k: float, j_max: int) -> float:
    """Q = sum over every rigid-rotor level of (2J+1) exp(-E/kT), ortho and para alike, no spin."""
    return float(sum((2 * j + 1) * np.sum(np.exp(-asymmetric_levels(*consts, j)[0] * H_K / t_k))
                     for j in range(j_max + 1)))


# 3Sigma- fine structure of SO (from memory, CDMS fit): B, D, spin-spin lambda, spin-rotation gamma in GHz
SO_CONSTANTS = {"b": 21.523556, "d": 33.9e-6, "lam": 158.254, "gam": -0.16868}


def triplet_sigma_levels(j_max: int) -> dict:
    """Levels {(N, J): (E in GHz above the lowest, eigenvector, Sigma basis)} of a 3Sigma molecule.

    H = B N^2 - D N^4 + (2/3) lambda (3 S_z^2 - S^2) + gamma N.S with N = J - S, diagonalised for
    each J in the Hund's case (a) basis |J, Omega = Sigma> (Brown & Carrington, Rotational
    Spectroscopy of Diatomic Molecules, 2003, ch. 9). The J = N level (F2) has no Sigma = 0
    part; of the other two, the lower <N^2> is N = J - 1.
    """
    p = SO_CONSTANTS
    out = {}
    for j in range(j_max + 1):
        sig = [s for s in (-1, 0, 1) if abs(s) <= j]
        n = len(sig)
        n2 = np.zeros((n, n))
        h_fs = np.zeros((n, n))
        x = j * (j + 1)
        for i, s in enumerate(sig):
            n2[i, i] = x + 2 - 2 * s * s
            h_fs[i, i] = 2 / 3 * p["lam"] * (3 * s * s - 2) + p["gam"] * (s * s - 2)
            if i > 0:  # J+ S- lowers Omega and Sigma together
                v = math.sqrt(x - s * (s - 1)) * math.sqrt(2 - s * (s - 1))
                n2[i - 1, i] = n2[i, i - 1] = -v
                h_fs[i - 1, i] = h_fs[i, i - 1] = p["gam"] * v / 2
        energies, vec = np.linalg.eigh(p["b"] * n2 - p["d"] * n2 @ n2 + h_fs)
        if j == 0:
            out[(1, 0)] = (energies[0], vec[:, 0], sig)
            continue
        f2 = int(np.argmin(np.abs(vec[1, :])))
        rest = sorted((m for m in range(n) if m != f2), key=lambda m: vec[:, m] @ n2 @ vec[:, m])
        for n_val, m in zip((j - 1, j, j + 1), (rest[0], f2, rest[1])):
            out[(n_val, j)] = (energies[m], vec[:, m], sig)
    e0 = min(v[0] for v in out.values())
    return {key: (e - e0, v, s) for key, (e, v, s) in out.items()}


def triplet_sigma_strength(levels: dict, up, lo) -> float:
    """Line strength of a 3Sigma rotational line: <J' Omega|mu_z|J Omega> (Brown & Carrington 2003)."""
    _, c_u, s_u = levels[up]
    _, c_l, s_l = levels[lo]
    amp = sum(c_u[i] * c_l[m] * (-1) ** (up[1] - s) * wigner_3j(up[1], 1, lo[1], -s, 0, s)
              for i, s in enumerate(s_u) for m, t in enumerate(s_l) if s == t)
    return amp**2 * (2 * up[1] + 1) * (2 * lo[1] + 1)


# IUPAC standard atomic weights (conventional values, from memory)
ATOMIC_WEIGHT = {"H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999, "S": 32.06}


def formula_mass(formula: str) -> float:
    """Sum of the IUPAC atomic weights over a formula such as 'CH3OH'."""
    total = 0.0
    for element, count in re.findall(r"([A-Z][a-z]?)(\d*)", formula):
        total += ATOMIC_WEIGHT[element] * (int(count) if count else 1)
    return total


def j_up_of(line: Line) -> int:
    """Upper J of a 'J=3-2' label."""
    return int(re.fullmatch(r"J=(\d+)-(\d+)", line.transition).group(1))


def linear_lines(cat):
    return [ln for ln in cat.lines if ln.species in LINEAR_ROTORS]


# ----------------------------------------------------------------------------- the built-in tables
def test_builtin_catalogue_loads(cat):
    assert set(cat.species) == {"CO", "HCN", "HNC", "CH3OH", "H2CO", "H2S", "CS", "CH3CN", "SO", "CS2",
                                "H2O", "CO2"}
    assert len(cat.lines) >= 60
    assert cat.source == (str(DEFAULT_SPECIES_FILE), str(DEFAULT_LINES_FILE))
    assert cat.bands_source == str(DEFAULT_BANDS_FILE)
    assert all(isinstance(sp, Species) for sp in cat.species.values())
    assert all(isinstance(ln, Line) for ln in cat.lines)
    assert len(cat.bands) >= 3
    assert all(isinstance(b, Band) for b in cat.bands)


def test_every_value_column_has_a_provenance_column():
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    assert len(species) == 12                       # the species set of test_builtin_catalogue_loads
    for ref in ("mass_ref", "rot_ref", "partition_ref", "photo_ref", "parent_ref"):
        assert ref in species.colnames
        assert all(len(str(v)) > 5 for v in species[ref])
    lines = QTable.read(DEFAULT_LINES_FILE, format="ascii.ecsv")
    assert len(lines) >= 60
    assert all(("CDMS" in str(v) or "JPL" in str(v)) for v in lines["ref"])
    partition = QTable.read(DEFAULT_PARTITION_FILE, format="ascii.ecsv")
    assert all(re.match(r"(CDMS|JPL) \d{6} ", str(v)) for v in partition["ref"])
    bands = QTable.read(DEFAULT_BANDS_FILE, format="ascii.ecsv")
    assert {"g_ref", "wavelength_ref"} <= set(bands.colnames)


def test_every_line_has_its_species(cat):
    assert len(cat.lines) >= 60
    for ln in cat.lines:
        assert cat.get_species(ln.species).name == ln.species
        assert ln in cat.lines_of(ln.species)
        assert cat.get_species(ln.species).mass > 0 * u.u


def test_line_ids_are_species_and_rounded_megahertz(cat):
    ids = [ln.line_id for ln in cat.lines]
    assert len(ids) >= 60
    assert len(ids) == len(set(ids))
    rounded = [(ln.species, round(ln.freq.to_value(u.MHz))) for ln in cat.lines]
    for ln in cat.lines:
        mhz = ln.freq.to_value(u.MHz)
        if rounded.count((ln.species, round(mhz))) == 1:
            assert ln.line_id == f"{ln.species}_{round(mhz)}"
        else:  # two lines of a species in the same MHz: both to three decimals (the CH3OH A+/A- doublets)
            assert ln.line_id == f"{ln.species}_{mhz:.3f}"


def test_lines_in_the_millimetre_range(cat):
    assert len(cat.lines) >= 60
    for ln in cat.lines:
        assert 80 * u.GHz <= ln.freq <= 700 * u.GHz
        assert ln.a_ul > 0 / u.s and ln.e_up > 0 * u.K and ln.g_up >= 1


CH3OH_5_4 = {"CH3OH_241700", "CH3OH_241767", "CH3OH_241791", "CH3OH_241806.524", "CH3OH_241806.525",
             "CH3OH_241813", "CH3OH_241830", "CH3OH_241832.718", "CH3OH_241833.106", "CH3OH_241842",
             "CH3OH_241844", "CH3OH_241852", "CH3OH_241879", "CH3OH_241888", "CH3OH_241904", "CH3OH_241905"}


@pytest.mark.parametrize("fmin, fmax, expected", [
    (241.60, 242.00, CH3OH_5_4),
    (265.70, 266.10, {"HCN_265886"}),
    (230.40, 230.70, {"CO_230538"}),
])
def test_demo_windows_hold_only_their_lines(cat, fmin, fmax, expected):
    # the demo cubes cover these windows; a new catalogue line inside one changes their analysis. The
    # CH3OH window holds the whole J = 5-4 ladder of the torsional ground state, 16 lines (CDMS 032504)
    inside = {ln.line_id for ln in cat.lines if fmin <= ln.freq.to_value(u.GHz) <= fmax}
    assert inside == expected


def test_existing_lines_unchanged(cat):
    # the values the demo data were made with
    assert cat.get_line("CO_230538").a_ul == 6.910e-07 / u.s
    assert cat.get_line("HCN_265886").freq == 265.886434 * u.GHz
    assert cat.get_line("CH3OH_241791").e_up == 34.817 * u.K


def test_lines_of_sorted_by_frequency(cat):
    freqs = [ln.freq.to_value(u.GHz) for ln in cat.lines_of("CH3OH")]
    assert freqs == sorted(freqs)
    assert len([f for f in freqs if 241.6 < f < 242.0]) == 16
    assert cat.lines_of("CS2") == ()  # no dipole moment, no rotational lines


# ----------------------------------------------------------------------------- linear rotors
def test_linear_einstein_a_against_dipole_formula(cat):
    # Gordy & Cook (1984) dipole formula with the published dipole moments (DIPOLE, from memory),
    # 3 %: the CO dipole varies slightly with J (Herman-Wallis), 0.8 % at J = 6
    lines = linear_lines(cat)
    assert len(lines) == 20
    for ln in lines:
        j = j_up_of(ln)
        expected = einstein_a_linear(ln.freq.to_value(u.GHz), DIPOLE[ln.species], j)
        assert_allclose(ln.a_ul.to_value(1 / u.s), expected, rtol=0.03, err_msg=ln.line_id)
        # degeneracy (2J + 1) times the nuclear-spin factor of the CDMS entry (3 for HCN, 027501)
        assert ln.g_up == LINEAR_SPIN[ln.species] * (2 * j + 1)


def test_linear_energies_and_frequencies(cat):
    assert len(linear_lines(cat)) == 20
    for ln in linear_lines(cat):
        j = j_up_of(ln)
        b = cat.get_species(ln.species).rot_b
        # rigid rotor E_J = h B J(J+1), astropy constants, 0.5 %
        e_rigid = (const.h * b * j * (j + 1) / const.k_B).to(u.K)
        assert_allclose(ln.e_up.to_value(u.K), e_rigid.value, rtol=5e-3, err_msg=ln.line_id)
        # rigid rotor nu = 2 B J, 1e-3 (centrifugal stretching is < 3e-4 up to 700 GHz)
        assert_allclose(ln.freq.to_value(u.GHz), (2 * b * j).to_value(u.GHz), rtol=1e-3, err_msg=ln.line_id)
        # with the centrifugal term (D from memory): nu = 2BJ - 4DJ^3, E = h(BJ(J+1) - D J^2 (J+1)^2)
        b_ghz, d_ghz = b.to_value(u.GHz), DISTORTION[ln.species]
        assert_allclose(ln.freq.to_value(u.GHz), 2 * b_ghz * j - 4 * d_ghz * j**3, rtol=1e-5, err_msg=ln.line_id)
        e_dist = (b_ghz * j * (j + 1) - d_ghz * (j * (j + 1)) ** 2) * H_K
        assert_allclose(ln.e_up.to_value(u.K), e_dist, rtol=2e-4, err_msg=ln.line_id)


@pytest.mark.parametrize("name", ["CO", "HCN", "CS"])
@pytest.mark.parametrize("t_k", [10.0, 20.0, 40.0, 80.0])
def test_linear_partition_against_direct_sum(cat, name, t_k):
    # direct sum over levels with numpy, times the entry's spin factor (3 for HCN, CDMS 027501); the
    # high-T expansion the catalogue uses for these rotors is good to 0.5 % from 10 K
    sp = cat.get_species(name)
    assert sp.partition == "linear" and sp.multiplicity == LINEAR_SPIN[name]
    expected = LINEAR_SPIN[name] * linear_partition_sum(sp.rot_b.to_value(u.GHz), t_k)
    assert_allclose(sp.partition_function(t_k * u.K), expected, rtol=5e-3)


@pytest.mark.parametrize("t_k", [10.0, 20.0, 40.0])
def test_hnc_table_against_direct_sum(cat, t_k):
    # HNC is tabulated (CDMS 027502, whose bending state v2 = 1 adds 2.3 % at 150 K): below 40 K the table,
    # interpolated, is the rigid-rotor direct sum with g = 2J+1 (numpy), to 0.5 %
    sp = cat.get_species("HNC")
    assert sp.partition == "table"
    expected = linear_partition_sum(sp.rot_b.to_value(u.GHz), t_k)
    assert_allclose(sp.partition_function(t_k * u.K), expected, rtol=5e-3)


@pytest.mark.parametrize("name", ["CO2", "CS2"])
@pytest.mark.parametrize("t_k", [10.0, 40.0])
def test_symmetric_linear_rotor_counts_even_levels(cat, name, t_k):
    # O=C=O and S=C=S (spinless 16O, 32S nuclei): only even J exist, so Q is the direct sum over even J
    # (Gordy & Cook 1984, symmetry number 2); the catalogue encodes it as multiplicity 0.5
    sp = cat.get_species(name)
    expected = linear_partition_sum(sp.rot_b.to_value(u.GHz), t_k, j_step=2)
    assert_allclose(sp.partition_function(t_k * u.K), expected, rtol=2e-3)


def test_partition_function_vectorised(cat):
    sp = cat.get_species("HCN")
    temps = np.array([10.0, 20.0, 40.0, 80.0])
    expected = [3 * linear_partition_sum(sp.rot_b.to_value(u.GHz), t) for t in temps]  # 14N factor, CDMS 027501
    got = sp.partition_function(temps * u.K)
    assert got.shape == (4,)
    assert_allclose(got, expected, rtol=5e-3)


# ----------------------------------------------------------------------------- SO, a 3Sigma radical
@pytest.fixture(scope="module")
def so_levels():
    return triplet_sigma_levels(160)


def so_quantum_numbers(line: Line) -> tuple[tuple[int, int], tuple[int, int]]:
    n_u, j_u, n_l, j_l = map(int, re.fullmatch(r"(\d+)\((\d+)\)-(\d+)\((\d+)\)", line.transition).groups())
    return (n_u, j_u), (n_l, j_l)


def test_so_lines_against_fine_structure_hamiltonian(cat, so_levels):
    # Hund's case (a) 3Sigma Hamiltonian with B, D, lambda, gamma from memory (Brown & Carrington 2003):
    # frequencies 1e-4, E_up 0.02 K above the lowest level 1_0, A with mu = 1.535 D (from memory) 3 %
    lines = cat.lines_of("SO")
    assert len(lines) == 10
    assert cat.get_species("SO").rot_b.to_value(u.GHz) == SO_CONSTANTS["b"]
    for ln in lines:
        up, lo = so_quantum_numbers(ln)
        nu = so_levels[up][0] - so_levels[lo][0]
        assert_allclose(ln.freq.to_value(u.GHz), nu, rtol=1e-4, err_msg=ln.line_id)
        assert_allclose(ln.e_up.to_value(u.K), so_levels[up][0] * H_K, atol=0.02, err_msg=ln.line_id)
        assert ln.g_up == 2 * up[1] + 1
        strength = triplet_sigma_strength(so_levels, up, lo)
        expected = einstein_a(ln.freq.to_value(u.GHz), DIPOLE["SO"], strength, 2 * up[1] + 1)
        assert_allclose(ln.a_ul.to_value(1 / u.s), expected, rtol=0.03, err_msg=ln.line_id)


@pytest.mark.parametrize("t_k", [9.375, 18.75, 37.5, 75.0, 150.0])
def test_so_partition_is_the_fine_structure_level_sum(cat, so_levels, t_k):
    # the direct sum of (2J+1) exp(-E/kT) over the levels of the Hund's case (a) Hamiltonian diagonalised here
    # (Brown & Carrington 2003) reproduces the CDMS 048501 table (astroquery's partfunc.cat) to 0.1 %, and the
    # catalogue's Q is that table (the N-rotor x 3 approximation it replaced was 40 % high at 20 K)
    energies = np.array([v[0] for v in so_levels.values()]) * H_K
    weights = np.array([2 * key[1] + 1 for key in so_levels])
    direct = np.sum(weights * np.exp(-energies / t_k))
    assert_allclose(direct, 10 ** cdms_log_q(48501)[t_k], rtol=1e-3)
    sp = cat.get_species("SO")
    assert sp.partition == "table"
    assert_allclose(sp.partition_function(t_k * u.K), direct, rtol=1e-3)


# ----------------------------------------------------------------------------- CH3CN, a symmetric top
def ch3cn_quantum_numbers(line: Line) -> tuple[int, int]:
    j_u, k_u, j_l, k_l = map(int, re.fullmatch(r"(\d+) (\d+)-(\d+) (\d+)", line.transition).groups())
    assert j_l == j_u - 1 and k_l == k_u
    return j_u, k_u


def ch3cn_spin_weight(k):
    """Nuclear-spin weight of a CH3CN level per K state, relative, as in CDMS 041505: K = 0 and K = 3n
    states 2, other K states 1 (a K = 3n ladder weighs twice the others; Townes & Schawlow 1955, C3v tops)."""
    return np.where(np.abs(k) % 3 == 0, 2.0, 1.0)


@pytest.mark.parametrize("t_k", [9.375, 18.75, 37.5])
def test_symmetric_top_partition_against_spin_weighted_sum(cat, t_k):
    # direct sum over J and K = -J..J of w_K (2J+1) exp(-E/kT), E = hBJ(J+1) + h(A-B)K^2 (Gordy & Cook 1984),
    # w_K the spin weight of ch3cn_spin_weight, against the CDMS 041505 table (astroquery's partfunc.cat):
    # 0.1 % (its v8 = 1 state adds 0.2 % at 75 K and 7 % at 150 K); without the weights the sum falls short
    # by a quarter to a third (2/3 at 9.375 K, tending to 3/4 at high temperature)
    sp = cat.get_species("CH3CN")
    a, b = sp.rot_a.to_value(u.GHz), sp.rot_b.to_value(u.GHz)
    j = np.arange(201.0)[:, None]
    k = np.arange(-200, 201.0)[None, :]
    boltzmann = np.where(np.abs(k) <= j, (2 * j + 1) * np.exp(-(b * j * (j + 1) + (a - b) * k**2) * H_K / t_k), 0.0)
    weighted = float(np.sum(ch3cn_spin_weight(k) * boltzmann))
    assert_allclose(weighted, 10 ** cdms_log_q(41505)[t_k], rtol=1e-3)
    assert_allclose(sp.partition_function(t_k * u.K), weighted, rtol=1e-3)
    assert 0.6 < float(np.sum(boltzmann)) / weighted < 0.76


def test_ch3cn_lines_against_symmetric_top(cat):
    sp = cat.get_species("CH3CN")
    a, b = sp.rot_a.to_value(u.GHz), sp.rot_b.to_value(u.GHz)
    lines = cat.lines_of("CH3CN")
    assert [ch3cn_quantum_numbers(ln) for ln in lines] == [(12, 3), (12, 2), (12, 1), (12, 0)]
    for ln in lines:
        j, k = ch3cn_quantum_numbers(ln)
        nu = ln.freq.to_value(u.GHz)
        # rigid symmetric top nu = 2B(J) (upper J), 1e-3; with D_J = 3.808 kHz and D_JK = 177.4 kHz
        # (from memory): nu = 2BJ - 4 D_J J^3 - 2 D_JK J K^2, 1e-6
        assert_allclose(nu, 2 * b * j, rtol=1e-3)
        assert_allclose(nu, 2 * b * j - 4 * 3.808e-6 * j**3 - 2 * 177.4e-6 * j * k**2, rtol=1e-6)
        # E = hBJ(J+1) + h(A-B)K^2 (Gordy & Cook 1984), 0.5 %
        assert_allclose(ln.e_up.to_value(u.K), (b * j * (j + 1) + (a - b) * k**2) * H_K, rtol=5e-3)
        # S = (J^2 - K^2)/J per K component (Gordy & Cook 1984), mu = 3.92197 D (from memory), 3 %; g_up is
        # the spin weight of the level (both +-K states for K > 0) times 2J+1: 2(2J+1) for K = 0, 1, 2 and
        # 4(2J+1) for K = 3, as in CDMS 041505 (its Q, test_symmetric_top_partition_against_spin_weighted_sum)
        g_k = 2 * float(ch3cn_spin_weight(np.array(k))) if k > 0 else 2.0
        assert ln.g_up == g_k * (2 * j + 1)
        expected = einstein_a(nu, DIPOLE["CH3CN"], (j**2 - k**2) / j, 2 * j + 1)
        assert_allclose(ln.a_ul.to_value(1 / u.s), expected, rtol=0.03, err_msg=ln.line_id)


def test_methanol_a_type_lines_against_symmetric_top(cat):
    # CH3OH is a near-prolate top: a-type lines follow S = (J^2 - K^2)/J with mu_a = 0.899 D
    # (CDMS 032504 documentation), to 5 % (asymmetry splits the |K| = 1 levels); g_up = 4(2J+1), the g_I = 4
    # of CDMS 032504 (A and E alike), while A is per state and counts 2J+1
    assert len(cat.lines_of("CH3OH")) >= 16
    for ln in cat.lines_of("CH3OH"):
        j_u, k_u, j_l, k_l = map(int, re.match(r"(\d+)\((-?\d+)\)-(\d+)\((-?\d+)\)", ln.transition).groups())
        assert j_l == j_u - 1 and k_l == k_u and ln.g_up == 4 * (2 * j_u + 1)
        expected = einstein_a(ln.freq.to_value(u.GHz), DIPOLE["CH3OH"], (j_u**2 - k_u**2) / j_u, 2 * j_u + 1)
        assert_allclose(ln.a_ul.to_value(1 / u.s), expected, rtol=0.05, err_msg=ln.line_id)


def test_methanol_ladder_is_complete(cat):
    # the J = 5-4 ladder of the torsional ground state: for the A species K = 0 (A+ only), 1, 2, 3, 4
    # (A+ and A- each), for the E species K = 0, +-1, +-2, +-3, +-4: 16 lines (Lees & Baker 1968 labelling;
    # frequencies of CDMS 032504); the K = 1 A+- lines lie outside 241.6-242.0 GHz (239.7 and 243.9 GHz)
    labels = sorted(ln.transition for ln in cat.lines_of("CH3OH") if 241.6 < ln.freq.to_value(u.GHz) < 242.0)
    expected = sorted([f"5({k})-4({k}) A{p}" for k in (2, 3, 4) for p in "+-"] + ["5(0)-4(0) A+"]
                      + [f"5({k})-4({k}) E" for k in (0, 1, -1, 2, -2, 3, -3, 4, -4)])
    assert labels == expected


# ----------------------------------------------------------------------------- asymmetric tops
# ortho levels (spin weight 3; para 1) of the H2 pair: H2CO (H-H swapped by the C2 rotation about a) when Ka
# is odd, H2S and H2O (C2 about b) when Ka + Kc is odd (Townes & Schawlow, Microwave Spectroscopy, 1955)
ORTHO = {"H2CO": lambda ka, kc: ka % 2 == 1, "H2S": lambda ka, kc: (ka + kc) % 2 == 1,
         "H2O": lambda ka, kc: (ka + kc) % 2 == 1}


def asym_quantum_numbers(line: Line):
    nums = list(map(int, re.fullmatch(r"(\d+)\((\d+),(\d+)\)-(\d+)\((\d+),(\d+)\)", line.transition).groups()))
    return tuple(nums[:3]), tuple(nums[3:])


@pytest.mark.parametrize("name, axis, e_tol, nu_tol", [("H2CO", "a", 1e-3, 1e-3), ("H2S", "b", 5e-3, 1e-2)])
def test_asymmetric_top_lines_against_rigid_rotor(cat, name, axis, e_tol, nu_tol):
    # rigid asymmetric rotor diagonalised here with the catalogue's A, B, C: E_up above 0(0,0) and the
    # frequency (H2S is light: centrifugal distortion, hence the looser tolerances); A from the line
    # strength and the published dipole (H2CO mu_a, H2S mu_b, from memory), 3 %; g_up = w (2J + 1) with the
    # spin weight w of the upper level, 3 for ortho and 1 for para (ORTHO), as in CDMS 030501 and 034502
    sp = cat.get_species(name)
    consts = tuple(q.to_value(u.GHz) for q in (sp.rot_a, sp.rot_b, sp.rot_c))
    lines = cat.lines_of(name)
    assert len(lines) >= 3
    for ln in lines:
        up, lo = asym_quantum_numbers(ln)
        strength, e_u, e_l = asymmetric_line_strength(consts, up, lo, axis)
        assert_allclose(ln.e_up.to_value(u.K), e_u * H_K, rtol=e_tol, err_msg=ln.line_id)
        assert_allclose(ln.freq.to_value(u.GHz), e_u - e_l, rtol=nu_tol, err_msg=ln.line_id)
        assert ln.g_up == (3 if ORTHO[name](*up[1:]) else 1) * (2 * up[0] + 1), ln.line_id
        expected = einstein_a(ln.freq.to_value(u.GHz), DIPOLE[name], strength, 2 * up[0] + 1)
        assert_allclose(ln.a_ul.to_value(1 / u.s), expected, rtol=0.03, err_msg=ln.line_id)


def test_rigid_rotor_line_strength_of_a_textbook_line():
    # the 1(1,0)-1(0,1) line of a water-like rotor has S = 3/2 (Townes & Schawlow 1955 tables)
    strength, _, _ = asymmetric_line_strength((835.840, 435.352, 278.139), (1, 1, 0), (1, 0, 1), "b")
    assert_allclose(strength, 1.5, rtol=1e-9)


@pytest.mark.parametrize("t_k", [9.375, 18.75, 37.5, 75.0, 150.0])
@pytest.mark.parametrize("name, source, tag, j_max", [
    ("H2CO", "CDMS", 30501, 45), ("H2S", "CDMS", 34502, 30), ("H2O", "JPL", 18003, 25)])
def test_asymmetric_partition_is_the_spin_weighted_level_sum(cat, name, source, tag, j_max, t_k):
    # direct sum over the rigid-rotor levels diagonalised here with the catalogue's A, B, C, each weighted
    # w (2J+1) with w = 3 for ortho and 1 for para (ORTHO), against the entry's table (astroquery's CDMS
    # partfunc.cat or JPL catdir.cat): 0.5 % (centrifugal distortion lowers the levels of light H2S and H2O
    # a little at 150 K); the catalogue's Q is that table. Without the spin weights the sum is half as large.
    sp = cat.get_species(name)
    consts = tuple(q.to_value(u.GHz) for q in (sp.rot_a, sp.rot_b, sp.rot_c))
    weighted = 0.0
    for j in range(j_max + 1):
        energies, _, _, labels = asymmetric_levels(*consts, j)
        weights = np.array([3.0 if ORTHO[name](ka, kc) else 1.0 for ka, kc in labels])
        weighted += (2 * j + 1) * float(np.sum(weights * np.exp(-energies * H_K / t_k)))
    reference = 10 ** (cdms_log_q(tag) if source == "CDMS" else jpl_log_q(tag))[t_k]
    assert_allclose(weighted, reference, rtol=5e-3)
    assert sp.partition == "table"
    assert_allclose(sp.partition_function(t_k * u.K), reference, rtol=1e-9)


# ----------------------------------------------------------------------------- tabulated partition functions
def test_table_interpolation_is_a_power_law_between_tabulated_temperatures(cat):
    # between two tabulated temperatures Q = Q_1 (T/T_1)^n, n = ln(Q_2/Q_1)/ln(T_2/T_1) (log Q linear in
    # log T), with the CDMS 032504 values of astroquery's partfunc.cat at 18.75 and 37.5 K
    ref = cdms_log_q(32504)
    q1, q2 = 10 ** ref[18.75], 10 ** ref[37.5]
    n = np.log(q2 / q1) / np.log(2.0)
    temps = np.array([20.0, 25.0, 30.0, 37.0])
    assert_allclose(cat.get_species("CH3OH").partition_function(temps * u.K), q1 * (temps / 18.75) ** n, rtol=1e-12)


def test_table_extrapolates_a_factor_two_and_refuses_beyond(cat):
    # below its first (JPL 018003: 9.375 K) and above its last tabulated temperature (CDMS 048501: 300 K) a
    # table is extended with the power law of its end interval, up to EXTRAPOLATION_FACTOR = 2
    assert EXTRAPOLATION_FACTOR == 2.0
    h2o, so = cat.get_species("H2O"), cat.get_species("SO")
    lo = jpl_log_q(18003)
    n_lo = (lo[18.75] - lo[9.375]) / np.log10(2.0)
    assert_allclose(h2o.partition_function(5.0 * u.K), 10 ** lo[9.375] * (5.0 / 9.375) ** n_lo, rtol=1e-12)
    hi = cdms_log_q(48501)
    n_hi = (hi[300.0] - hi[225.0]) / np.log10(300.0 / 225.0)
    assert_allclose(so.partition_function(550.0 * u.K), 10 ** hi[300.0] * (550.0 / 300.0) ** n_hi, rtol=1e-12)
    assert np.isfinite(h2o.partition_function(4.6875 * u.K)) and np.isfinite(so.partition_function(600 * u.K))
    with pytest.raises(CatalogueError, match=r"species 'H2O': t_kin = 4 K lies outside its partition-function "
                                             r"table \(JPL 018003 .*9\.375 to 300 K\) by more than a factor 2"):
        h2o.partition_function([10.0, 4.0] * u.K)
    with pytest.raises(CatalogueError, match=r"species 'SO': t_kin = 700 K lies outside"):
        so.partition_function(700 * u.K)


def test_table_partition_function_broadcasts(cat):
    temps = np.array([[10.0], [40.0]]) * np.ones(3) * u.K
    got = cat.get_species("H2CO").partition_function(temps)
    assert got.shape == (2, 3)
    assert_allclose(got[1], cat.get_species("H2CO").partition_function(40.0 * u.K), rtol=1e-15)


def test_species_with_a_table_built_directly(cat):
    # a table with two points is a single power law: Q = 2 (T / 10 K)^1.5 (closed form)
    table = PartitionTable(temperature=(10.0, 40.0), log10_q=(np.log10(2.0), np.log10(16.0)), source="test table")
    base = cat.get_species("CO")
    sp = Species(name="X", mass=base.mass, partition="table", rot_a=base.rot_a, rot_b=base.rot_b,
                 rot_c=base.rot_c, multiplicity=1.0, photo_quiet=base.photo_quiet,
                 photo_active=base.photo_active, parent=None, partition_table=table)
    assert_allclose(sp.partition_function([10.0, 20.0, 60.0] * u.K), 2 * (np.array([10.0, 20.0, 60.0]) / 10) ** 1.5,
                    rtol=1e-12)
    bare = Species(name="Y", mass=base.mass, partition="table", rot_a=base.rot_a, rot_b=base.rot_b,
                   rot_c=base.rot_c, multiplicity=1.0, photo_quiet=base.photo_quiet,
                   photo_active=base.photo_active, parent=None)
    with pytest.raises(CatalogueError, match="species 'Y': column 'partition' is 'table' but no tabulated"):
        bare.partition_function(20 * u.K)


def _write(table, path):
    table.write(path, format="ascii.ecsv", overwrite=True)
    return path


def test_user_partition_file(tmp_path, cat):
    # a user's table replaces the built-in one for its species; rows of species the species file does not
    # tabulate are ignored
    part = QTable.read(DEFAULT_PARTITION_FILE, format="ascii.ecsv")
    part["log10_q"] = np.where(part["species"] == "SO", part["log10_q"] + np.log10(2.0), part["log10_q"])
    path = _write(part, tmp_path / "my_partition.ecsv")
    user = load_catalogue(partition_file=path)
    assert_allclose(user.get_species("SO").partition_function(37.5 * u.K),
                    2 * cat.get_species("SO").partition_function(37.5 * u.K), rtol=1e-12)
    assert str(path) != str(DEFAULT_PARTITION_FILE)
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    species.remove_row(list(species["species"]).index("SO"))
    lines = QTable.read(DEFAULT_LINES_FILE, format="ascii.ecsv")
    lines = lines[lines["species"] != "SO"]
    no_so = load_catalogue(_write(species, tmp_path / "s.ecsv"), _write(lines, tmp_path / "l.ecsv"))
    assert "SO" not in no_so.species and no_so.get_species("CH3OH").partition_table is not None


def test_catalogue_without_tables(tmp_path):
    # partition_file=None: fine when no species is tabulated, refused naming the species otherwise
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"species CH3CN, CH3OH, H2CO, H2O, H2S, HNC, SO have partition "
                                             r"'table', but no partition_file was given"):
        load_catalogue(partition_file=None)
    species["partition"] = [("asymmetric" if p == "table" else p) for p in species["partition"]]
    path = _write(species, tmp_path / "closed_forms.ecsv")
    closed = load_catalogue(path, partition_file=None)
    assert all(sp.partition_table is None for sp in closed.species.values())


@pytest.mark.parametrize("t_k, rtol", [(20.0, 0.035), (100.0, 0.01)])
def test_asymmetric_closed_form_of_a_user_catalogue(tmp_path, t_k, rtol):
    # partition = 'asymmetric' (kept for user catalogues): the classical rigid-rotor formula times the mean
    # spin weight 2 of H2CO falls short of the spin-weighted direct sum (ORTHO weights) by the stated amounts
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    species["partition"] = [("asymmetric" if n == "H2CO" else p) for n, p in zip(species["species"],
                                                                                 species["partition"])]
    sp = load_catalogue(_write(species, tmp_path / "s.ecsv")).get_species("H2CO")
    assert sp.multiplicity == 2.0
    consts = tuple(q.to_value(u.GHz) for q in (sp.rot_a, sp.rot_b, sp.rot_c))
    direct = 0.0
    for j in range(71):
        energies, _, _, labels = asymmetric_levels(*consts, j)
        weights = np.array([3.0 if ORTHO["H2CO"](ka, kc) else 1.0 for ka, kc in labels])
        direct += (2 * j + 1) * float(np.sum(weights * np.exp(-energies * H_K / t_k)))
    got = sp.partition_function(t_k * u.K)
    assert_allclose(got, direct, rtol=rtol)
    assert got < direct


@pytest.mark.parametrize("edit, message", [
    (lambda t: t.remove_column("log10_q"), r"my_partition\.ecsv' has no column 'log10_q'"),
    (lambda t: t.remove_rows(np.nonzero(t["species"] == "SO")[0][1:]),
     r"species 'SO' has partition 'table', but .*my_partition\.ecsv' holds 1 rows for it"),
    (lambda t: t.remove_rows(np.nonzero(t["species"] == "SO")[0]),
     r"species 'SO' has partition 'table', but .*my_partition\.ecsv' holds 0 rows for it"),
    (lambda t: t["temperature"].__setitem__(np.nonzero(t["species"] == "SO")[0][1], 2.725 * u.K),
     r"species 'SO' .* holds 9 rows for it with a repeated temperature"),
    (lambda t: t["temperature"].__setitem__(np.nonzero(t["species"] == "SO")[0][1], -5 * u.K),
     r"species 'SO' has temperature -5 K and log10_q .* expected a positive finite temperature"),
    (lambda t: t["log10_q"].__setitem__(np.nonzero(t["species"] == "SO")[0][1], np.nan),
     r"species 'SO' has temperature .* expected a positive finite temperature and a finite log10_q"),
])
def test_bad_partition_file(tmp_path, edit, message):
    table = QTable.read(DEFAULT_PARTITION_FILE, format="ascii.ecsv")
    edit(table)
    path = _write(table, tmp_path / "my_partition.ecsv")
    with pytest.raises(CatalogueError, match=message):
        load_catalogue(partition_file=path)
    with pytest.raises(CatalogueError, match="partition-function file .*absent.ecsv' does not exist"):
        load_catalogue(partition_file=tmp_path / "absent.ecsv")


# ----------------------------------------------------------------------------- species properties
def test_partition_function_rejects_bad_temperature(cat):
    sp = cat.get_species("CO")
    for bad in (0.0, -5.0, np.nan, np.inf):
        with pytest.raises(CatalogueError, match="t_kin must be positive"):
            sp.partition_function(bad * u.K)


@pytest.mark.parametrize("name", ["CO", "HCN", "HNC", "CH3OH", "H2O", "CO2", "H2CO", "H2S", "CS", "CH3CN",
                                  "SO", "CS2"])
def test_masses_from_atomic_weights(cat, name):
    # IUPAC standard atomic weights: H 1.008, C 12.011, N 14.007, O 15.999, S 32.06 (from memory)
    assert_allclose(cat.get_species(name).mass.to_value(u.u), formula_mass(name), atol=1e-9)


def test_photo_rate(cat):
    sp = cat.get_species("CO")
    assert sp.photo_rate("quiet") == sp.photo_quiet
    assert sp.photo_rate("active") == sp.photo_active
    assert sp.photo_active > sp.photo_quiet  # a more active Sun destroys faster
    with pytest.raises(CatalogueError, match="solar_activity must be 'quiet' or 'active'"):
        sp.photo_rate("medium")


def test_photo_rates_of_every_species(cat):
    assert len(cat.species) == 12
    for sp in cat.species.values():
        assert sp.photo_quiet > 0 / u.s
        assert sp.photo_active >= sp.photo_quiet, sp.name
        # sanity bound: lifetimes at 1 au between ~10 minutes and ~3 weeks, the span of the
        # Huebner, Keady & Lyon (1992) table for these molecules (from memory)
        assert 5e-7 / u.s < sp.photo_quiet < 2e-3 / u.s, sp.name


def test_parents(cat):
    assert cat.get_species("CS").parent == "CS2"
    for sp in cat.species.values():
        if sp.parent is not None:
            parent = cat.get_species(sp.parent)
            assert parent.parent is None  # no chains of daughters
        else:
            assert sp.name != "CS"
    assert [sp.name for sp in cat.species.values() if sp.parent is not None] == ["CS"]


# ----------------------------------------------------------------------------- infrared bands
# band origins in cm-1 (from memory; Herzberg, Molecular Spectra and Molecular Structure II, 1945 and
# HITRAN band centres) and the stated wavelength range of each band in micrometres
BAND_ORIGIN = {"H2O_nu3": (3755.93, 2.60, 2.75), "CO2_nu3": (2349.14, 4.20, 4.30), "CO_v1-0": (2143.27, 4.60, 4.75)}
# Einstein A of the band (from memory): CO v=1-0 ~ 34 /s, CO2 nu3 ~ 424 /s, H2O nu3 ~ 72 /s
BAND_A = {"H2O_nu3": 72.0, "CO2_nu3": 424.0, "CO_v1-0": 34.0}


def test_bands_load(cat):
    assert {b.band_id for b in cat.bands} == set(BAND_ORIGIN)
    assert cat.bands_of("CO") == (cat.get_band("CO_v1-0"),)
    assert cat.bands_of("HCN") == ()
    assert cat.get_band("H2O_nu3").species == "H2O"


@pytest.mark.parametrize("band_id", sorted(BAND_ORIGIN))
def test_band_wavelengths_and_g_factors(cat, band_id):
    band = cat.get_band(band_id)
    origin, lo, hi = BAND_ORIGIN[band_id]
    assert lo * u.um < band.wavelength < hi * u.um
    # the band centre is the band origin, lambda = 1 / sigma, to 1e-4
    assert_quantity_allclose(band.wavelength, (1 / (origin / u.cm)).to(u.um), rtol=1e-4)
    assert band.g_1au > 0 / u.s
    # solar pumping of a two-level band: g = A W / (exp(hc/lambda k T_sun) - 1), dilution
    # W = (R_sun / 2 au)^2 (Chamberlain & Hunten, Theory of Planetary Atmospheres, 1987), a blackbody
    # Sun at the IAU nominal 5772 K and the band A above (from memory): to 30 %
    x = (const.h * const.c / (band.wavelength * const.k_B * 5772 * u.K)).decompose().value
    w = ((const.R_sun / (2 * u.au)) ** 2).decompose().value
    assert_allclose(band.g_1au.to_value(1 / u.s), BAND_A[band_id] * w / np.expm1(x), rtol=0.3)


def test_band_g_factor_inverse_square(cat):
    # optically thin solar pumping scales with the solar flux, 1 / r_h^2
    band = cat.get_band("CO2_nu3")
    r_h = np.array([0.5, 1.0, 2.0, 4.9]) * u.au
    assert_quantity_allclose(band.g_factor(r_h), band.g_1au / np.array([0.25, 1.0, 4.0, 24.01]))
    assert_quantity_allclose(band.g_factor(1.495978707e8 * u.km), band.g_1au)
    for bad in (0.0 * u.au, -1.0 * u.au, np.nan * u.au):
        with pytest.raises(CatalogueError, match="r_h must be positive and finite"):
            band.g_factor(bad)
    with pytest.raises(CatalogueError, match="r_h must be a distance"):
        band.g_factor(2.0 * u.s)


def test_catalogue_without_bands(cat):
    no_bands = load_catalogue(bands_file=None)
    assert no_bands.bands == () and no_bands.bands_source is None
    assert len(no_bands.lines) == len(cat.lines)
    with pytest.raises(CatalogueError, match=r"band 'CO_v1-0' is not in the catalogue \(no bands file loaded\)"):
        no_bands.get_band("CO_v1-0")
    # the constructor without bands still works
    bare = Catalogue(species=cat.species, lines=cat.lines, source=cat.source)
    assert bare.bands == () and bare.bands_of("CO") == ()


def test_unknown_band(cat):
    with pytest.raises(CatalogueError, match=r"band 'CO_v2-0' is not in the catalogue .*bands\.ecsv"):
        cat.get_band("CO_v2-0")
    with pytest.raises(CatalogueError, match="'NH3' is not in the catalogue"):
        cat.bands_of("NH3")


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
    with pytest.raises(CatalogueError, match="band catalogue file .*nothing.ecsv' does not exist"):
        load_catalogue(bands_file=missing)


def test_unreadable_file(tmp_path):
    bad = tmp_path / "garbage.ecsv"
    bad.write_text("# %ECSV 1.0\n# ---\n# datatype: [this is not\n")
    with pytest.raises(CatalogueError, match="garbage.ecsv' is not a readable ECSV table"):
        load_catalogue(species_file=bad)


@pytest.mark.parametrize("which, default, column", [
    ("species_file", DEFAULT_SPECIES_FILE, "photo_active"),
    ("species_file", DEFAULT_SPECIES_FILE, "rot_b"),
    ("lines_file", DEFAULT_LINES_FILE, "e_up"),
    ("lines_file", DEFAULT_LINES_FILE, "g_up"),
    ("bands_file", DEFAULT_BANDS_FILE, "g_1au"),
    ("bands_file", DEFAULT_BANDS_FILE, "wavelength"),
])
def test_user_file_missing_a_column(tmp_path, which, default, column):
    table = QTable.read(default, format="ascii.ecsv")
    table.remove_column(column)
    path = tmp_path / f"user_{column}.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=rf"user_{column}\.ecsv' has no column '{column}'"):
        load_catalogue(**{which: path})


def test_species_column_with_wrong_unit(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    table["rot_b"] = table["rot_b"].value * u.km
    path = tmp_path / "bad_unit.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"bad_unit\.ecsv': column 'rot_b' has unit km"):
        load_catalogue(species_file=path)


def test_band_column_with_wrong_unit(tmp_path):
    table = QTable.read(DEFAULT_BANDS_FILE, format="ascii.ecsv")
    table["g_1au"] = table["g_1au"].value * u.km
    path = tmp_path / "bad_band_unit.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"bad_band_unit\.ecsv': column 'g_1au' has unit km"):
        load_catalogue(bands_file=path)


def test_duplicated_line_id(tmp_path):
    table = QTable.read(DEFAULT_LINES_FILE, format="ascii.ecsv")
    path = tmp_path / "dup_lines.ecsv"
    vstack([table, table[:1]]).write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"dup_lines\.ecsv': line_id 'CO_230538' is duplicated"):
        load_catalogue(lines_file=path)


def test_duplicated_band_id(tmp_path):
    table = QTable.read(DEFAULT_BANDS_FILE, format="ascii.ecsv")
    path = tmp_path / "dup_bands.ecsv"
    vstack([table, table[:1]]).write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"dup_bands\.ecsv': band_id 'H2O_nu3' is duplicated"):
        load_catalogue(bands_file=path)


@pytest.mark.parametrize("column, value", [("g_1au", 0.0), ("g_1au", np.nan), ("wavelength", -2.7)])
def test_band_with_bad_value(tmp_path, column, value):
    table = QTable.read(DEFAULT_BANDS_FILE, format="ascii.ecsv")
    table[column][1] = value * table[column].unit
    path = tmp_path / "bad_band.ecsv"
    table.write(path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=rf"bad_band\.ecsv': band 'CO2_nu3' has {column} .*expected a "
                                             "positive finite value"):
        load_catalogue(bands_file=path)


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


def test_band_of_undefined_species(tmp_path):
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    species.remove_row(list(species["species"]).index("CO2"))
    lines = QTable.read(DEFAULT_LINES_FILE, format="ascii.ecsv")
    species_path, lines_path = tmp_path / "no_co2.ecsv", tmp_path / "lines.ecsv"
    species.write(species_path, format="ascii.ecsv")
    lines.write(lines_path, format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=r"bands\.ecsv': band 'CO2_nu3' belongs to species 'CO2', "
                                             r"which .*no_co2\.ecsv' does not define"):
        load_catalogue(species_path, lines_path)
    assert "CO2" not in load_catalogue(species_path, lines_path, bands_file=None).species


def test_unknown_partition_kind(tmp_path):
    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    table["partition"][0] = "symtop"
    path = tmp_path / "symtop.ecsv"
    table.write(path, format="ascii.ecsv")
    sp = load_catalogue(species_file=path).get_species("CO")
    with pytest.raises(CatalogueError, match="column 'partition' must be 'table', 'linear' or 'asymmetric', "
                                             "found 'symtop'"):
        sp.partition_function(20 * u.K)


@pytest.mark.parametrize("band_id, j_step", [("CO_v1-0", 1), ("CO2_nu3", 2)])
def test_band_extent_holds_the_rotational_branches(cat, band_id, j_step):
    # Rigid-rotor P and R branch positions nu = nu0 + 2B(J+1) (R) and nu0 - 2BJ (P), populations
    # (2J+1) exp(-hBJ(J+1)/kT) (Herzberg, Spectra of Diatomic Molecules, 1950: closed forms; the
    # small change of B with v is neglected). Every line with >= 1 % of the peak population at 100 K
    # must lie inside [extent_lo, extent_hi]; CO2 (spinless 16O) has only even J.
    band = cat.get_band(band_id)
    b_cm = (cat.get_species(band.species).rot_b / const.c).to_value(1 / u.cm)
    kt_cm = (const.k_B * 100 * u.K / (const.h * const.c)).to_value(1 / u.cm)
    j = np.arange(0, 200, j_step)
    pop = (2 * j + 1) * np.exp(-b_cm * j * (j + 1) / kt_cm)
    j = j[pop >= 0.01 * pop.max()]
    nu0 = 1e4 / band.wavelength.to_value(u.um)
    lines_um = 1e4 / np.concatenate([nu0 + 2 * b_cm * (j + 1), nu0 - 2 * b_cm * j[j > 0]])
    assert band.extent_lo.to_value(u.um) <= lines_um.min()
    assert lines_um.max() <= band.extent_hi.to_value(u.um)
    # and the extent is not much wider than the branches (within 0.01 um)
    assert lines_um.min() - band.extent_lo.to_value(u.um) < 0.01
    assert band.extent_hi.to_value(u.um) - lines_um.max() < 0.01


def test_a_misspelt_species_gets_a_suggestion():
    from pipeline.catalogue.entries import load_catalogue
    from pipeline.errors import CatalogueError

    cat = load_catalogue()
    for typed, meant in (("hcn", "HCN"), ("C0", "CO"), ("CH3OHH", "CH3OH")):
        with pytest.raises(CatalogueError, match=rf"species '{typed}' is not in the catalogue .*did you mean '{meant}'"):
            cat.get_species(typed)
    with pytest.raises(CatalogueError, match=r"species 'xyz' is not in the catalogue [^(]*; expected one of"):
        cat.get_species("xyz")


def test_a_distributed_source_scale_must_be_a_positive_length(tmp_path, cat):
    assert cat.get_species("H2CO").distributed_scale.to_value(u.km) == 5000.0
    assert cat.get_species("HCN").distributed_scale is None            # nan: no distributed source
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    species["distributed_scale_km"][list(species["species"]).index("H2CO")] = -5000.0 * u.km
    with pytest.raises(CatalogueError, match=r"species 'H2CO' has distributed_scale_km = -5000; expected a "
                                             r"positive scale length at 1 au, or nan"):
        load_catalogue(_write(species, tmp_path / "s.ecsv"))
