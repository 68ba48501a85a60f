"""Tests of pipeline.rates.stacking against closed forms (integrals of a Gaussian, inverse-variance weighting)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy.special import ndtr

from pipeline.rates.stacking import StackInput, combine, rebin_density, velocity_grid


def _gaussian_channels(velocity, dv, area, centre, width):
    """Channel averages of a Gaussian line of integral ``area``: area (Phi(hi) - Phi(lo)) / dv."""
    lo = (velocity - dv / 2 - centre) / width
    hi = (velocity + dv / 2 - centre) / width
    return area * (ndtr(hi) - ndtr(lo)) / dv


@pytest.mark.parametrize("reverse", [False, True])
def test_rebin_conserves_the_integral_of_a_gaussian(reverse):
    dv = 0.25
    velocity = np.arange(-80, 81) * dv                      # edges at (k + 1/2) dv
    density = _gaussian_channels(velocity, dv, area=7.0, centre=0.6, width=1.4)
    # outer edges on input channel edges, interior edges on a coarser, incommensurate step
    interior = np.arange(-14.0, 14.0, 0.61) + 0.17
    edges = np.concatenate([[-15.125], interior, [15.125]])
    if reverse:
        velocity, density = velocity[::-1], density[::-1]
    out = rebin_density(velocity, density, edges)
    assert np.all(np.isfinite(out))
    # closed form: integral of the channel-averaged Gaussian between two input edges
    #   = area (Phi((E1 - c)/w) - Phi((E0 - c)/w))
    expected = 7.0 * (ndtr((15.125 - 0.6) / 1.4) - ndtr((-15.125 - 0.6) / 1.4))
    assert_allclose(np.sum(out * np.diff(edges)), expected, rtol=1e-12)


def test_rebin_reversed_axis_equals_forward_axis():
    rng = np.random.default_rng(21)
    velocity = np.linspace(-10, 10, 81)
    density = rng.normal(size=(2, 3, 81))
    edges = np.linspace(-8.3, 8.1, 15)
    fwd = rebin_density(velocity, density, edges)
    rev = rebin_density(velocity[::-1], density[..., ::-1], edges)
    assert fwd.shape == (2, 3, 14)
    assert_allclose(rev, fwd, rtol=1e-12, atol=1e-14)
    # each output bin is the overlap-weighted mean of the input channels (direct computation)
    dv = velocity[1] - velocity[0]
    lo, hi = velocity - dv / 2, velocity + dv / 2
    for k in range(14):
        ov = np.clip(np.minimum(hi, edges[k + 1]) - np.maximum(lo, edges[k]), 0, None)
        assert_allclose(fwd[..., k], (density * ov).sum(-1) / (edges[k + 1] - edges[k]), rtol=1e-10, atol=1e-12)


def test_rebin_identity_and_constant_density():
    velocity = np.arange(-5.0, 5.5, 0.5)
    edges = np.concatenate([velocity - 0.25, [velocity[-1] + 0.25]])
    rng = np.random.default_rng(22)
    y = rng.normal(size=velocity.size)
    assert_allclose(rebin_density(velocity, y, edges), y, rtol=1e-12, atol=1e-12)
    # a constant density stays that constant on any covered bins (exact)
    assert_allclose(rebin_density(velocity, np.full(velocity.size, 3.0), np.linspace(-4.9, 4.7, 7)), 3.0,
                    rtol=1e-12)


def test_rebin_blank_and_uncovered_bins_are_nan():
    velocity = np.arange(0.0, 20.0, 1.0)                     # covers [-0.5, 19.5]
    y = np.ones(velocity.size)
    y[10] = np.nan                                            # channel [9.5, 10.5]
    edges = np.array([-2.0, 0.0, 4.0, 8.0, 10.0, 12.0, 16.0, 19.5, 21.0])
    out = rebin_density(velocity, y, edges)
    assert np.isnan(out[0])                                   # starts before the data
    assert np.isnan(out[-1])                                  # runs past the data
    assert np.isnan(out[3]) and np.isnan(out[4])              # touch the blank channel
    assert_allclose(out[[1, 2, 5, 6]], 1.0, rtol=1e-12)



def test_rebin_blank_is_tracked_per_spectrum():
    # a blank channel in one aperture's spectrum must not blank the same bin of the others
    velocity = np.arange(0.0, 20.0, 1.0)
    y = np.ones((2, 3, velocity.size))
    y[0, 1, 10] = np.nan
    edges = np.arange(0.5, 19.0, 2.0)
    out = rebin_density(velocity, y, edges)
    hit = (edges[:-1] < 10.5) & (edges[1:] > 9.5)
    assert np.all(np.isnan(out[0, 1, hit]))
    assert_allclose(out[0, 1, ~hit], 1.0, rtol=1e-12)
    others = np.ones((2, 3), dtype=bool)
    others[0, 1] = False
    assert_allclose(out[others], 1.0, rtol=1e-12)

def _inp(q, sigma, velocity, density, name):
    return StackInput(epoch="e1", cube_id=name, line_id="L", velocity=velocity, density=density,
                      q=np.asarray(q, float), sigma_q=np.asarray(sigma, float), radius_km=np.array([1000.0, 3000.0]))


@pytest.mark.parametrize("n", [1, 4, 9])
def test_combine_equal_inputs_gives_sigma_over_sqrt_n(n):
    velocity = np.linspace(-10, 10, 41)
    sigma = np.array([[2.0, 3.0]])                            # (n_T = 1, n_ap = 2)
    inputs = [_inp([[1.0 + i, 5.0 - i]], sigma, velocity, np.ones((1, 2, 41)) * i, f"c{i}") for i in range(n)]
    out = combine(inputs, velocity_grid(inputs, 6.0))
    # inverse-variance closed form for N equal errors: sigma / sqrt(N), plain mean of the values
    assert_allclose(out["sigma_q"], sigma / np.sqrt(n), rtol=1e-12)
    assert_allclose(out["q"], [[1.0 + (n - 1) / 2, 5.0 - (n - 1) / 2]], rtol=1e-12)
    assert_allclose(out["weights"], np.full((n, 1, 2), 1.0 / n), rtol=1e-12)
    assert_allclose(out["density"], (n - 1) / 2, rtol=1e-12, atol=1e-14)


def test_combine_unequal_errors_weighted_mean_and_monte_carlo():
    velocity = np.linspace(-10, 10, 81)
    s = np.array([1.0, 2.0, 0.5])
    q = np.array([10.0, 14.0, 9.0])
    inputs = [_inp([[qi, qi]], [[si, si]], velocity, np.full((1, 2, 81), qi), f"c{i}")
              for i, (qi, si) in enumerate(zip(q, s))]
    out = combine(inputs, velocity_grid(inputs, 5.0))
    w = 1 / s**2
    # closed form: mean = sum(w q) / sum(w), sigma = sum(w)^-1/2
    assert_allclose(out["q"], np.sum(w * q) / np.sum(w), rtol=1e-12)
    assert_allclose(out["sigma_q"], 1 / np.sqrt(np.sum(w)), rtol=1e-12)
    assert_allclose(out["density"], np.sum(w * q) / np.sum(w), rtol=1e-12)
    # independent Monte Carlo: the scatter of the combined value over simulated draws
    # (20000 draws carried along the aperture axis; sampling error of a std ~ 0.5 %)
    rng = np.random.default_rng(23)
    draws = rng.normal(0.0, s, size=(20_000, 3))
    sims = combine([_inp(draws[None, :, i], np.full((1, 20_000), s[i]), velocity, np.zeros((1, 20_000, 81)), "x")
                    for i in range(3)], np.array([-1.0, 1.0]))["q"]
    assert_allclose(np.std(sims), 1 / np.sqrt(np.sum(w)), rtol=0.03)

def test_combine_density_ignores_blank_input_channels():
    velocity = np.linspace(-10, 10, 41)
    d1 = np.full((1, 1, 41), 2.0)
    d2 = np.full((1, 1, 41), 4.0)
    d2[0, 0, 20] = np.nan                                      # channel at v = 0
    inputs = [_inp([[2.0]], [[1.0]], velocity, d1, "a"), _inp([[4.0]], [[1.0]], velocity, d2, "b")]
    edges = velocity_grid(inputs, 3.0)
    out = combine(inputs, edges)
    centres = 0.5 * (edges[1:] + edges[:-1])
    at0 = np.argmin(np.abs(centres))
    assert_allclose(out["density"][0, 0, at0], 2.0)            # only the unblanked input
    others = np.delete(out["density"][0, 0], at0)
    assert_allclose(others, 3.0)                               # equal-weight mean of 2 and 4


def test_velocity_grid_centred_on_zero_with_coarsest_step():
    a = _inp([[1.0]], [[1.0]], np.arange(-20, 20.01, 0.4), np.zeros((1, 1, 101)), "a")
    b = _inp([[1.0]], [[1.0]], np.arange(20, -20.01, -1.3), np.zeros((1, 1, 31)), "b")   # reversed, coarser
    edges = velocity_grid([a, b], 10.0)
    step = np.diff(edges)
    assert_allclose(step, 1.3, rtol=1e-12)
    centres = 0.5 * (edges[1:] + edges[:-1])
    assert_allclose(centres[len(centres) // 2], 0.0, atol=1e-12)
    assert_allclose(edges, -edges[::-1], atol=1e-12)          # symmetric about zero
    assert len(centres) % 2 == 1
    # covers +-half_width to within one step: n = floor(10 / 1.3) = 7 channels each side
    assert_array_equal(np.round(centres / 1.3).astype(int), np.arange(-7, 8))


def test_cubes_are_combined_over_the_apertures_they_share():
    # a millimetre cube with 1000 and 3000 km apertures and a small infrared field with only 1000 km: the
    # combination is the inverse-variance mean (closed form: sum(q/s^2)/sum(1/s^2)) over the shared 1000 km only
    from pipeline.errors import CoverageError
    from pipeline.rates.stacking import shared_apertures

    mm = StackInput(epoch="e1", cube_id="mm", line_id="L", velocity=None, density=None,
                    q=np.array([[2.0, 5.0]]), sigma_q=np.array([[1.0, 2.0]]), radius_km=np.array([1000.0, 3000.0]),
                    apertures=("1000 km", "3000 km"))
    ir = StackInput(epoch="e1", cube_id="ir", line_id="B", velocity=None, density=None,
                    q=np.array([[4.0]]), sigma_q=np.array([[1.0]]), radius_km=np.array([1000.0]),
                    apertures=("1000 km",))
    members, left_out = shared_apertures([mm, ir])
    assert [m.labels for m in members] == [("1000 km",), ("1000 km",)]
    assert left_out == ["3000 km of mm"]
    res = combine(members, np.array([-0.5, 0.5]))
    assert_allclose(res["q"], [[3.0]])
    assert_allclose(res["sigma_q"], [[1 / np.sqrt(2.0)]])
    # apertures on the sky are named as configured and never matched to lengths
    sky = StackInput(epoch="e1", cube_id="sky", line_id="L", velocity=None, density=None, q=np.array([[1.0]]),
                     sigma_q=np.array([[1.0]]), radius_km=np.array([1000.0]), apertures=("1.5 arcsec",))
    with pytest.raises(CoverageError, match=r"the cubes share no aperture \(mm: 1000 km, 3000 km; sky: 1\.5 arcsec\)"):
        shared_apertures([mm, sky])
    # inputs without names (older products) are named by their radius in km
    assert StackInput(epoch="e", cube_id="c", line_id="L", velocity=None, density=None, q=mm.q, sigma_q=mm.sigma_q,
                      radius_km=mm.radius_km).labels == ("1000 km", "3000 km")


def test_overlapping_windows_of_one_cube_are_kept_once():
    # the CH3OH 5(2)-4(2) A- and 5(3)-4(3) E lines lie 1.64 km/s apart (CDMS 032504): windows of +-1.2 km/s
    # overlap (1.64 < 2.4, closed form), so only the better-measured one of a cube stays; in another cube both
    # are independent of the first cube's
    from pipeline.catalogue.entries import load_catalogue
    from pipeline.rates.stacking import distinct_windows

    cat = load_catalogue()

    def inp(cube, line, sigma):
        return StackInput(epoch="e1", cube_id=cube, line_id=line, velocity=np.arange(5.0), density=np.zeros((1, 1, 5)),
                          q=np.array([[1.0]]), sigma_q=np.array([[sigma]]), radius_km=np.array([1000.0]), window=1.2)

    a, b = inp("c1", "CH3OH_241842", 2.0), inp("c1", "CH3OH_241844", 1.0)
    far = inp("c1", "CH3OH_241700", 3.0)
    other = inp("c2", "CH3OH_241842", 2.0)
    kept, notes = distinct_windows([a, b, far, other], cat)
    assert [(i.cube_id, i.line_id) for i in kept] == [("c1", "CH3OH_241844"), ("c1", "CH3OH_241700"),
                                                      ("c2", "CH3OH_241842")]
    assert notes == ["c1:CH3OH_241842 (its window overlaps that of CH3OH_241844, kept)"]
