"""Tests of pipeline.coma.conversion: fluxes <-> molecules <-> production rates.

Physics checks compare with a hand-worked example of the Mangum & Shirley (2015,
PASP 127, 266) column-density relation, astropy's brightness_temperature
equivalency with radio_beam's Gaussian beam solid angle, the fluorescence band
flux written with astropy constants, and closed-form limits of the Haser model
written out here (not taken from pipeline.coma.haser).
"""

import math

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose

from pipeline.coma import conversion as cv
from pipeline.catalogue.entries import Line, Species, load_catalogue
from pipeline.errors import CatalogueError, ConfigError, EphemerisError, GasledgerError, GasledgerTypeError

CAT = load_catalogue()
CO = CAT.get_species("CO")
CO21 = CAT.get_line("CO_230538")
HCN = CAT.get_species("HCN")
HCN32 = CAT.get_line("HCN_265886")
LINES = [pytest.param(ln, id=ln.line_id) for ln in CAT.lines]
KMS = u.km / u.s
JYKMS = u.Jy * KMS

# a made-up daughter of HCN, and a made-up line of it
DAUGHTER = Species(name="DAU", mass=26.0 * u.u, partition="linear", rot_a=0 * u.GHz, rot_b=56.0 * u.GHz,
                   rot_c=0 * u.GHz, multiplicity=1.0, photo_quiet=3e-6 / u.s, photo_active=5e-6 / u.s,
                   parent="HCN")
DAUGHTER_LINE = Line(line_id="DAU_226", species="DAU", transition="N=2-1", freq=226.0 * u.GHz,
                     a_ul=1.1e-4 / u.s, e_up=16.3 * u.K, g_up=5.0)

# made-up infrared bands (wavelength, g at 1 au, photodestruction rate at 1 au); catalogue bands if any
BANDS = [pytest.param(2.7 * u.um, 3.0e-4 / u.s, 1.2e-5 / u.s, id="test-2.7um"),
         pytest.param(4.3 * u.um, 2.5e-3 / u.s, 2.0e-6 / u.s, id="test-4.3um"),
         pytest.param(4.7 * u.um, 2.0e-4 / u.s, 8.0e-7 / u.s, id="test-4.7um")]
for _band in getattr(CAT, "bands", ()):
    BANDS.append(pytest.param(_band.wavelength, _band.g_1au, CAT.get_species(_band.species).photo_quiet,
                              id=f"catalogue-{_band.species}-{_band.wavelength}"))

T_GRID = np.array([12.0, 35.0, 90.0]) * u.K
RHO_GRID = np.array([150.0, 4e3, 9e4, np.inf]) * u.km
R_H, DELTA, SPEED = 1.3 * u.au, 0.7 * u.au, 0.75 * KMS


# ----------------------------------------------------------------------------- round trips
@pytest.mark.parametrize("line", LINES)
def test_round_trip_line_flux_every_catalogue_line(line):
    # Q -> flux -> Q is exact: the inverse maps divide by the same positive factor
    species = CAT.get_species(line.species)
    parent = CAT.get_species(species.parent) if species.parent else None  # e.g. CS, the daughter of CS2
    q = np.array([[3e27], [-2e25], [1e29]]) / u.s  # broadcast against T (3, 1) x aperture (4,)
    t = T_GRID[:, None]
    for activity in ("quiet", "active"):
        flux = cv.line_flux_from_production_rate(q, line, species, t, RHO_GRID, R_H, DELTA, SPEED, activity,
                                                 parent=parent)
        assert flux.unit == JYKMS and flux.shape == (3, 4)
        back = cv.production_rate_from_line_flux(flux, line, species, t, RHO_GRID, R_H, DELTA, SPEED, activity,
                                                 parent=parent)
        assert_quantity_allclose(back, q * np.ones(4), rtol=1e-12)


@pytest.mark.parametrize("line", LINES)
def test_round_trip_stepwise_every_catalogue_line(line):
    # Q -> aperture / beam count -> flux / brightness -> molecules -> Q, each step exact
    species = CAT.get_species(line.species)
    length = 2e5 * u.km
    q = 4e27 / u.s
    n_ap = cv.aperture_count_from_production_rate(q, RHO_GRID, SPEED, length)
    flux = cv.line_flux_from_molecules(n_ap, line, species, T_GRID[:, None], DELTA)
    n_back = cv.molecules_from_line_flux(flux, line, species, T_GRID[:, None], DELTA)
    assert_quantity_allclose(cv.production_rate_from_aperture_count(n_back, RHO_GRID, SPEED, length),
                             np.full((3, 4), 4e27) / u.s, rtol=1e-12)
    fwhm_angle = [4.0, 11.0, 30.0] * u.arcsec
    fwhm_length = (fwhm_angle.to_value(u.rad) * DELTA).to(u.km)
    n_b = cv.beam_count_from_production_rate(q, fwhm_length, SPEED, length, 7e4 * u.km)
    w = cv.beam_brightness_from_molecules(n_b, line, species, T_GRID, DELTA, fwhm_angle)
    n_b_back = cv.molecules_from_beam_brightness(w, line, species, T_GRID, DELTA, fwhm_angle)
    assert_quantity_allclose(cv.production_rate_from_beam_count(n_b_back, fwhm_length, SPEED, length,
                                                                7e4 * u.km), [4e27] * 3 / u.s, rtol=1e-12)


def test_round_trip_daughter_species():
    q = 2.5e26 / u.s
    flux = cv.line_flux_from_production_rate(q, DAUGHTER_LINE, DAUGHTER, T_GRID[:, None], RHO_GRID, R_H,
                                             DELTA, SPEED, parent=HCN)
    back = cv.production_rate_from_line_flux(flux, DAUGHTER_LINE, DAUGHTER, T_GRID[:, None], RHO_GRID, R_H,
                                             DELTA, SPEED, parent=HCN)
    assert_quantity_allclose(back, np.full((3, 4), 2.5e26) / u.s, rtol=1e-12)


@pytest.mark.parametrize("wavelength, g_1au, beta", BANDS)
def test_round_trip_band_flux(wavelength, g_1au, beta):
    q = np.array([1e28, -4e26, 7e29]) / u.s
    for r_h in [0.4, 1.0, 3.5] * u.au:
        flux = cv.band_flux_from_production_rate(q[:, None], wavelength, g_1au, RHO_GRID, r_h, DELTA, SPEED,
                                                 beta)
        assert flux.unit == u.W / u.m**2 and flux.shape == (3, 4)
        back = cv.production_rate_from_band_flux(flux, wavelength, g_1au, RHO_GRID, r_h, DELTA, SPEED, beta)
        assert_quantity_allclose(back, q[:, None] * np.ones(4), rtol=1e-12)
        n = cv.molecules_from_band_flux(flux, wavelength, g_1au, r_h, DELTA)
        assert_quantity_allclose(cv.band_flux_from_molecules(n, wavelength, g_1au, r_h, DELTA), flux, rtol=1e-12)


# ----------------------------------------------------------------------------- mm: external checks
def test_line_flux_against_mangum_shirley_worked_example():
    # Hand-worked example of Mangum & Shirley 2015 (PASP 127, 266), optically thin, Rayleigh-Jeans
    # (the relations quoted from memory): N_u = 8 pi k nu^2 W / (h c^3 A_ul);
    # N_tot = N_u (Q / g_u) exp(E_u / T) / (1 - J(T_bg) / J(T)), J(T) = (h nu / k) / (exp(h nu / kT) - 1),
    # Q = kT / (hB) + 1/3 for a linear rotor.  CO J=2-1: nu = 230.538 GHz, A = 6.910e-7 s^-1, E_u = 16.596 K,
    # g_u = 5, B = 57.635968 GHz; T = 20 K, W = 1 K km/s, T_bg = 2.72548 K (CODATA 2018 constants):
    #   N_u = 1.4949e14 cm^-2, Q(20 K) = 7.5638, exp(E_u/T) = 2.2929,
    #   h nu / k = 11.0641 K, J(20 K) = 14.9754 K, J(T_bg) = 0.19429 K, 1 - J(T_bg)/J(T) = 0.98703,
    #   N_tot = 1.4949e14 * 7.5638 / 5 * 2.2929 / 0.98703 = 5.2533e14 cm^-2.
    # A uniform column filling a 10" Gaussian beam (Omega = pi theta^2 / (4 ln 2) = 2.6633e-9 sr) at 1 au
    # (Delta^2 = 2.23796e26 cm^2) holds N_B = N_tot Omega Delta^2 = 3.1311e32 beam-weighted molecules, and its
    # beam flux is int S dv = 2 k nu^2 Omega W / c^2 = 4.3488 Jy km/s.
    n_b = cv.molecules_from_beam_brightness(1 * u.K * KMS, CO21, CO, 20 * u.K, 1 * u.au, 10 * u.arcsec)
    assert_allclose(n_b.to_value(u.one), 3.1311e32, rtol=2e-4)
    flux = cv.line_flux_from_molecules(3.1311e32, CO21, CO, 20 * u.K, 1 * u.au)
    assert_quantity_allclose(flux, 4.3488 * JYKMS, rtol=2e-4)
    assert_allclose(cv.molecules_from_line_flux(4.3488 * JYKMS, CO21, CO, 20 * u.K, 1 * u.au).value,
                    3.1311e32, rtol=2e-4)


@pytest.mark.parametrize("line, species", [(CO21, CO), (HCN32, HCN)])
def test_beam_brightness_against_astropy_equivalency(line, species):
    # W = int T_B dv and int S dv of the same molecules are related by astropy's Rayleigh-Jeans
    # brightness_temperature equivalency with the Gaussian beam solid angle from radio_beam
    n = np.array([2e30, 5e31])
    for fwhm in [3.0, 12.0] * u.arcsec:
        omega = radio_beam.Beam(major=fwhm).sr
        for t in [15.0, 60.0] * u.K:
            w = cv.beam_brightness_from_molecules(n, line, species, t, 0.5 * u.au, fwhm)
            flux = cv.line_flux_from_molecules(n, line, species, t, 0.5 * u.au)
            expected = (flux / KMS).to(u.K, u.brightness_temperature(line.freq, beam_area=omega)) * KMS
            assert w.unit == u.K * KMS
            assert_quantity_allclose(w, expected, rtol=1e-10)
            # and the inverse, from a brightness through astropy to a flux
            w_in = [0.3, 2.0] * u.K * KMS
            s = (w_in / KMS).to(u.Jy, u.brightness_temperature(line.freq, beam_area=omega)) * KMS
            assert_quantity_allclose(cv.molecules_from_beam_brightness(w_in, line, species, t, 0.5 * u.au, fwhm),
                                     cv.molecules_from_line_flux(s, line, species, t, 0.5 * u.au), rtol=1e-10)


def test_full_chain_small_aperture_closed_form():
    # rho << L: Q = 2 v N / (pi rho) (Haser, closed form), N = F / f_1 with the optically thin LTE flux of one
    # molecule f_1 = (c / nu) h nu A g_u exp(-E_u/T) / Q(T) / (4 pi Delta^2) (1 - B(T_bg)/B(T)), written here
    # with astropy constants, Q(T) = kT/(hB) + 1/3 and astropy's Planck function
    from astropy.modeling.models import BlackBody
    t, rho, flux = 30 * u.K, 1.0 * u.km, 0.2 * JYKMS
    nu = CO21.freq
    q_t = (const.k_B * t / (const.h * CO.rot_b)).decompose().value + 1 / 3
    bg = 1 - (BlackBody(2.72548 * u.K)(nu) / BlackBody(t)(nu)).decompose().value
    f_1 = (const.c / nu * const.h * nu * CO21.a_ul * 5 * np.exp(-CO21.e_up / t) / q_t / (4 * np.pi * DELTA**2)
           * bg).to(JYKMS)
    expected = (2 * SPEED * (flux / f_1) / (np.pi * rho)).to(1 / u.s)
    got = cv.production_rate_from_line_flux(flux, CO21, CO, t, rho, R_H, DELTA, SPEED)
    assert_quantity_allclose(got, expected, rtol=2e-5)  # L ~ 2e6 km: (rho/L) ln(L/rho) ~ 1e-5


def test_full_chain_daughter_whole_coma():
    # rho -> inf: a daughter's content is Q L_d / v (Haser), L_d = v r_h^2 / beta_d (r_h in au)
    flux = 0.05 * JYKMS
    n = cv.molecules_from_line_flux(flux, DAUGHTER_LINE, DAUGHTER, 25 * u.K, DELTA)
    l_d = SPEED * 1.3**2 / DAUGHTER.photo_quiet
    got = cv.production_rate_from_line_flux(flux, DAUGHTER_LINE, DAUGHTER, 25 * u.K, np.inf * u.km, R_H, DELTA,
                                            SPEED, parent=HCN)
    assert_quantity_allclose(got, (n * SPEED / l_d).to(1 / u.s), rtol=1e-10)


# ----------------------------------------------------------------------------- Haser step: closed forms
def test_aperture_count_small_aperture_closed_form():
    # L >> rho: N_ap = pi Q rho / (2 v), i.e. Q = 2 v N / (pi rho) (Haser closed form)
    n, v, length = 3e31, 0.6 * KMS, 1e9 * u.km
    rho = [50.0, 800.0] * u.km
    expected = (2 * v * n / (np.pi * rho)).to(1 / u.s)
    assert_quantity_allclose(cv.production_rate_from_aperture_count(n, rho, v, length), expected, rtol=1e-5)
    assert_quantity_allclose(cv.aperture_count_from_production_rate(expected, rho, v, length),
                             [n, n] * u.one, rtol=1e-5)


def test_aperture_count_whole_coma_closed_form():
    # rho -> inf: N = Q L / v for a parent and Q L_d / v for a daughter (Haser total content)
    n, v = 5e30, 0.9 * KMS
    lp, ld = 3e5 * u.km, 8e4 * u.km
    assert_quantity_allclose(cv.production_rate_from_aperture_count(n, np.inf * u.km, v, lp),
                             (n * v / lp).to(1 / u.s), rtol=1e-12)
    assert_quantity_allclose(cv.production_rate_from_aperture_count(n, np.inf * u.km, v, lp, ld),
                             (n * v / ld).to(1 / u.s), rtol=1e-10)


def test_beam_count_long_scale_length_closed_form():
    # L >> theta: column Q / (4 v rho), so N_B = int 2 pi rho Q/(4 v rho) exp(-4 ln2 rho^2/theta^2) drho
    #   = (pi Q theta / (4 v)) sqrt(pi / (4 ln 2))  (Gaussian integral)
    n, v, length = 2e31, 0.7 * KMS, 1e10 * u.km
    theta = [300.0, 2e3] * u.km
    expected = (4 * v * n / (np.pi * theta * math.sqrt(math.pi / (4 * math.log(2))))).to(1 / u.s)
    assert_quantity_allclose(cv.production_rate_from_beam_count(n, theta, v, length), expected, rtol=1e-5)
    assert_quantity_allclose(cv.beam_count_from_production_rate(expected, theta, v, length), [n, n] * u.one,
                             rtol=1e-5)


# ----------------------------------------------------------------------------- infrared
def test_band_flux_hand_computation():
    # F = N g_1au (r_h/au)^-2 h c / lambda / (4 pi Delta^2) (standard cometary fluorescence relation,
    # from memory), constants from astropy; by hand: h c / 4.3 um = 4.6196e-20 J and
    # F = 1e30 * 2.5e-3 / 1.6^2 * 4.6196e-20 J / (4 pi (0.9 au)^2) = 1.9804e-16 W m^-2
    n, lam, g, r_h, delta = 1e30, 4.3 * u.um, 2.5e-3 / u.s, 1.6 * u.au, 0.9 * u.au
    expected = (n * g * (r_h / u.au).decompose() ** -2 * const.h * const.c / lam / (4 * np.pi * delta**2))
    got = cv.band_flux_from_molecules(n, lam, g, r_h, delta)
    assert got.unit == u.W / u.m**2
    assert_quantity_allclose(got, expected.to(u.W / u.m**2), rtol=1e-12)
    assert_quantity_allclose(got, 1.9804e-16 * u.W / u.m**2, rtol=1e-4)
    assert_quantity_allclose(cv.molecules_from_band_flux(expected, lam, g, r_h, delta), n * u.one, rtol=1e-12)


def test_fluorescence_efficiency_inverse_square():
    # g(r_h) = g_1au (r_h / 1 au)^-2: the pumping follows the solar flux
    g = 2.5e-3 / u.s
    r_h = [0.5, 1.0, 2.0, 4.0] * u.au
    assert_quantity_allclose(cv.fluorescence_efficiency(g, r_h), g * [4.0, 1.0, 0.25, 0.0625], rtol=1e-14)
    assert_quantity_allclose(cv.fluorescence_efficiency(g, 1.5e8 * u.km), g * (const.au / (1.5e8 * u.km)) ** 2,
                             rtol=1e-14)
    near = cv.band_flux_from_molecules(1e29, 2.7 * u.um, 3e-4 / u.s, 1.0 * u.au, DELTA)
    far = cv.band_flux_from_molecules(1e29, 2.7 * u.um, 3e-4 / u.s, 3.0 * u.au, DELTA)
    assert_allclose((near / far).decompose().value, 9.0, rtol=1e-14)


def test_band_production_rate_small_aperture_closed_form():
    # rho << L: Q = 2 v N / (pi rho), N = 4 pi Delta^2 F lambda / (h c g(r_h)), astropy constants
    flux, lam, g, beta, rho = 3e-17 * u.W / u.m**2, 2.7 * u.um, 3e-4 / u.s, 1.2e-5 / u.s, 2.0 * u.km
    n = (4 * np.pi * DELTA**2 * flux * lam / (const.h * const.c * g / 1.3**2)).decompose()
    expected = (2 * SPEED * n / (np.pi * rho)).to(1 / u.s)
    got = cv.production_rate_from_band_flux(flux, lam, g, rho, R_H, DELTA, SPEED, beta)
    assert_quantity_allclose(got, expected, rtol=1e-4)  # L ~ 1e5 km: (rho/L) ln(L/rho) ~ 1e-4


# ----------------------------------------------------------------------------- vectorisation
def test_vectorised_line_chain_equals_loop():
    flux = 0.4 * JYKMS
    grid = cv.production_rate_from_line_flux(flux, HCN32, HCN, T_GRID[:, None], RHO_GRID, R_H, DELTA, SPEED)
    assert grid.shape == (3, 4)
    for i, t in enumerate(T_GRID):
        for j, rho in enumerate(RHO_GRID):
            one = cv.production_rate_from_line_flux(flux, HCN32, HCN, t, rho, R_H, DELTA, SPEED)
            assert one.shape == ()
            assert_quantity_allclose(grid[i, j], one, rtol=1e-12)


def test_vectorised_beam_and_band_equal_loop():
    fwhm = [2.0, 8.0, 20.0] * u.arcsec
    n = cv.molecules_from_beam_brightness(0.7 * u.K * KMS, CO21, CO, T_GRID[:, None], DELTA, fwhm)
    assert n.shape == (3, 3)
    for i, t in enumerate(T_GRID):
        for j, f in enumerate(fwhm):
            assert_quantity_allclose(n[i, j], cv.molecules_from_beam_brightness(0.7 * u.K * KMS, CO21, CO, t,
                                                                                DELTA, f), rtol=1e-13)
    lengths = [1e3, 4e4, 1e6] * u.km
    counts = cv.beam_count_from_production_rate(1e27 / u.s, lengths[:, None], SPEED, 5e4 * u.km)
    q_band = cv.production_rate_from_band_flux(1e-16 * u.W / u.m**2, 4.3 * u.um, 2.5e-3 / u.s, RHO_GRID,
                                               R_H, DELTA, SPEED, 2e-6 / u.s)
    for i, ell in enumerate(lengths):
        assert_quantity_allclose(counts[i, 0],
                                 cv.beam_count_from_production_rate(1e27 / u.s, ell, SPEED, 5e4 * u.km),
                                 rtol=1e-12)
    for j, rho in enumerate(RHO_GRID):
        assert_quantity_allclose(q_band[j], cv.production_rate_from_band_flux(
            1e-16 * u.W / u.m**2, 4.3 * u.um, 2.5e-3 / u.s, rho, R_H, DELTA, SPEED, 2e-6 / u.s), rtol=1e-12)


def test_negative_flux_passes_through_linearly():
    # a noisy measurement may be negative: the conversion is linear (Q(-F) = -Q(F))
    plus = cv.production_rate_from_line_flux(0.3 * JYKMS, CO21, CO, 30 * u.K, 1e3 * u.km, R_H, DELTA, SPEED)
    minus = cv.production_rate_from_line_flux(-0.3 * JYKMS, CO21, CO, 30 * u.K, 1e3 * u.km, R_H, DELTA, SPEED)
    assert plus > 0
    assert_quantity_allclose(minus, -plus, rtol=1e-15)


# ----------------------------------------------------------------------------- errors
def test_distance_errors_name_the_argument():
    with pytest.raises(EphemerisError, match="'delta' must be > 0"):
        cv.line_flux_from_molecules(1e30, CO21, CO, 20 * u.K, 0 * u.au)
    with pytest.raises(EphemerisError, match="'r_h' must be > 0"):
        cv.production_rate_from_line_flux(1 * JYKMS, CO21, CO, 20 * u.K, 1e3 * u.km, -1 * u.au, DELTA, SPEED)
    with pytest.raises(EphemerisError, match="'r_h'"):
        cv.fluorescence_efficiency(1e-3 / u.s, [1.0, 0.0] * u.au)
    with pytest.raises(EphemerisError, match="'delta'"):
        cv.molecules_from_band_flux(1e-17 * u.W / u.m**2, 3 * u.um, 1e-3 / u.s, 1 * u.au, -2 * u.au)


def test_scale_errors_name_the_argument():
    with pytest.raises(ConfigError, match="'rho_ap' must be > 0"):
        cv.production_rate_from_aperture_count(1e30, 0 * u.km, SPEED, 1e5 * u.km)
    with pytest.raises(ConfigError, match="'beam_fwhm' must be > 0"):
        cv.molecules_from_beam_brightness(1 * u.K * KMS, CO21, CO, 20 * u.K, DELTA, 0 * u.arcsec)
    with pytest.raises(ConfigError, match="'beam_fwhm_length' must be > 0"):
        cv.beam_count_from_production_rate(1e27 / u.s, -5 * u.km, SPEED, 1e5 * u.km)
    with pytest.raises(ConfigError, match="'wavelength' must be > 0"):
        cv.band_flux_from_molecules(1e30, 0 * u.um, 1e-3 / u.s, 1 * u.au, 1 * u.au)
    with pytest.raises(ConfigError, match="'g_1au' must be > 0"):
        cv.band_flux_from_molecules(1e30, 3 * u.um, -1e-3 / u.s, 1 * u.au, 1 * u.au)
    with pytest.raises(ConfigError, match="'photo_rate_1au' must be > 0"):
        cv.production_rate_from_band_flux(1e-17 * u.W / u.m**2, 3 * u.um, 1e-3 / u.s, 1e3 * u.km, R_H, DELTA,
                                          SPEED, 0 / u.s)
    with pytest.raises(ConfigError, match="'length_daughter' must be > 0"):
        cv.production_rate_from_aperture_count(1e30, 1e3 * u.km, SPEED, 1e5 * u.km, 0 * u.km)
    with pytest.raises(ConfigError, match="'speed' must be > 0"):
        cv.aperture_count_from_production_rate(1e27 / u.s, 1e3 * u.km, 0 * KMS, 1e5 * u.km)
    # no emission above the background: the flux per molecule is not positive
    with pytest.raises(ConfigError, match="'t_kin' = 2.0 K .* above the background"):
        cv.molecules_from_line_flux(1 * JYKMS, CO21, CO, [20.0, 2.0] * u.K, DELTA)
    with pytest.raises(ConfigError, match="'t_kin' must be > 0"):
        cv.line_flux_from_molecules(1e30, CO21, CO, 0 * u.K, DELTA)


def test_input_type_errors():
    with pytest.raises(GasledgerTypeError, match="'flux' must be a Quantity in units of Jy km / s"):
        cv.molecules_from_line_flux(1.0, CO21, CO, 20 * u.K, DELTA)
    with pytest.raises(ConfigError, match="'flux' must have units convertible to W / m2"):
        cv.molecules_from_band_flux(1 * JYKMS, 3 * u.um, 1e-3 / u.s, 1 * u.au, 1 * u.au)
    with pytest.raises(ConfigError, match="'w' must be a number and finite"):
        cv.molecules_from_beam_brightness(np.nan * u.K * KMS, CO21, CO, 20 * u.K, DELTA, 5 * u.arcsec)
    with pytest.raises(ConfigError, match="'q' must have units convertible to 1 / s"):
        cv.aperture_count_from_production_rate(1e27 * u.m, 1e3 * u.km, SPEED, 1e5 * u.km)
    with pytest.raises(GasledgerError):
        cv.production_rate_from_beam_count(np.inf, 1e3 * u.km, SPEED, 1e5 * u.km)
    with pytest.raises(ValueError):  # every project error is also a ValueError
        cv.line_flux_from_molecules(1e30, CO21, CO, 20 * u.K, 0 * u.au)


def test_parent_daughter_consistency_errors():
    with pytest.raises(CatalogueError, match="'DAU' is a daughter of 'HCN'; 'parent' must be that species, "
                                             "found None"):
        cv.production_rate_from_line_flux(1 * JYKMS, DAUGHTER_LINE, DAUGHTER, 20 * u.K, 1e3 * u.km, R_H, DELTA,
                                          SPEED)
    with pytest.raises(CatalogueError, match="found 'CO'"):
        cv.line_flux_from_production_rate(1e27 / u.s, DAUGHTER_LINE, DAUGHTER, 20 * u.K, 1e3 * u.km, R_H, DELTA,
                                          SPEED, parent=CO)
    with pytest.raises(CatalogueError, match="'CO' is a parent molecule"):
        cv.line_flux_from_production_rate(1e27 / u.s, CO21, CO, 20 * u.K, 1e3 * u.km, R_H, DELTA, SPEED,
                                          parent=HCN)
    with pytest.raises(CatalogueError, match="solar_activity"):
        cv.line_flux_from_production_rate(1e27 / u.s, CO21, CO, 20 * u.K, 1e3 * u.km, R_H, DELTA, SPEED, "loud")
