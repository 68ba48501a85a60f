"""Tests of pipeline.coma.excitation: optically thin LTE line emission.

Physics checks compare with the column-density relation of Mangum & Shirley
(2015, PASP 127, 266) with astropy's brightness-temperature equivalency, the
Planck function of astropy.modeling, level populations summed directly over a
rigid rotor's levels, the CDMS partition-function table, and the closed form of
the peak optical depth written in frequency units.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.modeling.models import BlackBody
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose

from pipeline.catalogue.entries import Line, load_catalogue
from pipeline.errors import CatalogueError, OpacityWarning
from pipeline.coma.excitation import (T_CMB, background_factor, flux_per_molecule, line_optical_depth,
                                      upper_level_fraction)

CAT = load_catalogue()
CO = CAT.get_species("CO")
CO21 = CAT.get_line("CO_230538")
HCN = CAT.get_species("HCN")
HCN32 = CAT.get_line("HCN_265886")
CH3OH = CAT.get_species("CH3OH")


def planck_ratio(freq, t_bg, t_ex):
    """B_nu(T_bg) / B_nu(T_ex) from astropy's BlackBody model."""
    return (BlackBody(temperature=t_bg)(freq) / BlackBody(temperature=t_ex)(freq)).decompose().value


def direct_partition(b, t_k, j_max=400):
    """Q = sum_J (2J+1) exp(-h B J(J+1)/kT), summed directly."""
    x = (const.h * b / (const.k_B * t_k * u.K)).decompose().value
    j = np.arange(j_max + 1.0)
    return float(np.sum((2 * j + 1) * np.exp(-x * j * (j + 1))))


def rotor_levels(species, j_max=400):
    """Line objects (only E_up and g_up matter) for every level J = 0..j_max of a rigid rotor."""
    b = species.rot_b
    out = []
    for j in range(j_max + 1):
        e = (const.h * b * j * (j + 1) / const.k_B).to(u.K)
        out.append(Line(line_id=f"J{j}", species=species.name, transition=f"J={j}",
                        freq=2 * b * max(j, 1), a_ul=1e-6 / u.s, e_up=e, g_up=2.0 * j + 1))
    return out


# ----------------------------------------------------------------------------- populations
@pytest.mark.parametrize("t_k", [10.0, 20.0, 40.0, 80.0])
def test_level_fractions_sum_to_one(t_k):
    # Boltzmann populations over all levels of a linear rotor sum to 1 (direct sum); the
    # catalogue's high-temperature Q is good to 0.5 % from 10 K
    total = sum(float(upper_level_fraction(ln, CO, t_k * u.K)) for ln in rotor_levels(CO))
    assert_allclose(total, 1.0, rtol=5e-3)


def test_upper_level_fraction_boltzmann():
    # f_u = g_u exp(-E_u/kT) / Q, with Q summed directly (Boltzmann distribution); HCN carries the 14N
    # nuclear-spin factor 3 in both g_u = 3(2J+1) = 21 and Q (CDMS 027501), which cancels
    temps = np.array([10.0, 30.0, 90.0])
    got = upper_level_fraction(HCN32, HCN, temps * u.K)
    assert HCN32.g_up == 21
    expected = [7 * np.exp(-HCN32.e_up.to_value(u.K) / t) / direct_partition(HCN.rot_b, t) for t in temps]
    assert got.shape == (3,)
    assert_allclose(got, expected, rtol=5e-3)


@pytest.mark.parametrize("t_k, log_q", [(9.375, 1.8931), (18.75, 2.4393), (37.5, 2.9642), (75.0, 3.4660)])
def test_upper_level_fraction_of_a_tabulated_species(t_k, log_q):
    # CH3OH 5(0)-4(0) A+: f_u = g_u exp(-E_u/kT) / Q with g_u = 4(2J+1) = 44, E_u = 34.817 K and Q from the
    # CDMS 032504 partition-function table (partfunc.cat: log10 Q given beside each temperature)
    line = CAT.get_line("CH3OH_241791")
    expected = 44 * np.exp(-34.817 / t_k) / 10**log_q
    assert_allclose(upper_level_fraction(line, CH3OH, t_k * u.K), expected, rtol=1e-4)


def test_ladder_ratios_follow_boltzmann():
    # within one species the ratio of two upper-level fractions is g_1/g_2 exp(-(E_1 - E_2)/kT) whatever Q
    # is (Boltzmann distribution): CH3OH 5(0)-4(0) A+ against 5(4)-4(4) E of the same J = 5-4 ladder
    a, b = CAT.get_line("CH3OH_241791"), CAT.get_line("CH3OH_241830")
    temps = np.array([12.0, 33.0, 70.0])
    ratio = upper_level_fraction(a, CH3OH, temps * u.K) / upper_level_fraction(b, CH3OH, temps * u.K)
    assert_allclose(ratio, np.exp(-(a.e_up - b.e_up).to_value(u.K) / temps), rtol=1e-12)


# ----------------------------------------------------------------------------- background
def test_background_factor_against_planck():
    # 1 - B_nu(T_bg)/B_nu(T_ex) with astropy's Planck function
    freq = 230.538 * u.GHz
    for t_ex in [3.5, 10.0, 40.0, 300.0] * u.K:
        assert_allclose(background_factor(freq, t_ex), 1 - planck_ratio(freq, T_CMB, t_ex), rtol=1e-10)


def test_background_factor_limits():
    freq = 265.886 * u.GHz
    # T_bg -> 0: no background to absorb, the factor tends to 1 (exactly 1 at 0 K)
    assert_allclose(background_factor(freq, 20 * u.K, 0.5 * u.K), 1.0, atol=1e-9)
    assert_allclose(background_factor(freq, 20 * u.K, 1e-3 * u.K), 1.0, atol=1e-15)
    assert background_factor(freq, 20 * u.K, 0 * u.K) == 1.0
    # T_ex = T_bg: the line vanishes against the background
    assert_allclose(background_factor(freq, T_CMB, T_CMB), 0.0, atol=1e-15)
    assert_allclose(background_factor(freq, 8 * u.K, 8 * u.K), 0.0, atol=1e-15)
    # T_ex < T_bg: absorption (negative), as the Planck ratio says
    assert_allclose(background_factor(freq, 2.0 * u.K), 1 - planck_ratio(freq, T_CMB, 2.0 * u.K), rtol=1e-10)
    # cold excitation: no overflow, factor -> 1 - B(T_bg)/B(T_ex) -> -inf smoothly
    assert np.isfinite(background_factor(freq, 0.3 * u.K))


def test_background_factor_broadcasts():
    freq = [100.0, 230.0, 345.0] * u.GHz
    t_ex = [[10.0], [40.0]] * u.K
    got = background_factor(freq, t_ex)
    assert got.shape == (2, 3)
    assert_allclose(got[1, 2], 1 - planck_ratio(345 * u.GHz, T_CMB, 40 * u.K), rtol=1e-10)


# ----------------------------------------------------------------------------- line flux
@pytest.mark.parametrize("line, species", [(CO21, CO), (HCN32, HCN)])
def test_flux_per_molecule_against_rayleigh_jeans_column(line, species):
    # Mangum & Shirley 2015 (PASP 127, 266), optically thin, Rayleigh-Jeans:
    # N_u = 8 pi k nu^2 W / (h c^3 A_ul), W = int T_B dv.  A source filling a beam of solid
    # angle omega at distance delta with integrated flux F has W from astropy's
    # brightness_temperature equivalency and holds N_u * omega * delta^2 upper-level molecules.
    t_ex, delta, omega = 300 * u.K, 0.6 * u.au, 2e-10 * u.sr
    f_int = 1.7 * u.Jy * u.km / u.s
    nu = line.freq
    w = (f_int / (u.km / u.s)).to(u.K, u.brightness_temperature(nu, beam_area=omega)) * (u.km / u.s)
    n_u = (8 * np.pi * const.k_B * nu**2 * w / (const.h * const.c**3 * line.a_ul)).to(u.cm**-2)
    upper_molecules = (n_u * omega.to_value(u.sr) * delta**2).decompose()
    # per molecule, with the background factor (Planck ratio, astropy) removed
    per_molecule = flux_per_molecule(line, species, t_ex, delta)
    per_upper = per_molecule / upper_level_fraction(line, species, t_ex)
    per_upper /= 1 - planck_ratio(nu, T_CMB, t_ex)
    assert_quantity_allclose(per_upper * upper_molecules, f_int, rtol=1e-9)


def test_flux_per_molecule_inverse_square_and_shape():
    temps = [10.0, 20.0, 40.0, 80.0] * u.K
    near = flux_per_molecule(CO21, CO, temps, 0.5 * u.au)
    far = flux_per_molecule(CO21, CO, temps, 1.5 * u.au)
    assert near.shape == (4,)
    assert near.unit == u.Jy * u.km / u.s
    assert_allclose((near / far).value, 9.0, rtol=1e-12)  # inverse-square law
    assert np.all(near > 0)


def test_flux_per_molecule_explicit():
    # F = f_u h nu A / (4 pi delta^2) * (1 - B(T_bg)/B(T)), int S dv = F c / nu; constants from astropy,
    # Q summed directly, Planck ratio from astropy.modeling
    t_ex, delta = 40 * u.K, 1 * u.au
    q = direct_partition(CO.rot_b, 40.0)
    f_u = 5 * np.exp(-CO21.e_up.to_value(u.K) / 40.0) / q
    power = f_u * const.h * CO21.freq * CO21.a_ul / (4 * np.pi * delta**2)
    power *= 1 - planck_ratio(CO21.freq, T_CMB, t_ex)
    expected = (power * const.c / CO21.freq).to(u.Jy * u.km / u.s)
    assert_quantity_allclose(flux_per_molecule(CO21, CO, t_ex, delta), expected, rtol=5e-3)


# ----------------------------------------------------------------------------- optical depth
def tau_closed_form(line, species, t_k, column, fwhm):
    """Mangum & Shirley 2015 eq. 29 in frequency units: tau_0 = c^2 A N_u (e^x - 1) phi(0) / (8 pi nu^2),
    phi(0) = sqrt(4 ln 2 / pi) / dnu for a Gaussian of FWHM dnu = nu dv / c; N_u from a direct-sum Q."""
    nu = line.freq
    q_direct = species.multiplicity * direct_partition(species.rot_b, t_k)  # x3 for HCN (14N, CDMS 027501)
    n_u = column * line.g_up * np.exp(-line.e_up.to_value(u.K) / t_k) / q_direct
    x = (const.h * nu / (const.k_B * t_k * u.K)).decompose().value
    dnu = nu * fwhm / const.c
    phi0 = np.sqrt(4 * np.log(2) / np.pi) / dnu
    return (const.c**2 * line.a_ul * n_u * np.expm1(x) * phi0 / (8 * np.pi * nu**2)).decompose().value


def test_optical_depth_thin_matches_closed_form():
    column, fwhm = 1e12 * u.cm**-2, 1.2 * u.km / u.s
    tau = line_optical_depth(HCN32, HCN, 30 * u.K, column, fwhm)
    assert tau < 0.1  # no warning (pytest turns warnings into errors)
    assert_allclose(tau, tau_closed_form(HCN32, HCN, 30.0, column, fwhm), rtol=5e-3)


def test_optical_depth_warns_above_threshold():
    column, fwhm = 1e15 * u.cm**-2, 1.2 * u.km / u.s
    with pytest.warns(OpacityWarning, match="HCN_265886: peak optical depth .* exceeds 0.1"):
        tau = line_optical_depth(HCN32, HCN, 30 * u.K, column, fwhm)
    assert tau > 0.1
    assert_allclose(tau, tau_closed_form(HCN32, HCN, 30.0, column, fwhm), rtol=5e-3)
    # a custom threshold
    with pytest.warns(OpacityWarning, match="exceeds 1e-06"):
        line_optical_depth(CO21, CO, 30 * u.K, 1e12 * u.cm**-2, fwhm, warn_above=1e-6)


def test_optical_depth_scales_with_column_and_width():
    fwhm = 1.0 * u.km / u.s
    t1 = line_optical_depth(CO21, CO, 20 * u.K, 1e13 * u.cm**-2, fwhm)
    t2 = line_optical_depth(CO21, CO, 20 * u.K, 3e13 * u.cm**-2, 2 * fwhm)
    assert_allclose(t2 / t1, 1.5, rtol=1e-12)


def test_optical_depth_bad_width():
    with pytest.raises(CatalogueError, match="linewidth must be positive"):
        line_optical_depth(CO21, CO, 20 * u.K, 1e13 * u.cm**-2, 0 * u.km / u.s)


def test_flux_per_molecule_kept_per_process_is_the_computed_one():
    # the injection asks the same values for every sky position, so results are kept per process by the entries'
    # identity and the quantities' exact values: a kept result equals a fresh computation (closed form below:
    # F = f_u h nu A_ul / (4 pi Delta^2) (1 - B(T_bg)/B(T)) c / nu), callers get their own copy, and another
    # entry with other constants is not answered from the first one's result
    from dataclasses import replace

    from pipeline.coma import excitation

    t, delta = [20.0, 60.0] * u.K, 0.8 * u.au
    excitation._FLUX.clear()
    first = flux_per_molecule(HCN32, HCN, t, delta)
    frac = upper_level_fraction(HCN32, HCN, t)
    closed = (frac * background_factor(HCN32.freq, t, T_CMB) * const.h * HCN32.a_ul
              / (4 * np.pi * delta**2) * const.c).to(u.Jy * u.km / u.s)
    assert_quantity_allclose(first, closed, rtol=1e-12)
    first[0] = 0 * u.Jy * u.km / u.s                              # the caller's copy: the kept value is untouched
    again = flux_per_molecule(HCN32, HCN, t, delta)
    assert_quantity_allclose(again, closed, rtol=1e-12)
    assert len(excitation._FLUX) == 1
    stronger = replace(HCN32, a_ul=2 * HCN32.a_ul)
    assert_quantity_allclose(flux_per_molecule(stronger, HCN, t, delta), 2 * closed, rtol=1e-12)
    assert not np.any(flux_per_molecule(HCN32, HCN, t, 0.9 * u.au) == again)   # another distance: computed
    # a scalar temperature and a one-element array of it are kept apart (their results' shapes differ)
    assert flux_per_molecule(HCN32, HCN, [20.0] * u.K, delta).shape == (1,)
    assert flux_per_molecule(HCN32, HCN, 20.0 * u.K, delta).shape == ()
