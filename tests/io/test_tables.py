"""pipeline.io.tables.read_table with its cache of parsed tables: the same table as astropy's own ECSV reader
(the reference), reparsed when the file's bytes change, a damaged cache entry never trusted, and nothing in it
evaluated (numpy .npz read without pickle, JSON)."""

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

from pipeline.io import tables
from pipeline.io.tables import read_table, table_cache


def _write(path, r_h: float) -> None:
    table = QTable({"cube_id": ["c1"], "r_h": [r_h] * u.au, "time_mid": Time(["2031-03-10T04:00:00"], scale="utc"),
                    "n": [3]})
    table["r_h"].info.description = "heliocentric distance"
    table.meta["provenance"] = {"stage": "geometry"}
    table.write(path, format="ascii.ecsv", overwrite=True)


def _same(a: QTable, b: QTable) -> None:
    assert a.colnames == b.colnames and a.meta == b.meta
    assert [a[c].info.description for c in a.colnames] == [b[c].info.description for c in b.colnames]
    assert a["cube_id"][0] == b["cube_id"][0] and a["r_h"].unit == b["r_h"].unit
    assert np.array_equal(a["r_h"].value, b["r_h"].value)
    assert a["time_mid"][0].isot == b["time_mid"][0].isot and a["time_mid"].scale == b["time_mid"].scale


def test_the_cached_table_is_astropys_and_follows_the_file(tmp_path):
    path = tmp_path / "g.ecsv"
    cache = table_cache(tmp_path / "out")
    _write(path, 1.25)
    reference = QTable.read(path, format="ascii.ecsv")
    first = read_table(path, cache)
    assert len(list(cache.glob("*.npz"))) == 1
    second = read_table(path, cache)
    _same(first, reference)
    _same(second, reference)
    second["r_h"][0] = 9 * u.au                    # a copy per call: the kept table is not changed through it
    _same(read_table(path, cache), reference)
    _write(path, 1.5)                              # new bytes: parsed again
    assert read_table(path, cache)["r_h"][0] == 1.5 * u.au
    assert len(list(cache.glob("*.npz"))) == 2


def test_a_damaged_entry_is_parsed_again(tmp_path):
    path = tmp_path / "g.ecsv"
    cache = table_cache(tmp_path / "out")
    _write(path, 1.25)
    read_table(path, cache)
    (entry,) = cache.glob("*.npz")
    entry.write_bytes(b"not an archive")
    tables._READ.clear()                # as in a new process: only the folder's entry is left, and it is damaged
    _same(read_table(path, cache), QTable.read(path, format="ascii.ecsv"))


def test_a_table_read_again_in_the_same_process_is_a_copy(tmp_path):
    # the in-process memory of read_table hands out copies: changing what one step read changes nothing for the next
    path = tmp_path / "g.ecsv"
    cache = table_cache(tmp_path / "out")
    _write(path, 1.25)
    first = read_table(path, cache)
    first["r_h"][0] = 9 * u.au
    first.meta["changed"] = True
    again = read_table(path, cache)
    _same(again, QTable.read(path, format="ascii.ecsv"))
    assert again["r_h"][0] == 1.25 * u.au and "changed" not in again.meta
