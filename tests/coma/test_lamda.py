"""Tests of pipeline.coma.lamda: the LAMDA-format reader and the linear-rotor builder.

The reference file is the LAMDA CO file (Schöier et al. 2005, A&A 432, 369; rates with para- and
ortho-H2 of Yang et al. 2010) that astroquery ships for its own tests,
``astroquery/lamda/tests/data/co.txt`` (astroquery is a test dependency; the file is read in place,
not copied into the repository: LAMDA states no redistribution licence). Line values are checked
against the CDMS entry 028503 as held in the catalogue (pipeline/catalogue/data/lines.ecsv, itself
checked against astroquery's copy of that entry in tests/catalogue).
"""

import importlib.util
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.lamda import (
    HC_OVER_K,
    ROTOR_CONSTANTS,
    MolecularData,
    linear_rotor,
    read_lamda,
    species_rotor,
)
from pipeline.errors import CatalogueError

CO_B = 57635.968 * u.MHz  # CDMS 028503 (from memory; the catalogue's species.ecsv holds the same value)


def _astroquery_file(relative: str) -> Path:
    spec = importlib.util.find_spec("astroquery")
    if spec is None or spec.origin is None:
        pytest.fail("astroquery is a test dependency (pip install -e '.[test]'); its LAMDA test file is needed")
    path = Path(spec.origin).parent / relative
    assert path.is_file(), path
    return path


@pytest.fixture(scope="module")
def co_file() -> Path:
    return _astroquery_file("lamda/tests/data/co.txt")


@pytest.fixture(scope="module")
def co(co_file) -> MolecularData:
    return read_lamda(co_file)


# ----------------------------------------------------------------------------- reader
def test_reads_the_levels_of_the_co_file(co):
    assert co.name == "CO"
    assert co.n_levels == 41
    assert co.mass.to_value(u.u) == 28.0
    # g_J = 2J+1 for CO (no nuclear spin; CDMS 028503, as the catalogue's g_up)
    assert_allclose(co.weight, 2 * np.arange(41) + 1)
    assert_allclose(co.j, np.arange(41))
    # the file's level 2 (J = 1) lies at 3.845033413 cm^-1, its level 41 (J = 40) at 3136.509541175 cm^-1
    assert co.energy.unit == u.cm**-1
    assert co.energy[1].value == 3.845033413
    assert co.energy[40].value == 3136.509541175


def test_co_lines_match_the_cdms_entry():
    co = read_lamda(_astroquery_file("lamda/tests/data/co.txt"))
    cat = load_catalogue()
    for line in cat.lines_of("CO"):
        j_up = int(line.transition.split("=")[1].split("-")[0])
        k = co.line_index(co.level_of(j_up), co.level_of(j_up - 1))
        # CDMS 028503 via lines.ecsv: frequency to 1 kHz, A to the 4 digits both print, E_up to 0.001 K
        assert_allclose(co.freq[k].to_value(u.GHz), line.freq.to_value(u.GHz), atol=1e-6)
        assert_allclose(co.a_ul[k].to_value(1 / u.s), line.a_ul.to_value(1 / u.s), rtol=5e-4)
        assert_allclose(co.energy_k[co.level_of(j_up)].to_value(u.K), line.e_up.to_value(u.K), atol=1e-3)
        assert co.weight[co.level_of(j_up)] == line.g_up
    # CO J=1-0: 115.2712018 GHz, A = 7.203e-8 s^-1 (CDMS 028503, from memory)
    k = co.line_index(1, 0)
    assert co.freq[k].to_value(u.GHz) == 115.2712018
    assert co.a_ul[k].to_value(1 / u.s) == 7.203e-8


def test_energy_in_kelvin_uses_the_second_radiation_constant(co):
    # hc/k = 1.438777 K cm (CODATA 2018, from memory) and the file's own E_u column (K, two decimals); the
    # file's value at J = 40 is 1.5e-5 below E/hc times today's hc/k (measured: an older constant, or rounding)
    assert_allclose(HC_OVER_K, 1.438777, rtol=1e-6)
    assert_allclose(co.energy_k[1].to_value(u.K), 5.53, atol=0.005)
    assert_allclose(co.energy_k[40].to_value(u.K), 4512.67, rtol=2e-5)


def test_reads_the_collision_tables(co):
    assert [t.partner_id for t in co.collisions] == [2, 3]
    para = co.collision_table(2)
    assert para.label.startswith("CO-pH2")
    assert co.collision_table("co-oh2").partner_id == 3
    assert para.temperature.unit == u.K
    assert_allclose(para.temperature.value[:3], [2.0, 5.0, 10.0])
    assert para.rates.shape == (40, 25)
    # the file's first row (2 -> 1) at 2 K and its row 40 (10 -> 4) at 2 K
    assert (para.upper[0], para.lower[0]) == (1, 0)
    assert para.rates[0, 0].to_value(u.cm**3 / u.s) == 2.954e-11
    assert (para.upper[39], para.lower[39]) == (9, 3)
    # linear interpolation halfway between the 30 K (3.257e-11) and 40 K (3.294e-11) columns of row 1
    assert_allclose(para.downward(35 * u.K)[0].to_value(u.cm**3 / u.s), 0.5 * (3.257e-11 + 3.294e-11), rtol=1e-12)
    with pytest.raises(CatalogueError, match="covers 2 to 3000 K"):
        para.downward(1.0 * u.K)
    with pytest.raises(CatalogueError, match="no collision table for partner 4"):
        co.collision_table(4)


def test_equal_contents_hash_alike(co, co_file):
    again = read_lamda(co_file)
    assert again == co and hash(again) == hash(co)
    small = co.truncated(10)
    assert small != co
    assert small.n_levels == 10 and len(small.a_ul) == 9
    # the file tabulates 40 pairs, up to its level 10 (0-based 9): all of them lie within the lowest 10 levels
    assert small.collisions[0].rates.shape == (40, 25)
    assert co.truncated(5).collisions[0].rates.shape == (10, 25)   # the 10 pairs among 5 levels
    assert co.truncated(41) is co
    with pytest.raises(CatalogueError, match="asked for 50"):
        co.truncated(50)


def test_lookups_refuse_what_is_not_there(co):
    with pytest.raises(CatalogueError, match="J = 99"):
        co.level_of(99)
    with pytest.raises(CatalogueError, match="no radiative transition from level 3"):
        co.line_index(3, 0)


# ----------------------------------------------------------------------------- malformed files
def _write(tmp_path, text):
    path = tmp_path / "mol.dat"
    path.write_text(text)
    return path


GOOD = """!MOLECULE
XY
!MOLECULAR WEIGHT
30.0
!NUMBER OF ENERGY LEVELS
3
!LEVEL + ENERGIES(cm^-1) + WEIGHT + J
1  0.0  1.0  0
2  2.0  3.0  1
3  6.0  5.0  2
!NUMBER OF RADIATIVE TRANSITIONS
2
!TRANS + UP + LOW + EINSTEINA(s^-1) + FREQ(GHz) + E_u(K)
1  2  1  1.0e-6  59.958  2.88
2  3  2  1.0e-5  119.917  8.63
"""


def test_a_file_without_collisions_is_read(tmp_path):
    mol = read_lamda(_write(tmp_path, GOOD))
    assert mol.n_levels == 3 and mol.collisions == ()
    assert list(mol.upper) == [1, 2] and list(mol.lower) == [0, 1]


@pytest.mark.parametrize("old, new, match", [
    ("2  2.0  3.0  1", "2  two  3.0  1", r"line 9: found '2 two 3.0 1', expected level 2"),
    ("2  2.0  3.0  1", "3  2.0  3.0  1", r"line 9: found '3 2.0 3.0 1', expected level index 2"),
    ("3\n!LEVEL", "x\n!LEVEL", r"line 6: found 'x', expected the number of energy levels"),
    ("1  2  1  1.0e-6", "1  1  2  1.0e-6", r"line 14: .*expected upper and lower levels between 1 and 3"),
    ("2  3  2  1.0e-5  119.917  8.63\n", "", r"ends after line 14; expected transition 2"),
    ("30.0", "heavy", r"line 4: found 'heavy', expected the molecular weight"),
])
def test_malformed_files_are_refused_with_the_line(tmp_path, old, new, match):
    path = _write(tmp_path, GOOD.replace(old, new))
    with pytest.raises(CatalogueError, match=match) as err:
        read_lamda(path)
    assert str(path) in str(err.value)


def test_malformed_collision_table(tmp_path):
    text = GOOD + """!NUMBER OF COLL PARTNERS
1
!COLLISIONS BETWEEN
2 XY-pH2
!NUMBER OF COLL TRANS
1
!NUMBER OF COLL TEMPS
2
!COLL TEMPS
10.0 5.0
!TRANS+ UP+ LOW+ COLLRATES(cm^3 s^-1)
1 2 1 1e-11 2e-11
"""
    with pytest.raises(CatalogueError, match=r"line 25: found '10.0 5.0', expected 2 positive ascending"):
        read_lamda(_write(tmp_path, text))
    mol = read_lamda(_write(tmp_path, text.replace("10.0 5.0", "5.0 10.0")))
    assert_allclose(mol.collision_table(2).downward(7.5 * u.K).value, [1.5e-11])


def test_a_missing_file_is_refused(tmp_path):
    with pytest.raises(CatalogueError, match="does not exist"):
        read_lamda(tmp_path / "none.dat")


# ----------------------------------------------------------------------------- linear rotor
def test_linear_rotor_co_against_the_lamda_file(co):
    const_co = ROTOR_CONSTANTS["CO"]
    rotor = linear_rotor("CO", CO_B, const_co.dipole, 40, d=const_co.d, mass=28.0 * u.u)
    assert rotor.n_levels == 41
    assert_allclose(rotor.weight, co.weight)
    # frequencies and energies from B and D alone (no higher distortion term): within 2e-7 up to J = 10,
    # 3e-5 at J = 40 (measured: 2.3e-5, where the sextic term H J^3 (J+1)^3 starts to matter)
    assert_allclose(rotor.freq[:10].to_value(u.GHz), co.freq[:10].to_value(u.GHz), rtol=2e-7)
    assert_allclose(rotor.freq.to_value(u.GHz), co.freq.to_value(u.GHz), rtol=3e-5)
    assert_allclose(rotor.energy[1:].to_value(u.cm**-1), co.energy[1:].to_value(u.cm**-1), rtol=1e-5)
    # A from the rigid dipole: 0.03 % at J = 1 (measured 0.028 %); the file's A (CDMS) include the
    # vibration-rotation change of the dipole moment with J, which grows to 2.1 % at J = 10 (measured)
    a_ratio = rotor.a_ul.to_value(1 / u.s) / co.a_ul.to_value(1 / u.s)
    assert abs(a_ratio[0] - 1) < 5e-4
    assert np.all(np.abs(a_ratio[:10] - 1) < 0.025)


def test_linear_rotor_a_coefficient_closed_form():
    # A_10 = 64 pi^4 nu^3 mu^2 / (9 h c^3) for a rigid rotor with D = 0 at nu = 2B, written here in SI:
    # A = 16 pi^3 nu^3 mu^2 J / (3 eps0 h c^3 (2J+1)) (the SI form of the same expression)
    b, mu = 50.0 * u.GHz, 1.5 * u.D
    rotor = linear_rotor("XY", b, mu, 3)
    nu = 2 * b * np.arange(1, 4)
    j = np.arange(1, 4)
    mu_si = (mu.to_value(u.D) * 1e-21 / const.c.value) * u.C * u.m
    expected = (16 * np.pi**3 * nu**3 * mu_si**2 * j / (3 * const.eps0 * const.h * const.c**3 * (2 * j + 1)))
    assert_allclose(rotor.a_ul.to_value(1 / u.s), expected.to_value(1 / u.s), rtol=1e-9)
    assert_allclose(rotor.freq.to_value(u.GHz), nu.to_value(u.GHz), rtol=1e-12)


def test_species_rotor_matches_the_catalogue_lines():
    cat = load_catalogue()
    # A: CO within 2.5 % (the CDMS values include the change of the dipole with J, see above); HCN, CS and HNC
    # within 2e-3 (measured: 1e-4 or better)
    for name, rtol in (("CO", 0.025), ("HCN", 2e-3), ("CS", 2e-3), ("HNC", 2e-3)):
        rotor = species_rotor(cat.get_species(name), 8)
        for line in cat.lines_of(name):
            j_up = int(line.transition.split("=")[1].split("-")[0])
            if j_up > 8:
                continue
            k = rotor.line_index(rotor.level_of(j_up), rotor.level_of(j_up - 1))
            # CDMS 028503, 027501, 044501 and 027502 via lines.ecsv (HCN: g_up = 3(2J+1) with the 14N spin factor)
            assert rotor.weight[rotor.level_of(j_up)] == line.g_up
            assert_allclose(rotor.freq[k].to_value(u.GHz), line.freq.to_value(u.GHz), rtol=2e-6)
            assert_allclose(rotor.a_ul[k].to_value(1 / u.s), line.a_ul.to_value(1 / u.s), rtol=rtol)
            assert_allclose(rotor.energy_k[rotor.level_of(j_up)].to_value(u.K), line.e_up.to_value(u.K), rtol=2e-4)


def test_species_rotor_refuses_non_linear_or_unknown_species():
    cat = load_catalogue()
    with pytest.raises(CatalogueError, match="expected a linear rotor"):
        species_rotor(cat.get_species("H2O"), 5)
    with pytest.raises(CatalogueError, match="no entry in ROTOR_CONSTANTS"):
        species_rotor(cat.get_species("CO2"), 5)


def test_linear_rotor_refuses_bad_arguments():
    with pytest.raises(CatalogueError, match="j_max must be an integer >= 1"):
        linear_rotor("XY", 50 * u.GHz, 1 * u.D, 0)
    with pytest.raises(CatalogueError, match="levels stop rising"):
        linear_rotor("XY", 50 * u.GHz, 1 * u.D, 40, d=1 * u.GHz)
    with pytest.raises(CatalogueError, match="'dipole' must have units"):
        linear_rotor("XY", 50 * u.GHz, 1 * u.s, 3)


def test_only_plain_integer_labels_make_a_j_ladder():
    # LAMDA level labels (the format's fifth column): plain integers are J; asymmetric-top labels such as 1_0_1, or
    # anything int() would not read as a plain integer (a superscript digit), are not a ladder and never raise
    from pipeline.coma.lamda import _integer_labels

    assert _integer_labels(["0", " 1", "+2", "10"]).tolist() == [0, 1, 2, 10]
    for labels in (["0", "1_0_1"], ["0", "²"], ["0", "1.5"], ["0", ""]):
        assert _integer_labels(labels) is None, labels
