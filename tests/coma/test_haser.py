"""Tests of pipeline.coma.haser: the Haser coma model.

Every physics check is compared with something outside the module: closed-form
limits of the model, the Bessel-function form of the Haser column density,
brute-force scipy quadratures of the density, a pixel image convolved with
scipy.ndimage, astropy constants, or the published speed law.
"""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import k_B
from astropy.constants import u as amu
from astropy.tests.helper import assert_quantity_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy import integrate, ndimage, special, stats

from pipeline.coma import haser
from pipeline.errors import ConfigError, EphemerisError, GasledgerError, GasledgerTypeError

Q = 1e28 / u.s
V = 0.8 * u.km / u.s
L = 1e4 * u.km
Q_S, V_KMS = 1e28, 0.8
X_VALUES = [1e-3, 0.1, 1.0, 10.0, 100.0]
# (parent length, daughter length) in km; None = a parent species
SPECIES = [(1e4, None), (1e4, 3e4), (1e4, 2.5e3), (1e4, 1e4)]


# ----------------------------------------------------------------------------- independent references
_LAGUERRE_S, _LAGUERRE_W = np.polynomial.laguerre.laggauss(80)


def ki1_bessel(x):
    """Bickley Ki_1(x) = int_x^inf K_0 (Abramowitz & Stegun 11.2, from memory), via scipy.special.

    pi/2 - int_0^x K_0 (scipy iti0k0) for x < 5; for x >= 5, where that difference loses
    digits, e^-x int_0^inf e^-s k0e(x + s) ds by 80-point Gauss-Laguerre.
    """
    x = np.asarray(x, dtype=float)
    flat = x.ravel()
    out = np.pi / 2 - special.iti0k0(flat)[1]
    large = flat >= 5.0
    xl = flat[large]
    out[large] = np.exp(-xl) * (special.k0e(xl[:, None] + _LAGUERRE_S) @ _LAGUERRE_W)
    return out.reshape(x.shape)


def one_minus_ki2_bessel(x):
    """1 - Ki_2(x) = 1 - x K_1(x) + x Ki_1(x): Bickley recurrence (A&S 11.2, from memory)."""
    return 1.0 - x * special.k1(x) + x * ki1_bessel(x)


def density_km(r, lp, ld=None):
    """Haser (1957) density per unit Q/v, in km^-3, written out independently."""
    if ld is None:
        return np.exp(-r / lp) / (4 * np.pi * r * r)
    if lp == ld:  # the L_p = L_d limit of the Haser daughter formula
        return r * np.exp(-r / lp) / (4 * np.pi * r * r * lp)
    return ld / (lp - ld) * (np.exp(-r / lp) - np.exp(-r / ld)) / (4 * np.pi * r * r)


def ring_content_bessel(r, lp, ld=None):
    """2 pi r N(r) per unit Q/v (Haser column density in its Bessel form)."""
    if ld is None:
        return ki1_bessel(r / lp)
    return ld / (lp - ld) * (ki1_bessel(r / lp) - ki1_bessel(r / ld))


def quad_pieces(f, edges):
    """Sum of scipy quad over consecutive intervals, the last one to infinity.

    Each piece is asked for a relative accuracy of 1e-12 of the sum so far.
    """
    total = 0.0
    for a, b in zip(edges, [*edges[1:], np.inf]):
        total += integrate.quad(f, a, b, epsabs=1e-13 * abs(total), epsrel=1e-12, limit=400)[0]
    return total


def column(rho_km, lp, ld=None):
    if ld is None:
        return haser.parent_column_density(rho_km * u.km, Q, V, lp * u.km)
    return haser.daughter_column_density(rho_km * u.km, Q, V, lp * u.km, ld * u.km)


def aperture(rho_km, lp, ld=None):
    if ld is None:
        return haser.parent_aperture_count(rho_km * u.km, Q, V, lp * u.km)
    return haser.daughter_aperture_count(rho_km * u.km, Q, V, lp * u.km, ld * u.km)


# ----------------------------------------------------------------------------- 1. closed-form limits
def test_small_aperture_limits():
    # Haser (1957): for L >> rho, N_ap = pi Q rho / (2 v) and N = Q / (4 v rho)
    rho = 1e-9 * L
    expected = (np.pi * Q * rho / (2 * V)).decompose()
    assert_quantity_allclose(haser.parent_aperture_count(rho, Q, V, L), expected, rtol=1e-7)
    expected = (Q / (4 * V * rho)).to(u.cm**-2)
    assert_quantity_allclose(haser.parent_column_density(rho, Q, V, L), expected, rtol=1e-7)


def test_large_aperture_limit_is_total_content():
    # Haser (1957): for L << rho the aperture holds the whole coma, Q tau = Q L / v
    total = (Q * L / V).decompose()
    assert_quantity_allclose(haser.parent_aperture_count(1e3 * L, Q, V, L), total, rtol=1e-13)
    assert_quantity_allclose(haser.parent_aperture_count(np.inf * u.km, Q, V, L), total, rtol=1e-13)
    # steady state: the daughter content is Q tau_d = Q L_d / v
    assert_quantity_allclose(haser.daughter_aperture_count(1e4 * L, Q, V, L, 0.3 * L),
                             (Q * 0.3 * L / V).decompose(), rtol=1e-12)


def test_gaussian_beam_limit():
    # L >> fwhm: N = Q / (4 v rho) (Haser 1957) and int_0^inf exp(-a r^2) dr = sqrt(pi / a) / 2 give
    # N_B = (pi Q fwhm / (4 v)) sqrt(pi / (4 ln 2)), the "1.064 factor" of beam-averaged counts
    factor = math.sqrt(math.pi / (4 * math.log(2)))
    assert abs(factor - 1.0645) < 1e-4
    fwhm = 1e-9 * L
    expected = (np.pi * Q * fwhm / (4 * V) * factor).decompose()
    assert_quantity_allclose(haser.beam_count(fwhm, Q, V, L), expected, rtol=1e-7)


def test_daughter_of_short_lived_parent_is_a_parent():
    # L_p -> 0: the daughter is born at the nucleus and follows the parent law with L_d (Haser 1957)
    lp, ld = 1e-12 * L, L
    rho = np.array([1e-3, 0.3, 1.0, 4.0]) * L
    x = (rho / ld).decompose().value
    expected = (Q * np.exp(-x) / (4 * np.pi * rho**2 * V)).to(u.cm**-3)
    assert_quantity_allclose(haser.daughter_density(rho, Q, V, lp, ld), expected, rtol=1e-8)
    expected = (Q / (2 * np.pi * V * rho) * ki1_bessel(x)).to(u.cm**-2)
    assert_quantity_allclose(haser.daughter_column_density(rho, Q, V, lp, ld), expected, rtol=1e-8)
    expected = (Q * ld / V).decompose() * one_minus_ki2_bessel(x)
    assert_quantity_allclose(haser.daughter_aperture_count(rho, Q, V, lp, ld), expected, rtol=1e-8)
    # the parent beam count is checked against scipy quad in test_beam_count_against_quad
    assert_quantity_allclose(haser.beam_count(rho, Q, V, lp, ld), haser.beam_count(rho, Q, V, ld), rtol=1e-8)


def test_equal_lengths_daughter_density():
    # the L_p = L_d limit of the Haser daughter density: Q r exp(-r/L) / (4 pi r^2 v L)
    r = np.array([1e-2, 1.0, 7.0]) * L
    expected = (Q * r * np.exp(-(r / L).decompose()) / (4 * np.pi * r**2 * V * L)).to(u.cm**-3)
    assert_quantity_allclose(haser.daughter_density(r, Q, V, L, L), expected, rtol=1e-14)
    assert_quantity_allclose(haser.daughter_density(r, Q, V, L, L * (1 + 1e-9)), expected, rtol=1e-8)


@pytest.mark.parametrize("x", [1e-4, 1e-2, 0.3, 1.0, 2.0])
def test_parent_against_bessel_forms(x):
    # Haser column density N = Q/(2 pi v rho) [pi/2 - int_0^x K_0] and the Bickley recurrence for the
    # aperture (Abramowitz & Stegun 11.2, from memory), evaluated with scipy.special
    rho = x * L
    expected = (Q / (2 * np.pi * V * rho) * ki1_bessel(x)).to(u.cm**-2)
    assert_quantity_allclose(haser.parent_column_density(rho, Q, V, L), expected, rtol=1e-12)
    expected = (Q * L / V).decompose() * one_minus_ki2_bessel(x)
    assert_quantity_allclose(haser.parent_aperture_count(rho, Q, V, L), expected, rtol=1e-11)


# ----------------------------------------------------------------------------- 2. brute force
@pytest.mark.parametrize(("lp", "ld"), SPECIES)
def test_density_formula(lp, ld):
    # the Haser (1957) density formulas, written out in this file
    r = np.array([1e-3, 0.5, 2.0, 30.0]) * lp
    got = (haser.parent_density(r * u.km, Q, V, lp * u.km) if ld is None
           else haser.daughter_density(r * u.km, Q, V, lp * u.km, ld * u.km))
    assert_allclose(got.to_value(u.cm**-3), Q_S / V_KMS * density_km(r, lp, ld) * 1e-15, rtol=1e-12)


@pytest.mark.parametrize(("lp", "ld"), SPECIES)
@pytest.mark.parametrize("x", X_VALUES)
def test_column_density_against_line_of_sight_quad(x, lp, ld):
    # scipy.integrate.quad of the density along the line of sight
    rho = x * lp
    f = lambda z: density_km(math.hypot(rho, z), lp, ld)  # noqa: E731
    edges = [0.0] + [e for e in rho * np.geomspace(1.0, 1e5, 11) if e < 2.4e6]
    brute = 2 * quad_pieces(f, edges) * Q_S / V_KMS * 1e-10
    assert_allclose(column(rho, lp, ld).to_value(u.cm**-2), brute, rtol=1e-9)


@pytest.mark.parametrize(("lp", "ld"), SPECIES)
@pytest.mark.parametrize("x", X_VALUES)
def test_aperture_count_against_cylinder_dblquad(x, lp, ld):
    # scipy.integrate.dblquad of the density over the cylinder of radius rho (spherical r, theta):
    # inner theta in [0, theta_max(r)], both hemispheres, volume element 2 pi r^2 sin(theta)
    rho = x * lp
    lmax = max(lp, ld or lp)

    def integrand(theta, r):
        return 4 * np.pi * r * r * density_km(r, lp, ld) * math.sin(theta)

    def theta_max(r):
        return math.pi / 2 if r <= rho else math.asin(rho / r)

    # outer r split at rho and geometrically up to 60 scale lengths (beyond: < e^-60 of the total)
    edges = sorted({0.0, rho, 60 * lmax, *[e for e in rho * np.geomspace(1, 1e6, 13) if e < 60 * lmax]})
    edges = [e for e in edges if e <= max(60 * lmax, rho)]
    total = 0.0
    for a, b in zip(edges[:-1], edges[1:]):
        total += integrate.dblquad(integrand, a, b, 0.0, theta_max, epsabs=0, epsrel=1e-11)[0]
    brute = total * Q_S / V_KMS
    assert_allclose(aperture(rho, lp, ld).value, brute, rtol=1e-8)


@pytest.mark.parametrize(("lp", "ld"), SPECIES[:3])
@pytest.mark.parametrize("fwhm", [1e-2, 1.0, 30.0])
def test_beam_count_against_quad(fwhm, lp, ld):
    # scipy quad of 2 pi rho N(rho) exp(-4 ln2 rho^2 / fwhm^2), N in its Bessel form
    theta = fwhm * lp
    alpha = 4 * math.log(2) / theta**2
    f = lambda r: ring_content_bessel(r, lp, ld) * math.exp(-alpha * r * r)  # noqa: E731
    edges = [0.0] + [e for e in np.geomspace(1e-6, 1, 7) * 8 * theta]
    brute = quad_pieces(f, edges) * Q_S / V_KMS
    got = haser.beam_count(theta * u.km, Q, V, lp * u.km, None if ld is None else ld * u.km)
    assert_allclose(got.value, brute, rtol=1e-8)


# ----------------------------------------------------------------------------- 3. convolved aperture
def pixel_image(pix, half, lp):
    """Molecules per pixel of the parent coma (per unit Q/v), nucleus at a pixel centre."""
    gx, gw = np.polynomial.legendre.leggauss(4)
    centres = np.arange(-half, half + 1) * pix
    sub = 0.5 * pix * gx
    x = (centres[:, None] + sub).ravel()
    wx = np.tile(0.5 * gw, centres.size)  # Gauss-Legendre weights of a pixel average
    rr = np.hypot(x[:, None], x[None, :])
    col = ring_content_bessel(rr, lp) / (2 * np.pi * rr)  # N per unit Q/v, km^-2
    img = (col * wx[:, None] * wx[None, :]).reshape(centres.size, 4, centres.size, 4).sum(axis=(1, 3)) * pix**2
    # the eight neighbours of the centre, with a finer Gauss-Legendre rule
    fx, fw = np.polynomial.legendre.leggauss(24)
    for i in (-1, 0, 1):
        for j in (-1, 0, 1):
            if i == j == 0:
                continue
            xs, ys = (i + 0.5 * fx) * pix, (j + 0.5 * fx) * pix
            r2 = np.hypot(xs[:, None], ys[None, :])
            vals = ring_content_bessel(r2, lp) / (2 * np.pi * r2)
            img[half + i, half + j] = (vals * fw[:, None] * fw[None, :]).sum() * 0.25 * pix**2
    # the central pixel in polar coordinates: 8 int_0^{pi/4} (L/2pi) [1 - Ki_2(r_edge/L)] dtheta
    edge = lambda t: one_minus_ki2_bessel(0.5 * pix / math.cos(t) / lp)  # noqa: E731
    img[half, half] = 8 * integrate.quad(edge, 0, math.pi / 4, epsabs=0, epsrel=1e-12)[0] * lp / (2 * np.pi)
    return img


def test_convolved_count_against_convolved_image():
    # a pixel image of the Haser column density, convolved with scipy.ndimage.gaussian_filter and
    # summed inside the disc (pixel fractions by supersampling)
    pix, half, lp = 100.0, 120, 4000.0
    sigma_px, radius = 10.0, 3000.0
    img = pixel_image(pix, half, lp)
    blurred = ndimage.gaussian_filter(img, sigma_px, mode="constant", truncate=8.0)
    n_sub = 10
    offs = (np.arange(n_sub) + 0.5) / n_sub - 0.5
    c = np.arange(-half, half + 1) * pix
    sx = (c[:, None] + offs * pix).ravel()
    inside = np.hypot(sx[:, None], sx[None, :]) < radius
    inside = inside.reshape(c.size, n_sub, c.size, n_sub).mean(axis=(1, 3))
    brute = (blurred * inside).sum() * Q_S / V_KMS
    # the image itself: its unconvolved disc sum is the aperture count
    unconvolved = haser.parent_aperture_count(radius * u.km, Q, V, lp * u.km)
    assert_allclose((img * inside).sum() * Q_S / V_KMS, unconvolved.value, rtol=1e-3)
    fwhm = sigma_px * pix * math.sqrt(8 * math.log(2))
    got = haser.convolved_aperture_count(radius * u.km, fwhm * u.km, Q, V, lp * u.km)
    assert_allclose(got.value, brute, rtol=1e-3)
    # the convolution moved molecules out of the disc: a real effect, well above the tolerance
    assert got < 0.95 * unconvolved


@pytest.mark.parametrize(("lp", "ld"), SPECIES[:3])
@pytest.mark.parametrize(("radius", "sigma"), [(1e2, 3e3), (5e3, 5e3), (2e4, 1e3), (3e3, 1e2)])
def test_convolved_count_against_ncx2_quad(radius, sigma, lp, ld):
    # N = int 2 pi r N(r) W(r) dr with W = scipy.stats.ncx2.cdf((R/s)^2, 2, (r/s)^2), N in Bessel form
    def f(r):
        return ring_content_bessel(r, lp, ld) * stats.ncx2.cdf((radius / sigma) ** 2, 2, (r / sigma) ** 2)

    hi = radius + 12 * sigma
    edges = sorted({0.0, min(lp, hi), max(radius - 6 * sigma, 0.0), radius, radius + 6 * sigma, hi})
    total = 0.0
    for a, b in zip(edges[:-1], edges[1:]):
        if b > a:
            total += integrate.quad(f, a, b, epsabs=0, epsrel=1e-10, limit=400)[0]
    brute = total * Q_S / V_KMS
    fwhm = sigma * math.sqrt(8 * math.log(2)) * u.km
    ld_q = None if ld is None else ld * u.km
    got = haser.convolved_aperture_count(radius * u.km, fwhm, Q, V, lp * u.km, ld_q)
    assert_allclose(got.value, brute, rtol=1e-6)


def test_convolved_count_limits():
    radius = np.array([1e2, 3e3, 1e4, 5e4]) * u.km
    for ld in (None, 3e4 * u.km):
        ref = (haser.parent_aperture_count(radius, Q, V, L) if ld is None
               else haser.daughter_aperture_count(radius, Q, V, L, ld))
        # beam -> 0: the plain aperture count (checked above against dblquad)
        assert_array_equal(haser.convolved_aperture_count(radius, 0 * u.km, Q, V, L, ld), ref)
        assert_quantity_allclose(haser.convolved_aperture_count(radius, 1e-7 * radius, Q, V, L, ld), ref,
                                 rtol=1e-9)
        # aperture >> beam: the convolution changes the count by O((beam/aperture)^2)
        big = 200.0 * radius
        unconv = (haser.parent_aperture_count(big, Q, V, big) if ld is None
                  else haser.daughter_aperture_count(big, Q, V, big, big))
        conv = haser.convolved_aperture_count(big, radius, Q, V, big, None if ld is None else big)
        assert np.all(np.abs(conv / unconv - 1) < 1e-4)
    # flux conservation: an infinite (or huge) aperture holds the whole coma, Q L / v and Q L_d / v
    total = (Q * L / V).decompose()
    assert_quantity_allclose(haser.convolved_aperture_count(np.inf * u.km, 2 * L, Q, V, L), total, rtol=1e-13)
    assert_quantity_allclose(haser.convolved_aperture_count(1e3 * L, L, Q, V, L), total, rtol=1e-10)
    daughter = haser.convolved_aperture_count(1e3 * L, L, Q, V, L, 0.2 * L)
    assert_quantity_allclose(daughter, 0.2 * total, rtol=1e-10)


# ----------------------------------------------------------------------------- 4. speeds
def test_outflow_speed_law():
    # published law v = 0.85 km/s (r_h / 1 au)^-0.5 (Biver et al. 1997/2006, from memory)
    assert_quantity_allclose(haser.outflow_speed_law(1 * u.au), 0.85 * u.km / u.s, rtol=1e-14)
    assert_quantity_allclose(haser.outflow_speed_law(4 * u.au), 0.425 * u.km / u.s, rtol=1e-14)
    assert_quantity_allclose(haser.outflow_speed_law([1, 4] * u.au), [0.85, 0.425] * u.km / u.s, rtol=1e-14)


def test_thermal_speed():
    # mean Maxwell speed sqrt(8 k T / (pi m)) from astropy constants; H2O (18.015 u) at 300 K ~ 0.594 km/s
    t, m = 300 * u.K, 18.015 * amu
    expected = np.sqrt(8 * k_B * t / (np.pi * m)).to(u.km / u.s)
    got = haser.thermal_speed(t, 18.015 * u.u)
    assert_quantity_allclose(got, expected, rtol=1e-12)
    assert_quantity_allclose(got, 0.594 * u.km / u.s, rtol=1e-3)


# ----------------------------------------------------------------------------- 5. units
def test_units_do_not_matter():
    rho_km = np.array([1e2, 1e4, 1e6])
    ref = haser.parent_aperture_count(rho_km * u.km, Q, V, L)
    for unit in (u.m, u.au):
        rho = (rho_km * u.km).to(unit)
        got = haser.parent_aperture_count(rho, Q, V.to(u.m / u.s), L.to(unit))
        assert_quantity_allclose(got, ref, rtol=1e-12)
        assert_quantity_allclose(haser.daughter_column_density(rho, Q, V, L.to(unit), 2 * L),
                                 haser.daughter_column_density(rho_km * u.km, Q, V, L, 2 * L), rtol=1e-12)
        conv = haser.convolved_aperture_count(rho_km * u.km, rho_km * u.km, Q, V, L)
        assert_quantity_allclose(haser.convolved_aperture_count(rho, rho, Q, V, L.to(unit)), conv, rtol=1e-12)
    # densities come back in cm^-2 whatever the input units
    assert haser.parent_column_density(1 * u.m, Q, V, L).unit == u.cm**-2


def test_scale_length():
    # L = v tau, tau = (r_h / 1 au)^2 / beta: 1 km/s and 1e-5 /s give 1e5 km at 1 au, r_h^2 scaling
    assert_quantity_allclose(haser.scale_length(1 * u.km / u.s, 1e-5 / u.s, 1 * u.au), 1e5 * u.km, rtol=1e-14)
    l1 = haser.scale_length(V, 1.2e-5 / u.s, 1 * u.au)
    assert_quantity_allclose(haser.scale_length(V, 1.2e-5 / u.s, [2, 3] * u.au), [4, 9] * l1, rtol=1e-14)
    assert_quantity_allclose(haser.scale_length(800 * u.m / u.s, 1.2e-5 / u.s, 1.496e8 * u.km), l1, rtol=1e-3)


def test_broadcasting():
    # arrays of apertures against arrays of scale lengths give the element-wise results
    rho = np.array([[1e2], [1e4], [3e5]]) * u.km
    lengths = np.array([1e3, 1e4, 1e5, 1e6]) * u.km
    got = haser.daughter_aperture_count(rho, Q, V, lengths, 2e4 * u.km)
    assert got.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            assert_quantity_allclose(got[i, j], haser.daughter_aperture_count(rho[i, 0], Q, V, lengths[j],
                                                                              2e4 * u.km), rtol=1e-13)
    conv = haser.convolved_aperture_count(rho, lengths, Q, V, L)
    assert conv.shape == (3, 4)
    single = haser.convolved_aperture_count(rho[1, 0], lengths[2], Q, V, L)
    assert_quantity_allclose(conv[1, 2], single, rtol=1e-13)


# ----------------------------------------------------------------------------- 6. invalid input
def test_invalid_input():
    with pytest.raises(EphemerisError, match="'r_h'"):
        haser.outflow_speed_law(-1 * u.au)
    with pytest.raises(ValueError, match="'r_h'"):
        haser.scale_length(V, 1e-5 / u.s, 0 * u.au)
    with pytest.raises(ConfigError, match="'speed'.*> 0"):
        haser.parent_aperture_count(1e3 * u.km, Q, -V, L)
    with pytest.raises(GasledgerError, match="'length'"):
        haser.parent_column_density(1e3 * u.km, Q, V, 0 * u.km)
    with pytest.raises(ConfigError, match="'length_daughter'"):
        haser.daughter_aperture_count(1e3 * u.km, Q, V, L, 0 * u.km)
    with pytest.raises(ConfigError, match="'rho_ap'"):
        haser.parent_aperture_count(-1 * u.km, Q, V, L)
    with pytest.raises(ConfigError, match="'speed'.*units"):
        haser.parent_aperture_count(1e3 * u.km, Q, 1 * u.km, L)
    with pytest.raises(GasledgerTypeError, match="'temperature'"):
        haser.thermal_speed(300, 18 * u.u)
    with pytest.raises(ConfigError, match="'beam_fwhm'"):
        haser.convolved_aperture_count(1e3 * u.km, -1 * u.km, Q, V, L)


# ----------------------------------------------------------------------------- 7. properties
@settings(max_examples=60, deadline=None)
@given(log_l=st.floats(1.0, 8.0), log_rho=st.floats(-4.0, 4.0), ratio=st.floats(1.0, 1e3),
       log_ld=st.floats(-2.0, 2.0))
def test_aperture_count_monotone_and_bounded(log_l, log_rho, ratio, log_ld):
    # N_ap grows with the aperture and never exceeds the whole coma Q L / v (Haser 1957)
    length = 10**log_l * u.km
    rho = 10**log_rho * length * np.array([1.0, ratio])
    n = haser.parent_aperture_count(rho, Q, V, length)
    total = (Q * length / V).decompose()
    assert n[1] >= n[0] * (1 - 1e-13)
    assert n[1] <= total * (1 + 1e-13)
    ld = 10**log_ld * length
    nd = haser.daughter_aperture_count(rho, Q, V, length, ld)
    assert nd[1] >= nd[0] * (1 - 1e-13)
    assert nd[1] <= (Q * ld / V).decompose() * (1 + 1e-13)
