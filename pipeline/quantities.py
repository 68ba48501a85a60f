"""Checked conversion of a Quantity argument to a float array, with one-sentence errors naming the argument."""

from __future__ import annotations

import astropy.units as u
import numpy as np

from pipeline.errors import ConfigError

__all__ = ["checked_array"]


def checked_array(x, unit, name: str, *, sign: str = "positive", allow_inf: bool = False,
                  error: type[Exception] = ConfigError) -> np.ndarray:
    """``x`` in ``unit`` as a float array; ``sign`` is 'positive', 'non-negative' or 'any'."""
    if not isinstance(x, u.Quantity):
        if unit != u.dimensionless_unscaled:
            msg = f"'{name}' must be a Quantity in units of {unit}, found {x!r}"
            raise error(msg)
        x = u.Quantity(x, u.dimensionless_unscaled)
    try:
        out = np.asarray(x.to_value(unit), dtype=float)
    except u.UnitsError as exc:
        msg = f"'{name}' must have units convertible to {unit}, found {x.unit}"
        raise error(msg) from exc
    bad = np.isnan(out)
    if sign == "positive":
        bad |= out <= 0
    elif sign == "non-negative":
        bad |= out < 0
    if not allow_inf:
        bad |= np.isinf(out)
    if np.any(bad):
        want = {"positive": "> 0", "non-negative": ">= 0", "any": "a number"}[sign]
        want += "" if allow_inf else " and finite"
        found = float(out[bad].ravel()[0])
        msg = f"'{name}' must be {want}, found {found!r} {unit}".rstrip()
        raise error(msg)
    return out
