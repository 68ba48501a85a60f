"""Tables as plain JSON: the rows of an astropy table with the unit of each column."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

__all__ = ["table_as_json", "cell_float", "read_table"]

def read_table(path: str | Path) -> QTable:
    """An output table (ECSV) as a QTable: the one reader of the pipeline's own products."""
    return QTable.read(path, format="ascii.ecsv")


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
