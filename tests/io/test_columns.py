"""The column registry (pipeline.io.columns) and what write_table makes of it: descriptions, one unit per name."""

from __future__ import annotations

import json
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, Table
from astropy.time import Time

from pipeline.io.atomic import write_fits, write_table
from pipeline.io.columns import COLUMNS, TABLE_COLUMNS, TABLE_KINDS, column_spec, described, table_kind
from pipeline.io.products import BandMeasurements
from pipeline.io.tables import cell_float, read_table, table_as_json
from pipeline.settings import Settings, validate_config


def test_every_entry_has_a_parsable_unit_and_a_one_line_description():
    for kind, entries in [(None, COLUMNS), *TABLE_COLUMNS.items()]:
        assert kind is None or kind in TABLE_KINDS
        for name, (unit, text) in entries.items():
            assert text.strip() and "\n" not in text and len(text) < 160, (kind, name)
            if unit:
                u.Unit(unit)                         # raises on a unit astropy cannot read back from the ECSV


def test_a_name_ending_in_its_unit_has_that_unit():
    for kind, entries in [(None, COLUMNS), *TABLE_COLUMNS.items()]:
        for name, (unit, _) in entries.items():
            if name.endswith("_K"):
                assert unit == "K", (kind, name)
            if name.endswith("_km"):
                assert unit == "km", (kind, name)


def test_table_kind_from_the_file_or_its_folder():
    assert table_kind("results/limits.ecsv") == "limits"
    assert table_kind("results/limits/CH3OH.ecsv") == "limits"
    assert table_kind("results/geometry/e1_co.ecsv") == "geometry"
    assert table_kind("results/injection/H2O.ecsv") == "injection"
    assert table_kind("results/water_inferred.ecsv") == "water_inferred"
    assert table_kind("elsewhere/notes.ecsv") is None


def test_overrides_apply_to_their_table_only():
    assert column_spec("slope", "activity")[0] is None                  # 'fixed' or 'fitted'
    assert u.Unit(column_spec("slope", "dust")[0]) == u.percent / (100 * u.nm)
    assert "planned" in column_spec("r_h", "forecast")[1]
    assert column_spec("r_h", "geometry") == COLUMNS["r_h"]


def test_write_table_describes_and_gives_units_without_touching_the_table(tmp_path):
    table = QTable({"species": ["HCN", "CO"], "aperture_km": [1.0e6, 3.0e6] * u.m, "t_kin_K": [20.0, 40.0],
                    "r_h": [1.2, 1.3], "n_lines": [2, 1], "detected": [True, False], "extra_column": [1.0, 2.0]})
    path = tmp_path / "exclusion.ecsv"
    write_table(table, path)
    assert getattr(table["t_kin_K"], "unit", None) is None
    assert table["aperture_km"].unit == u.m and table["species"].info.description is None
    back = read_table(path)
    assert back["t_kin_K"].unit == u.K and back["r_h"].unit == u.au
    np.testing.assert_allclose(back["aperture_km"].to_value(u.km), [1000.0, 3000.0])
    assert back["aperture_km"].unit == u.km                          # converted to the registry's unit
    for name in ("species", "aperture_km", "t_kin_K", "r_h", "n_lines", "detected"):
        assert back[name].info.description == column_spec(name, "exclusion")[1]
    assert back["t_kin_K"].info.description.startswith("temperature of the per-epoch Q")     # the override
    assert back["extra_column"].info.description is None and getattr(back["extra_column"], "unit", None) is None


def test_a_unit_of_another_kind_is_left_for_the_test_to_name(tmp_path):
    table = QTable({"r_h": [1.0, 2.0] * u.s})
    write_table(table, tmp_path / "forecast.ecsv")
    assert read_table(tmp_path / "forecast.ecsv")["r_h"].unit == u.s


def test_masked_cells_keep_their_mask(tmp_path):
    table = Table({"q": np.ma.MaskedArray([1.0e26, 2.0e26], mask=[False, True])})
    back = described(table, "limits")
    assert back["q"].unit == 1 / u.s and bool(back["q"].mask[1]) and not bool(back["q"].mask[0])


def test_written_bytes_do_not_depend_on_the_run(tmp_path):
    table = QTable({"epoch": ["e1", "all"], "t_kin_K": [40.0, 40.0], "q": [1.0, 2.0] / u.s})
    write_table(table, tmp_path / "a" / "limits.ecsv")
    write_table(table, tmp_path / "b" / "limits.ecsv")
    assert (tmp_path / "a" / "limits.ecsv").read_bytes() == (tmp_path / "b" / "limits.ecsv").read_bytes()


def test_cell_float_with_a_unit():
    assert cell_float(40.0 * u.K, u.K) == 40.0
    assert cell_float(40.0, u.K) == 40.0                # a table written before the column had its unit
    assert cell_float(2 * u.km, "m") == 2000.0
    assert np.isnan(cell_float(np.ma.masked, u.K))
    with pytest.raises(u.UnitConversionError):
        cell_float(3 * u.s, u.K)


def test_json_of_a_table_with_a_masked_time_and_descriptions():
    mid = Time([60000.5, 60000.5], format="mjd", scale="utc")
    mid.format = "isot"
    mid[1] = np.ma.masked
    table = described(QTable({"epoch": ["e1", "all"], "time_mid": mid, "r_h": [1.5, np.nan] * u.au}), "limits")
    out = json.loads(json.dumps(table_as_json(table)))
    assert out["rows"][0]["time_mid"] == "2023-02-25T12:00:00.000"    # MJD 60000 is 2023-02-25 (astropy.time)
    assert out["rows"][1]["time_mid"] is None and out["rows"][1]["r_h"] is None
    assert out["units"]["r_h"] == "AU" and "epoch's cubes" in out["descriptions"]["r_h"]


def test_json_of_a_table_by_columns_is_its_cells_one_by_one():
    # table_as_json converts whole columns; the cells must be those the one-cell conversion gives, of the same
    # Python types (JSON's own types: float, int, bool, str, None)
    from astropy.table import MaskedColumn

    from pipeline.io.tables import _json_cell

    mid = Time([60000.25, 60001.5, 60002.0], format="mjd", scale="utc")
    mid.format = "isot"
    mid[2] = np.ma.masked
    table = QTable({"epoch": ["e1", "e2", "all"], "time_mid": mid, "q": [1.5e26, np.nan, np.inf] / u.s,
                    "n": np.array([3, 0, 7], dtype=np.int32), "detected": [True, False, True],
                    "snr": MaskedColumn([2.5, 3.0, 1.0], mask=[False, True, False])})
    by_cells = [{c: _json_cell(row[c]) for c in table.colnames} for row in table]
    rows = table_as_json(table)["rows"]
    for got, want in zip(rows, by_cells):
        assert got == want and [type(v) for v in got.values()] == [type(v) for v in want.values()]
    assert rows[1]["q"] is None and rows[2]["q"] is None and rows[1]["snr"] is None and rows[2]["time_mid"] is None
    assert rows[0]["time_mid"] == "2023-02-25T06:00:00.000"     # MJD 60000 is 2023-02-25 (astropy.time)


def _bands_file(path, cube_id, afrho):
    empty = Table(names=["cube_id"], dtype=[str])
    dust = Table({"cube_id": [cube_id], "epoch": ["e1"], "aperture_km": [1000.0], "wavelength": [2.5],
                  "flux_density": [1e-15], "flux_density_err": [1e-17], "afrho": [afrho], "afrho_err": [0.3],
                  "r_h": [1.4], "delta": [0.9], "phase": [30.0]})
    measured = BandMeasurements(
        cube_id=cube_id, epoch="e1", r_h_au=1.4, delta_au=0.9, resolving_power=550.0, resolving_power_source="test",
        doppler=1.0, centre=(10.0, 11.0), pixel_scale_arcsec=0.2, sigma_source="test", band_ids=(),
        spectra=np.ones((1, 5)), sigma=np.ones((1, 5)), continuum=np.ones((0, 1, 5)),
        wave=Table({"observed": np.linspace(2.4, 2.6, 5) * u.um, "rest": np.linspace(2.4, 2.6, 5) * u.um}),
        apertures=Table({"radius_km": [1000.0] * u.km, "radius_pix": [5.0], "area_pix": [78.5]}),
        bands=empty, dust=dust, colour=empty)
    write_fits(measured.to_fits(), path)       # with CHECKSUM/DATASUM in every HDU, as the bands stage writes


def test_dust_stage_stacks_fits_tables_without_merging_their_fits_cards(tmp_path):
    """The cause of the dust step's MergeConflictWarnings: each bands file's DUST table, read from FITS, carried its
    HDU's CHECKSUM, DATASUM and EXTNAME as metadata, and stacking two of them merged differing checksums (and
    wrote them into afrho.ecsv). The products' reader drops them; nothing warns and no FITS card reaches the ECSV."""
    from pipeline.workflow import dust

    paths = [tmp_path / "a.fits", tmp_path / "b.fits"]
    _bands_file(paths[0], "e1_short", 40.0)
    _bands_file(paths[1], "e1_long", 41.0)
    settings = Settings.from_config(validate_config({"target": {"ephemeris": "x.ecsv"}, "cubes": [{"path": "x.fits"}],
                                                     "species": ["H2O"]}))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        dust.run([str(p) for p in paths], settings, str(tmp_path / "afrho.ecsv"), str(tmp_path / "dust.ecsv"))
    for name in ("afrho", "dust"):
        table = read_table(tmp_path / f"{name}.ecsv")
        assert not [k for k in table.meta if str(k).isupper()], table.meta.keys()
        assert all(table[c].info.description for c in table.colnames)
    assert read_table(tmp_path / "afrho.ecsv")["flux_density"].unit == u.W / u.m**2 / u.um
