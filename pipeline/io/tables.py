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
    loading the kept table a few ms, which matters to the steps that read one small table per cube of a long
    campaign. The kept form is plain arrays (numpy's .npz, read without pickle) and a JSON description, so reading
    it back evaluates nothing; a table it cannot hold exactly (object columns, masked times) is not kept. Within
    one process a table read this way is also kept in memory under the same digest, and a copy of it returned
    (the campaign job reads every cube's geometry table in three of its steps). The table is the same either way.
    """
    if cache is None:
        return QTable.read(path, format="ascii.ecsv")
    import hashlib

    digest = hashlib.sha256(Path(path).read_bytes()).hexdigest()
    key = (str(cache), digest)
    if key not in _READ:
        kept = Path(cache) / f"{digest}.npz"
        try:
            table = _from_kept(kept)
        except (OSError, ValueError, KeyError, TypeError):
            table = QTable.read(path, format="ascii.ecsv")
            _keep_table(table, kept)
        if len(_READ) >= _READ_MAX:
            _READ.clear()
        _READ[key] = table
    return _READ[key].copy()


#: Tables read through a cache folder in this process, by the folder and the SHA-256 of their file (at most
#: _READ_MAX, then forgotten).
_READ: dict[tuple[str, str], QTable] = {}
_READ_MAX = 4096


def _keep_table(table: QTable, kept: Path) -> None:
    """Write ``table`` as .npz arrays plus a JSON description (atomically); nothing if it cannot be held exactly."""
    import io
    import json

    from pipeline.io.atomic import atomic_path

    arrays: dict[str, np.ndarray] = {}
    columns = []
    for k, name in enumerate(table.colnames):
        col = table[name]
        spec = {"name": name, "description": col.info.description, "format": col.info.format}
        if isinstance(col, Time):
            if col.location is not None or np.any(getattr(col, "mask", False)):
                return
            spec.update(kind="time", scale=col.scale, time_format=col.format)
            arrays[f"c{k}_jd1"], arrays[f"c{k}_jd2"] = np.asarray(col.jd1), np.asarray(col.jd2)
        elif isinstance(col, u.Quantity):
            spec.update(kind="quantity", unit=col.unit.to_string())
            arrays[f"c{k}"] = np.asarray(col.value)
        elif col.__class__.__name__ in ("Column", "MaskedColumn"):
            spec.update(kind="column", unit=None if col.unit is None else col.unit.to_string())
            arrays[f"c{k}"] = np.asarray(col)
            if hasattr(col, "mask") and np.any(col.mask):
                arrays[f"c{k}_mask"] = np.asarray(col.mask)
        else:
            return
        columns.append(spec)
    if any(a.dtype.kind == "O" for a in arrays.values()):      # .npz holds no objects without pickle
        return
    try:
        description = json.dumps({"columns": columns, "meta": dict(table.meta)})
    except (TypeError, ValueError):
        return
    buf = io.BytesIO()
    np.savez(buf, description=np.array(description), **arrays)
    kept.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(kept) as tmp:
        tmp.write_bytes(buf.getvalue())


def _from_kept(kept: Path) -> QTable:
    """The table :func:`_keep_table` wrote (ValueError or KeyError for anything else)."""
    import json

    from astropy.table import Column, MaskedColumn

    with np.load(kept, allow_pickle=False) as data:
        described = json.loads(str(data["description"]))
        table = QTable(meta=described["meta"])
        for k, spec in enumerate(described["columns"]):
            if spec["kind"] == "time":
                col = Time(data[f"c{k}_jd1"], data[f"c{k}_jd2"], format="jd", scale=spec["scale"])
                col.format = spec["time_format"]
            elif spec["kind"] == "quantity":
                col = u.Quantity(data[f"c{k}"], spec["unit"], copy=False)
            elif f"c{k}_mask" in data:
                col = MaskedColumn(data[f"c{k}"], mask=data[f"c{k}_mask"], unit=spec["unit"])
            else:
                col = Column(data[f"c{k}"], unit=spec["unit"])
            table[spec["name"]] = col
            table[spec["name"]].info.description = spec["description"]
            table[spec["name"]].info.format = spec["format"]
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
    columns = [_json_column(table[c]) for c in table.colnames]
    rows = [dict(zip(table.colnames, cells)) for cells in zip(*columns)] if columns else [{} for _ in table]
    return {"units": units, "descriptions": descriptions, "rows": rows, "meta": dict(table.meta)}


def _json_column(col) -> list[Any]:
    """A column's cells as :func:`_json_cell` gives them, converted as one array where that gives the same values
    (a one-dimensional time, number, flag or text column, plain, masked or with a unit), cell by cell otherwise."""
    import math

    if getattr(col, "ndim", 1) != 1:
        return [_json_cell(value) for value in col]
    if isinstance(col, Time):                          # ISO text of the whole column at once; masked cells None
        mask = np.broadcast_to(np.asarray(getattr(col, "mask", False), dtype=bool), col.shape).tolist()
        text = np.atleast_1d(getattr(col, "unmasked", col).isot).tolist()
        return [None if m else str(v) for v, m in zip(text, mask)]
    data = np.asarray(col.value if isinstance(col, u.Quantity) else col)
    if data.dtype.kind not in "biufU":
        return [_json_cell(value) for value in col]
    cells = data.tolist()
    mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else None
    if mask is not None and mask.any():
        cells = [None if m else v for v, m in zip(cells, mask.tolist())]
    if data.dtype.kind == "f":
        cells = [None if isinstance(v, float) and not math.isfinite(v) else v for v in cells]
    return cells
