"""pipeline.quantities.checked_array: the one argument check of the physics modules."""

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_array_equal

from pipeline.errors import ConfigError, EphemerisError, GasledgerTypeError
from pipeline.quantities import checked_array


def test_value_in_the_working_unit():
    # astropy's own conversion, unchanged: 1.5 km = 1500 m
    assert_array_equal(checked_array([1.5, 2.0] * u.km, u.m, "r"), (np.array([1.5, 2.0]) * u.km).to_value(u.m))
    out = checked_array(3.0 * u.s, u.s, "t", scalar=True)
    assert out.ndim == 0 and out == 3.0
    assert checked_array(0.5, u.dimensionless_unscaled, "albedo") == 0.5  # plain numbers: dimensionless only


@pytest.mark.parametrize("x, kwargs, error, match", [
    (1.0, {}, GasledgerTypeError, r"'x' must be a Quantity in units of km, found 1\.0"),
    ("high", {"unit": u.dimensionless_unscaled}, GasledgerTypeError, r"'x' must be a number, found 'high'"),
    (1 * u.s, {}, ConfigError, r"'x' must have units convertible to km, found s"),
    (1 * u.s, {"error": EphemerisError}, EphemerisError, r"'x' must have units convertible to km"),
    (-1 * u.km, {}, ConfigError, r"'x' must be > 0 and finite, found -1\.0 km"),
    ([1.0, -2.0] * u.m, {}, ConfigError, r"'x' must be > 0 and finite, found -2\.0 m"),
    (0 * u.km, {"sign": "non-negative"}, None, None),
    (-1 * u.km, {"sign": "non-negative", "error": EphemerisError}, EphemerisError, r"'x' must be >= 0 and finite"),
    (np.nan * u.km, {"sign": "any"}, ConfigError, r"'x' must be a number and finite, found nan km"),
    (np.inf * u.km, {}, ConfigError, r"'x' must be > 0 and finite, found inf km"),
    (np.inf * u.km, {"allow_inf": True}, None, None),
    (np.nan * u.km, {"allow_nan": True}, None, None),
    ([1.0, 2.0] * u.km, {"scalar": True}, ConfigError, r"'x' must be a single value, found an array of shape \(2,\)"),
])
def test_errors_name_the_argument(x, kwargs, error, match):
    kwargs = {"unit": u.km, **kwargs}
    unit = kwargs.pop("unit")
    if error is None:
        checked_array(x, unit, "x", **kwargs)
        return
    with pytest.raises(error, match=match) as info:
        checked_array(x, unit, "x", **kwargs)
    assert ". " not in str(info.value)  # one sentence
