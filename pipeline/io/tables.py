"""Tables as plain JSON: the rows of an astropy table with the unit of each column."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from astropy.table import QTable

__all__ = ["table_as_json", "cell_float", "read_table"]

def read_table(path: str | Path) -> QTable:
    """An output table (ECSV) as a QTable: the one reader of the pipeline's own products."""
    return QTable.read(path, format="ascii.ecsv")


def cell_float(value) -> float:
    """A table cell as a float; a masked cell (a NaN written to a FITS table reads back masked) as NaN.

    >>> import numpy as np
    >>> cell_float(np.ma.masked), cell_float(2)
    (nan, 2.0)
    """
    return float("nan") if np.ma.is_masked(value) else float(value)


def table_as_json(table: QTable) -> dict[str, Any]:
    """Rows of a table as plain JSON values, with the unit of each column."""
    units = {c: str(table[c].unit) for c in table.colnames if getattr(table[c], "unit", None) is not None}
    rows = []
    for row in table:
        rec = {}
        for c in table.colnames:
            v = row[c]
            v = v.value if hasattr(v, "unit") else v
            v = v.item() if hasattr(v, "item") else v
            rec[c] = None if isinstance(v, float) and not np.isfinite(v) else v
        rows.append(rec)
    return {"units": units, "rows": rows, "meta": dict(table.meta)}
