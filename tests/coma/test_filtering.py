"""Interferometric filtering: the 1/q visibility of a 1/θ coma and the surviving aperture flux."""

import astropy.units as u
import numpy as np
import pytest
from scipy import integrate, special

from pipeline.io.products import LineSpectra, SubCube
from pipeline.coma.filtering import inverse_radius_fraction, min_spatial_frequency, surviving_fraction


def test_min_spatial_frequency():
    # B/λ: 15 m at 1.3 mm (230.6 GHz) -> 11538 cycles per radian (closed form, astropy spectral equivalency)
    assert min_spatial_frequency(15 * u.m, 230.6 * u.GHz) == pytest.approx(15 / (299792458 / 230.6e9), rel=1e-9)


def test_hankel_transform_of_inverse_radius_is_inverse_q():
    # V(q) = 2π ∫_0^∞ (e^{-aθ}/θ) J0(2π q θ) θ dθ = 2π / sqrt(a² + (2π q)²) (Laplace transform of J0, e.g.
    # Abramowitz & Stegun 29.3.60 / Bracewell's Hankel pairs, from memory), which tends to 1/q as a -> 0:
    # the Hankel pair 1/θ <-> 1/q. Checked numerically with scipy quad at small a.
    a = 0.05
    for q in (0.5, 1.0, 3.0):
        val, _ = integrate.quad(lambda t: 2 * np.pi * np.exp(-a * t) * special.j0(2 * np.pi * q * t), 0, np.inf,
                                limit=5000)
        assert val == pytest.approx(2 * np.pi / np.hypot(a, 2 * np.pi * q), rel=1e-6)
        assert val == pytest.approx(1 / q, rel=1e-3)


def test_fft_of_model_image_follows_inverse_q():
    # the pixel-integrated model coma image (L >> field) has an azimuthally averaged FFT amplitude ∝ 1/q
    from pipeline.coma.image import coma_molecules_image

    n = 256
    img = coma_molecules_image((n, n), n / 2, n / 2, 10.0, 1 * u.km / u.s, 1e9 * u.km)
    amp = np.abs(np.fft.fft2(img))
    f = np.fft.fftfreq(n)
    q = np.hypot(*np.meshgrid(f, f))
    sel = [(q > a) & (q < a * 1.1) for a in (0.02, 0.04, 0.08)]
    means = np.array([amp[s].mean() for s in sel])
    qs = np.array([q[s].mean() for s in sel])
    slope = np.polyfit(np.log(qs), np.log(means), 1)[0]
    assert slope == pytest.approx(-1.0, abs=0.08)


@pytest.mark.parametrize("radius_pix", [6.0, 15.0])
def test_surviving_fraction_matches_the_analytic_inverse_radius_case(radius_pix):
    # no beam, L >> field: the FFT filtering of the model image agrees with the closed-form 1/θ result
    pix_arcsec, delta = 0.3, 1 * u.au
    pix_rad = (pix_arcsec * u.arcsec).to_value(u.rad)
    q_min = 1 / (40 * pix_rad)                           # largest surviving scale ~ 40 pixels
    got = surviving_fraction((64, 64), 31.5, 31.5, pix_arcsec, [radius_pix], None, 1 * u.km / u.s, 1e12 * u.km,
                             q_min, delta)[0]
    ref = inverse_radius_fraction(radius_pix * pix_rad, q_min)
    assert 0 < got < 1
    assert got == pytest.approx(ref, abs=0.03)


def test_no_filtering_keeps_everything():
    frac = surviving_fraction((32, 32), 15.5, 15.5, 0.3, [5.0], (3.0, 3.0, 0.0), 1 * u.km / u.s, 1e6 * u.km,
                              0.0, 1 * u.au)
    assert frac[0] == pytest.approx(1.0, rel=1e-9)


def test_stack_input_corrects_for_the_surviving_fraction(tmp_path):
    # with an interferometer configured, Q from the same spectrum grows by exactly 1 / surviving fraction
    from cubes import write_subcube

    from pipeline.catalogue.entries import load_catalogue
    from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra
    from pipeline.coma.response import ComaModel
    from pipeline.rates.q_units import stack_input

    rng = np.random.default_rng(3)
    path = write_subcube(tmp_path / "s.fits", rng.standard_normal((200, 32, 32)) * 0.01)
    settings = ExtractionSettings(radii=[1000 * u.km], window=1.2 * u.km / u.s, other_lines=[] * u.km / u.s)
    hdul = extract_spectra(SubCube.from_fits(path), settings, offsource=False).to_fits()
    cat = load_catalogue()
    t_kin, model = [40.0] * u.K, ComaModel(outflow="law", solar_activity="quiet")
    plain, _ = stack_input(LineSpectra.from_fits(hdul), cat, t_kin, model)
    filt, rows = stack_input(LineSpectra.from_fits(hdul), cat, t_kin, model, shortest_baseline=15.0 * u.m, correct_filtering=True)
    frac = rows[0]["surviving_fraction"]
    assert 0 < frac < 1
    assert filt.q[0, 0] == pytest.approx(plain.q[0, 0] / frac, rel=1e-12)


def test_a_weighted_brightness_survives_as_its_hankel_transform_says():
    """Under non-LTE the filtered image is the line's brightness, the Haser column times the line's factor f(rho)
    (surviving_fraction's ``weight``). With L >> field and f = exp(-rho / rho_1) the brightness is
    exp(-a theta) / theta, whose visibility is V(q) = 2 pi / sqrt(a^2 + (2 pi q)^2) (the Laplace transform of J0,
    Abramowitz & Stegun 29.3.60, from memory; checked with quad above). The aperture flux is
    F = int_0^inf V(q) 2 pi R J1(2 pi q R) dq, whole (2 pi / a)(1 - exp(-a R), closed form) less the removed part
    int_0^q_min of the same (scipy quad): the surviving fraction 1 - removed / whole."""
    pix_arcsec, delta = 0.3, 1 * u.au
    pix_rad = (pix_arcsec * u.arcsec).to_value(u.rad)
    km_per_rad = delta.to_value(u.km)
    rho_1 = 8 * pix_rad * km_per_rad                        # the factor's scale: 8 pixels
    a = km_per_rad / rho_1                                  # per radian
    q_min = 1 / (40 * pix_rad)

    def weight(rho_km):
        return np.exp(-np.asarray(rho_km) / rho_1)

    for radius_pix in (6.0, 15.0):
        big_r = radius_pix * pix_rad
        got = surviving_fraction((64, 64), 31.5, 31.5, pix_arcsec, [radius_pix], None, 1 * u.km / u.s,
                                 1e12 * u.km, q_min, delta, weight=weight)[0]
        removed, _ = integrate.quad(lambda q: 2 * np.pi / np.hypot(a, 2 * np.pi * q) * 2 * np.pi * big_r
                                    * special.j1(2 * np.pi * q * big_r), 0, q_min, limit=200)
        whole = 2 * np.pi / a * (1 - np.exp(-a * big_r))
        assert got == pytest.approx(1 - removed / whole, abs=0.01)
        plain = surviving_fraction((64, 64), 31.5, 31.5, pix_arcsec, [radius_pix], None, 1 * u.km / u.s,
                                   1e12 * u.km, q_min, delta)[0]
        assert got > plain                 # the more compact brightness loses less to the missing short spacings
