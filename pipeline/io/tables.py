"""Tables as plain JSON: the rows of an astropy table with the unit of each column."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

__all__ = ["table_as_json", "cell_float", "read_table"]

def read_table(path: str | Path, cache: str | Path | None = None) -> QTable:
    """An output table (ECSV) as a QTable: the one reader of the pipeline's own products.

    With ``cache`` (a folder), the parsed table is kept there under the SHA-256 of the file's bytes and read back
    from it while the file is unchanged: parsing an ECSV header is pure-Python YAML (~50 ms for a small table),
    loading the kept table ~1 ms, which matters to the steps that read one small table per cube of a long
    campaign. The table is the same either way (a copy per call).
    """
    if cache is None:
        return QTable.read(path, format="ascii.ecsv")
    import hashlib
    import pickle

    from pipeline.io.atomic import atomic_path

    data = Path(path).read_bytes()
    kept = Path(cache) / f"{hashlib.sha256(data).hexdigest()}.pickle"
    try:
        return pickle.loads(kept.read_bytes())
    except (OSError, pickle.UnpicklingError, EOFError, AttributeError, ImportError):
        pass
    table = QTable.read(path, format="ascii.ecsv")
    kept.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(kept) as tmp:
        tmp.write_bytes(pickle.dumps(table, protocol=5))
    return table


def table_cache(outdir: str | Path) -> Path:
    """The folder of :func:`read_table`'s parsed tables below a run's output folder."""
    return Path(outdir) / ".cache" / "tables"


def cell_float(value, unit: str | u.UnitBase | None = None) -> float:
    """A table cell as a float; a masked cell (a NaN written to a FITS table reads back masked) as NaN.

    With ``unit``, the cell's value in that unit: a quantity is converted, a bare number is taken to be in it
    (a table written before the column had its unit).

    >>> import numpy as np
    >>> import astropy.units as u
    >>> cell_float(np.ma.masked), cell_float(2), cell_float(3 * u.km, u.m), cell_float(40.0, u.K)
    (nan, 2.0, 3000.0, 40.0)
    """
    if np.ma.is_masked(value):
        return float("nan")
    if unit is not None:
        return float(u.Quantity(value, unit).value)
    return float(value)


def _json_cell(value) -> Any:
    if isinstance(value, Time):
        if bool(np.any(getattr(value, "mask", False))):
            return None
        return str(getattr(value, "unmasked", value).isot)
    if np.ma.is_masked(value):
        return None
    value = value.value if hasattr(value, "unit") else value
    value = value.item() if hasattr(value, "item") else value
    return None if isinstance(value, float) and not np.isfinite(value) else value


def table_as_json(table: QTable) -> dict[str, Any]:
    """Rows of a table as plain JSON values (times as ISO text), with each column's unit and description."""
    units = {c: str(table[c].unit) for c in table.colnames if getattr(table[c], "unit", None) is not None}
    descriptions = {c: table[c].info.description for c in table.colnames if table[c].info.description}
    rows = [{c: _json_cell(row[c]) for c in table.colnames} for row in table]
    return {"units": units, "descriptions": descriptions, "rows": rows, "meta": dict(table.meta)}
