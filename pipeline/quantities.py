"""Checked conversion of a Quantity argument to a float array, with one-sentence errors naming the argument.

The one home of the argument checks of the physics modules: public functions take
Quantities, convert each once to their working unit with :func:`checked_array`
and compute on plain arrays.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np

from pipeline.errors import ConfigError, GasledgerError, GasledgerTypeError

__all__ = ["checked_array"]

_SIGNS = {"positive": "> 0", "non-negative": ">= 0", "any": "a number"}


def checked_array(x, unit, name: str, *, sign: str = "positive", allow_inf: bool = False, allow_nan: bool = False,
                  scalar: bool = False, error: type[GasledgerError] = ConfigError) -> np.ndarray:
    """``x`` in ``unit`` as a float array, its values checked.

    Parameters
    ----------
    x : `~astropy.units.Quantity`
        The argument.  A plain number or array is accepted only when ``unit`` is
        dimensionless.
    unit : `~astropy.units.UnitBase`
        The working unit; ``x`` must be convertible to it (no equivalencies).
    name : str
        The argument's name, quoted in the messages.
    sign : {'positive', 'non-negative', 'any'}
        Which values are allowed: > 0, >= 0, or any sign.
    allow_inf, allow_nan : bool
        Whether infinite and NaN values pass (both refused by default).
    scalar : bool
        Whether ``x`` must be a single value (a 0-d array is returned).
    error : subclass of `~pipeline.errors.GasledgerError`
        The (ValueError) class raised for a wrong unit or a bad value, e.g.
        `~pipeline.errors.EphemerisError` for a distance of the geometry.

    Returns
    -------
    numpy.ndarray
        ``x.to_value(unit)`` as float.

    Raises
    ------
    GasledgerTypeError
        When ``x`` is not a Quantity (and ``unit`` is not dimensionless), or not a number.
    error
        When ``x`` has units not convertible to ``unit``, a value outside ``sign``, a
        NaN or infinite value not allowed, or is an array where ``scalar`` asks for one value.
    """
    if not isinstance(x, u.Quantity):
        if unit != u.dimensionless_unscaled:
            msg = f"'{name}' must be a Quantity in units of {unit}, found {x!r}"
            raise GasledgerTypeError(msg)
        try:
            x = u.Quantity(x, u.dimensionless_unscaled)
        except (TypeError, ValueError) as exc:
            msg = f"'{name}' must be a number, found {x!r}"
            raise GasledgerTypeError(msg) from exc
    try:
        out = np.asarray(x.to_value(unit), dtype=float)
    except u.UnitsError as exc:
        msg = f"'{name}' must have units convertible to {unit}, found {x.unit}"
        raise error(msg) from exc
    if scalar and out.ndim != 0:
        msg = f"'{name}' must be a single value, found an array of shape {out.shape}"
        raise error(msg)
    bad = np.zeros(out.shape, dtype=bool) if allow_nan else np.isnan(out)
    if sign == "positive":
        bad |= out <= 0
    elif sign == "non-negative":
        bad |= out < 0
    if not allow_inf:
        bad |= np.isinf(out)
    if np.any(bad):
        want = _SIGNS[sign] + ("" if allow_inf else " and finite")
        first = np.flatnonzero(np.ravel(bad))[0]
        found = float(np.ravel(x.value)[first])  # in the unit the caller gave
        msg = f"'{name}' must be {want}, found {found!r} {x.unit}".rstrip()
        raise error(msg)
    return out
