"""The built-in catalogue against the CDMS and JPL catalogue files that astroquery ships (reference_files.py).

Each check names its file and entry tag. Partition functions: every species with a CDMS or JPL entry
within 2 % of that entry's table at 9.375, 18.75, 37.5, 75 and 150 K, in the same nuclear-spin
convention as the line degeneracies (the tabulated ones digit for digit). Lines: CO against CDMS
028503 and JPL 028001; the spin weights of H2O against the g_u of JPL 018003.
"""

import re

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference_files import (cdms_log_q, einstein_a_from_intensity, jpl_log_q, read_cat, read_cdms_form)

from pipeline.catalogue.entries import load_catalogue

CAT = load_catalogue()
#: the catalogue entry each species' g_u and Q follow (species.ecsv partition_ref)
ENTRY = {"CO": ("CDMS", 28503), "HCN": ("CDMS", 27501), "HNC": ("CDMS", 27502), "CS": ("CDMS", 44501),
         "SO": ("CDMS", 48501), "H2CO": ("CDMS", 30501), "H2S": ("CDMS", 34502), "CH3CN": ("CDMS", 41505),
         "CH3OH": ("CDMS", 32504), "H2O": ("JPL", 18003)}
TEMPERATURES = (9.375, 18.75, 37.5, 75.0, 150.0)
CDMS_CO_FORM = "linelists/cdms/tests/data/028503 CO, v=0.data"
JPL_CO = "jplspec/tests/data/CO.data"
JPL_MULTI = "jplspec/tests/data/multi.data"


def entry_log_q(name: str) -> dict[float, float]:
    source, tag = ENTRY[name]
    return cdms_log_q(tag) if source == "CDMS" else jpl_log_q(tag)


# ----------------------------------------------------------------------------- partition functions
@pytest.mark.parametrize("t_k", TEMPERATURES)
@pytest.mark.parametrize("name", sorted(ENTRY))
def test_partition_function_within_two_percent_of_its_catalogue_entry(name, t_k):
    # CDMS partition-function table (astroquery/linelists/cdms/data/partfunc.cat) or JPL catalogue directory
    # (astroquery/jplspec/data/catdir.cat), the entry named in ENTRY, same spin convention as the lines' g_u
    expected = 10 ** entry_log_q(name)[t_k]
    assert_allclose(CAT.get_species(name).partition_function(t_k * u.K), expected, rtol=0.02)


def test_only_co2_and_cs2_have_no_catalogue_entry():
    # CO2 and CS2 have no dipole moment, hence no rotational lines and no CDMS or JPL entry: their Q keeps the
    # closed form (tested against a direct sum over even J in test_catalogue.py)
    assert set(CAT.species) - set(ENTRY) == {"CO2", "CS2"}
    for name in ("CO2", "CS2"):
        assert CAT.lines_of(name) == () and CAT.get_species(name).partition == "linear"


@pytest.mark.parametrize("name", sorted(n for n in ENTRY if CAT.get_species(n).partition == "table"))
def test_tabulated_values_are_the_entry_digit_for_digit(name):
    # partition.ecsv copies every tabulated temperature of the entry (partfunc.cat / catdir.cat) unchanged,
    # names its tag, and the interpolation returns those values at the tabulated temperatures
    source, tag = ENTRY[name]
    table = CAT.get_species(name).partition_table
    reference = entry_log_q(name)
    assert dict(zip(table.temperature, table.log10_q)) == reference
    assert f"{source} {tag:06d}" in table.source
    temps = np.array(sorted(reference))
    assert_allclose(CAT.get_species(name).partition_function(temps * u.K),
                    10 ** np.array([reference[t] for t in temps]), rtol=1e-12)


@pytest.mark.parametrize("t_k", TEMPERATURES)
@pytest.mark.parametrize("cdms, jpl, factor", [
    (32504, 32003, 4.0),   # CH3OH: CDMS counts g_I = 4 for A and E levels, JPL 032003 g_I = 1
    (30501, 30004, 1.0),   # H2CO
    (48501, 48001, 1.0),   # SO
    (41505, 41001, 1.0),   # CH3CN
    (27501, 27001, 1.0),   # HCN (both with the 14N factor 3)
    (28503, 28001, 1.0),   # CO
    (44501, 44001, 1.0),   # CS
])
def test_cdms_and_jpl_tables_differ_only_by_the_stated_spin_factor(cdms, jpl, factor, t_k):
    # CDMS partfunc.cat against JPL catdir.cat: the same molecule in the two catalogues, 2 %
    assert_allclose(10 ** cdms_log_q(cdms)[t_k], factor * 10 ** jpl_log_q(jpl)[t_k], rtol=0.02)


def test_methanol_convention_is_cdms_032504():
    # CDMS 032504 (partfunc.cat) is the entry whose g_u = 4(2J+1) the lines carry: Q(9.375 K) = 10^1.8931,
    # four times JPL 032003 (catdir.cat, 10^1.2910), to 0.1 %
    sp = CAT.get_species("CH3OH")
    assert_allclose(sp.partition_function(9.375 * u.K), 10 ** cdms_log_q(32504)[9.375], rtol=1e-12)
    assert_allclose(sp.partition_function(9.375 * u.K) / 10 ** jpl_log_q(32003)[9.375], 4.0, rtol=1e-3)
    for ln in CAT.lines_of("CH3OH"):
        j_up = int(re.match(r"(\d+)\(", ln.transition).group(1))
        assert ln.g_up == 4 * (2 * j_up + 1), ln.line_id


# ----------------------------------------------------------------------------- lines
CO_LINES = ["CO_115271", "CO_230538", "CO_345796", "CO_461041", "CO_576268", "CO_691473"]


@pytest.mark.parametrize("line_id", CO_LINES)
def test_co_lines_against_jpl_028001(line_id):
    # JPL 028001 CO (astroquery/jplspec/tests/data/CO.data): frequency, E_up = E_low + h nu (hc/k =
    # 1.4387769 cm K), g_up, and A from the 300 K intensity with Q(300 K) of catdir.cat (CDMS documentation)
    ln = CAT.get_line(line_id)
    row = min(read_cat(JPL_CO), key=lambda r: abs(r["freq"] - ln.freq.to_value(u.MHz)))
    assert row["tag"] == 28001
    assert_allclose(ln.freq.to_value(u.MHz), row["freq"], atol=1e-3)          # 1 kHz
    e_up = (row["elo"] + row["freq"] / 29979.2458) * 1.4387769
    assert_allclose(ln.e_up.to_value(u.K), e_up, atol=1e-3)
    assert ln.g_up == row["gup"]
    a_ref = einstein_a_from_intensity(row["freq"], row["lgint"], row["elo"], row["gup"],
                                      10 ** jpl_log_q(28001)[300.0])
    assert_allclose(ln.a_ul.to_value(1 / u.s), a_ref, rtol=1e-3)


@pytest.mark.parametrize("line_id", CO_LINES)
def test_co_lines_against_cdms_028503(line_id):
    # CDMS 028503 CO v=0, search-form output (astroquery/linelists/cdms/tests/data/028503 CO, v=0.data):
    # frequency, E_up, g_up and log10 A
    ln = CAT.get_line(line_id)
    row = min(read_cdms_form(CDMS_CO_FORM), key=lambda r: abs(r["freq"] - ln.freq.to_value(u.MHz)))
    assert row["tag"] == 28503
    assert_allclose(ln.freq.to_value(u.MHz), row["freq"], atol=1e-3)
    assert_allclose(ln.e_up.to_value(u.K), (row["elo"] + row["freq"] / 29979.2458) * 1.4387769, atol=1e-3)
    assert ln.g_up == row["gup"]
    assert_allclose(ln.a_ul.to_value(1 / u.s), 10 ** row["log_a"], rtol=1e-3)


def test_h2o_spin_weights_are_those_of_jpl_018003():
    # every H2O line of JPL 018003 in astroquery/jplspec/tests/data/multi.data (quantum-number format 1404:
    # J, Ka, Kc, v) has g_up = 3(2J+1) for ortho (Ka + Kc odd) and 2J+1 for para upper levels: the weights
    # species.ecsv states for H2O and that its partition function (JPL 018003, catdir.cat) includes
    rows = [r for r in read_cat(JPL_MULTI) if r["tag"] == 18003]
    assert len(rows) > 30
    for r in rows:
        j, ka, kc = (int(r["qn"][i:i + 2]) for i in (0, 2, 4))
        weight = 3 if (ka + kc) % 2 else 1
        assert r["gup"] == weight * (2 * j + 1), r
    assert "ortho levels (Ka+Kc odd) weight 3, para 1" in _partition_ref("H2O")


def _partition_ref(name: str) -> str:
    from astropy.table import QTable

    from pipeline.catalogue.entries import DEFAULT_SPECIES_FILE

    table = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    return str(table[list(table["species"]).index(name)]["partition_ref"])
