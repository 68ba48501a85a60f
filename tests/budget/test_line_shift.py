"""The momentum efficiency a line's first moment allows (pipeline.budget.line_shift).

References outside the project: the mean of cos(psi) over a uniformly filled hemisphere is 1/2 (closed form), so a
constant-speed outflow with a fraction f of its molecules in the hemisphere opposite to the push (the rest
isotropic) has zeta = f / 2; the first moment of an optically thin line is the emitters' mean line-of-sight
velocity (its definition); the RTN frame of an orbit (radial, n = r x v, t = n x r) and the ecliptic pole of
astropy's BarycentricMeanEcliptic.
"""

import astropy.units as u
import numpy as np
import pytest

from pipeline.budget.line_shift import line_of_sight, push_direction, zeta_from_offset
from pipeline.coma.image import apply_spectral_response
from pipeline.rates.line_fit import fit_line, line_moment


def _asymmetric_spectrum(f, v, gas, los, seed=1, noise=0.02):
    rng = np.random.default_rng(seed)
    n = 2_000_000
    d = rng.standard_normal((n, 3))
    d /= np.linalg.norm(d, axis=1)[:, None]
    hemi = rng.random(n) < f
    flip = (d @ gas < 0) & hemi                   # the fraction f leaves into the hemisphere around 'gas'
    d[flip] -= 2 * (d[flip] @ gas)[:, None] * gas[None, :]
    u_los = v * (d @ los) + rng.normal(0.0, 0.1, n)   # plus a thermal spread of 0.1 km/s
    vel = np.arange(-6.0, 6.0001, 0.1)
    hist, _ = np.histogram(u_los, np.concatenate([vel - 0.05, [vel[-1] + 0.05]]))
    density = 1e27 * hist / n / 0.1
    density = apply_spectral_response(density[:, None, None], "hanning")[:, 0, 0]
    white = rng.normal(0.0, noise * density.max(), density.size)
    return vel, density + apply_spectral_response(white[:, None, None], "hanning")[:, 0, 0]


@pytest.mark.parametrize("f, cos_sign", [(0.6, 1.0), (0.3, -1.0)])
def test_an_asymmetric_outflow_gives_back_its_zeta(f, cos_sign):
    v = 0.8
    gas = np.array([0.3, 0.5, 0.81 * cos_sign])
    gas /= np.linalg.norm(gas)
    los = np.array([0.0, 0.0, 1.0])
    vel, density = _asymmetric_spectrum(f, v, gas, los)
    m1, err = line_moment(vel, density, v + 0.3 + 0.1)
    z = zeta_from_offset(m1, err, v, float(gas @ los))
    assert abs(z["zeta"] - f / 2) < 2 * z["zeta_err"] + 0.01, z     # zeta = f/2 (hemisphere mean of cos = 1/2)
    assert z["zeta_err"] < 0.05
    # a symmetric template's fitted centre hardly moves: the line's edges stay at +-v (why the moment is used)
    fit = fit_line(vel, density, v, 0.1, 1.2)
    assert abs(fit.v_offset) < 0.3 * abs(m1)


def test_a_line_of_sight_across_the_push_cannot_tell():
    z = zeta_from_offset(0.05, 0.01, 0.8, 0.1)
    assert np.isnan(z["zeta"]) and "cannot tell" in z["reading"]
    assert zeta_from_offset(-0.2, 0.02, 0.8, 0.9)["reading"].startswith("the line shifts the wrong way")
    # at zero shift the flat-prior (zeta >= 0) 95 % bound is the half-normal's: sigma * Phi^-1(0.975) = 1.95996 sigma
    # (closed form); a shift the wrong way keeps a positive bound
    assert zeta_from_offset(0.0, 0.02, 0.8, 0.9)["zeta_upper"] == pytest.approx(1.959964 * 0.02 / 0.72, rel=1e-5)
    assert zeta_from_offset(-0.03, 0.02, 0.8, 0.9)["zeta_upper"] > 0.5 * 0.02 / 0.72


def test_push_direction_in_the_rtn_frame():
    # an orbit in the ecliptic-like x-y plane: r along x, v along y -> n = z, t = y (closed form of the frame)
    r, vvec = np.array([1.5e8, 0.0, 0.0]), np.array([0.0, 30.0, 0.0])
    assert push_direction(r, vvec, 1.0, 0.0, 0.0) == pytest.approx([1.0, 0.0, 0.0])
    assert push_direction(r, vvec, 0.0, 1.0, 0.0) == pytest.approx([0.0, 1.0, 0.0])
    assert push_direction(r, vvec, 0.0, 0.0, -2.0) == pytest.approx([0.0, 0.0, -1.0])
    assert push_direction(r, None, 1e-8, 5e-9, 0.0) == pytest.approx([1.0, 0.0, 0.0])   # radial without a velocity
    assert line_of_sight(90 * u.deg, 0 * u.deg) == pytest.approx([0.0, 1.0, 0.0], abs=1e-12)
