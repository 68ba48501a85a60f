"""Tests of pipeline.geometry.frames: observer frames and Doppler conversions.

Checks are made against astropy routines the module does not use
(SkyCoord.radial_velocity_correction, EarthLocation.get_gcrs_posvel, the solar
system ephemeris, astropy's LSRK definition), the relativistic Doppler formula,
astropy's doppler equivalencies, and common-practice magnitudes of the diurnal
(0.465 km/s at the equator) and annual (~30 km/s) observer motions.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import (FK4, GCRS, ICRS, EarthLocation, SkyCoord,
                                 UnitSphericalRepresentation, get_body_barycentric_posvel)
from astropy.tests.helper import assert_quantity_allclose
from astropy.time import Time
from numpy.testing import assert_allclose

import pipeline  # noqa: F401  (configures astropy for offline use)
from pipeline.errors import CubeError
from pipeline.offline import future_time_tolerated
from pipeline.geometry.frames import (observer_frame_factor, radio_velocity, to_target_frame,
                                     to_topocentric)

C_KMS = const.c.to_value(u.km / u.s)
# an arbitrary Earth-fixed site (not any real observatory)
SITE = EarthLocation.from_geodetic(10.0 * u.deg, -30.0 * u.deg, 2000.0 * u.m)
DIRECTIONS = [(10.0, 5.0), (100.0, -30.0), (250.0, 60.0)]  # (ra, dec) in deg

with future_time_tolerated():
    T_OBS = Time("2031-03-20T04:00:00", scale="utc")


def velocity(factor: float) -> float:
    """Observer-frame velocity v = c (1 - D) in km/s (positive: observer approaching the target)."""
    return C_KMS * (1.0 - factor)


# ----------------------------------------------------------------------------- frames
@pytest.mark.parametrize("ra, dec", DIRECTIONS)
def test_barycentric_against_radial_velocity_correction(ra, dec):
    # astropy SkyCoord.radial_velocity_correction('barycentric'); agreement to 10 m/s.  The
    # correction also carries the gravitational redshift at the site (~3 m/s) and the
    # transverse time dilation (~1.5 m/s), which a pure change of frame does not.
    d = observer_frame_factor("BARYCENT", T_OBS, SITE, ra * u.deg, dec * u.deg)
    with future_time_tolerated():
        corr = SkyCoord(ra * u.deg, dec * u.deg).radial_velocity_correction(
            "barycentric", obstime=T_OBS, location=SITE)
    assert abs(velocity(d) - corr.to_value(u.km / u.s)) < 0.010


@pytest.mark.parametrize("ra, dec", DIRECTIONS)
def test_geocentric_against_site_velocity(ra, dec):
    # the site's GCRS velocity (astropy EarthLocation.get_gcrs_posvel) projected on the target
    # direction, to 1 m/s
    d = observer_frame_factor("GEOCENTR", T_OBS, SITE, ra * u.deg, dec * u.deg)
    with future_time_tolerated():
        _, vel = SITE.get_gcrs_posvel(T_OBS)
        n = SkyCoord(ra * u.deg, dec * u.deg).transform_to(GCRS(obstime=T_OBS)).cartesian
    projected = (vel.x * n.x + vel.y * n.y + vel.z * n.z).to_value(u.km / u.s)
    assert abs(velocity(d) - projected) < 1e-3


def test_geocentric_diurnal_term_over_a_day():
    # Earth's equatorial rotation speed 0.465 km/s (common practice) bounds the diurnal term; over a
    # day it swings by +- omega p cos(dec), p the site's distance from the axis (astropy geocentric
    # coordinates), omega = 7.2921e-5 rad/s (Earth's sidereal rotation rate, from memory)
    ra, dec = 40.0 * u.deg, 20.0 * u.deg
    with future_time_tolerated():
        times = T_OBS + np.arange(24) * u.hour
    v = np.array([velocity(observer_frame_factor("GEOCENTR", t, SITE, ra, dec)) for t in times])
    assert np.all(np.abs(v) < 0.47)
    x, y, _ = SITE.geocentric
    amplitude = 7.2921e-5 * np.hypot(x, y).to_value(u.km) * np.cos(dec)
    assert_allclose(0.5 * (v.max() - v.min()), amplitude, rtol=0.01)  # 24 samples: <0.9 % short
    assert abs(v.mean()) < 0.02  # no mean offset


def test_geocentric_observer_at_geocentre():
    # with no site the observer is the geocentre: a GEOCENTR axis needs no correction
    d = observer_frame_factor("GEOCENTR", T_OBS, None, 123.0 * u.deg, -45.0 * u.deg)
    assert_allclose(d, 1.0, atol=1e-12)


@pytest.mark.parametrize("ra, dec", DIRECTIONS + [(270.0, 30.0), (90.0, -30.0)])
def test_lsrk_is_barycentric_plus_solar_motion(ra, dec):
    # astropy's LSRK: the Sun moves at 20 km/s towards (RA 18h, Dec +30 deg) of B1900; LSRK and
    # BARYCENT labels differ by the projection of that motion on the target direction
    d_bary = observer_frame_factor("BARYCENT", T_OBS, SITE, ra * u.deg, dec * u.deg)
    d_lsrk = observer_frame_factor("LSRK", T_OBS, SITE, ra * u.deg, dec * u.deg)
    with future_time_tolerated():
        apex = SkyCoord(ra=270 * u.deg, dec=30 * u.deg, frame=FK4(equinox="B1900")).transform_to(ICRS())
    projection = 20.0 * np.cos(apex.separation(SkyCoord(ra * u.deg, dec * u.deg)).to_value(u.rad))
    assert abs(C_KMS * (1 - d_lsrk / d_bary) - projection) < 0.005
    assert abs(C_KMS * (1 - d_lsrk / d_bary)) <= 20.0 + 1e-6


def test_annual_term_about_30_km_s():
    # towards the apex of Earth's orbital motion (astropy's built-in solar system ephemeris) the
    # barycentric correction is Earth's orbital speed, 29.3-30.3 km/s (common practice, from
    # memory), plus at most the 0.47 km/s diurnal term
    with future_time_tolerated():
        _, v_earth = get_body_barycentric_posvel("earth", T_OBS)
    speed = v_earth.norm().to_value(u.km / u.s)
    apex = v_earth.represent_as(UnitSphericalRepresentation)  # ICRS axes: lon = RA, lat = Dec
    ra, dec = apex.lon.to(u.deg), apex.lat.to(u.deg)
    v_toward = velocity(observer_frame_factor("BARYCENT", T_OBS, SITE, ra, dec))
    v_away = velocity(observer_frame_factor("BARYCENT", T_OBS, SITE, ra + 180 * u.deg, -dec))
    assert 29.2 < speed < 30.4
    assert abs(v_toward - speed) < 0.47
    assert abs(v_away + speed) < 0.47


def test_topocentric_is_exactly_one():
    assert observer_frame_factor("TOPOCENT", T_OBS, SITE, 10 * u.deg, 5 * u.deg) == 1.0
    freqs = [230.0, 231.0] * u.GHz
    assert np.all(to_topocentric(freqs, "TOPOCENT", T_OBS, SITE, 10 * u.deg, 5 * u.deg) == freqs.to(u.Hz))


@pytest.mark.parametrize("specsys", ["HELIOCEN", "SOURCE", "topocent", ""])
def test_unknown_specsys(specsys):
    with pytest.raises(CubeError, match=f"SPECSYS = '{specsys}' cannot be converted"):
        observer_frame_factor(specsys, T_OBS, SITE, 10 * u.deg, 5 * u.deg)


def test_to_topocentric_divides_by_factor():
    # f_topo = f_specsys / D for every channel (a change of observer velocity scales all frequencies)
    freqs = np.linspace(230.0, 231.0, 5) * u.GHz
    d = observer_frame_factor("BARYCENT", T_OBS, SITE, 100 * u.deg, -30 * u.deg)
    got = to_topocentric(freqs, "BARYCENT", T_OBS, SITE, 100 * u.deg, -30 * u.deg)
    assert_quantity_allclose(got, freqs / d, rtol=1e-14)
    # the barycentric correction (radial_velocity_correction, optical convention) moves a 230 GHz
    # line by f v / c, to the 10 m/s accuracy of the previous test
    with future_time_tolerated():
        corr = SkyCoord(100 * u.deg, -30 * u.deg).radial_velocity_correction(
            "barycentric", obstime=T_OBS, location=SITE).to_value(u.km / u.s)
    assert_allclose((got - freqs).to_value(u.kHz), (freqs * corr / C_KMS).to_value(u.kHz),
                    atol=(231 * u.GHz * 0.01 / C_KMS).to_value(u.kHz))


# ----------------------------------------------------------------------------- Doppler conversions
@pytest.mark.parametrize("delta_dot", [-45.0, -3.0, 0.0, 12.0, 60.0])
def test_to_target_frame_relativistic_doppler(delta_dot):
    # relativistic Doppler formula f_rest = f_obs sqrt((1 + beta) / (1 - beta)), beta = v/c, receding > 0
    f_obs = np.array([230.5, 265.9, 241.8]) * u.GHz
    beta = delta_dot / C_KMS
    expected = f_obs * np.sqrt((1 + beta) / (1 - beta))
    got = to_target_frame(f_obs, delta_dot * u.km / u.s)
    assert got.unit == u.Hz
    assert_quantity_allclose(got, expected, rtol=1e-13)
    # astropy's doppler_relativistic equivalency: f_obs relative to f_rest is a recession at delta_dot
    for fo, fr in zip(f_obs, got):
        v = fo.to(u.km / u.s, equivalencies=u.doppler_relativistic(fr))
        assert_allclose(v.to_value(u.km / u.s), delta_dot, atol=1e-8)


def test_to_target_frame_broadcasts():
    # a (channel) axis of frequencies against several range rates; relativistic Doppler formula
    f_obs = np.linspace(230.0, 231.0, 4) * u.GHz
    rates = np.array([[-10.0], [25.0]])
    got = to_target_frame(f_obs, rates * u.km / u.s)
    assert got.shape == (2, 4)
    beta = rates / C_KMS
    assert_quantity_allclose(got, f_obs * np.sqrt((1 + beta) / (1 - beta)), rtol=1e-13)


def test_radio_velocity():
    # astropy's doppler_radio equivalency and its closed form v = c (1 - f / f0)
    rest = 230.538 * u.GHz
    freqs = rest * (1 - np.array([-20.0, 0.0, 0.5, 35.0]) / C_KMS)
    got = radio_velocity(freqs, rest)
    assert got.unit == u.km / u.s
    assert_allclose(got.value, [-20.0, 0.0, 0.5, 35.0], atol=1e-9)
    assert_quantity_allclose(got, freqs.to(u.km / u.s, equivalencies=u.doppler_radio(rest)), rtol=1e-11)
    # radio and relativistic velocities agree to first order in v/c only
    rel = freqs.to(u.km / u.s, equivalencies=u.doppler_relativistic(rest))
    assert_allclose(got.value, rel.value, atol=35.0**2 / C_KMS)
