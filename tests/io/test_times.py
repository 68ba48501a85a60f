"""Tests of pipeline.io.times: the exposure's mid-time from the cards facility products carry, never guessed.

References: the FITS time paper (Rots et al. 2015, A&A 574, A36) for the cards and their meaning; astropy.time
for the time-scale conversions; TT - UTC = 32.184 s + 37 leap seconds = 69.184 s after 2017 January 1 (IERS
Bulletin C, from memory) as an independent number.
"""

import astropy.units as u
import pytest
from astropy.io import fits
from astropy.tests.helper import assert_quantity_allclose
from astropy.time import Time

from pipeline.errors import CubeError
from pipeline.io.times import observation_times


def _header(**cards) -> fits.Header:
    h = fits.Header()
    for key, value in cards.items():
        h[key.replace("_", "-")] = value
    return h


def _seconds_between(a: Time, b: Time) -> float:
    return float((a - b).to_value(u.s))


def test_begin_and_end_cards_of_a_space_ifu_product():
    # empty primary + SCI: DATE-OBS date-only with TIME-OBS, DATE-BEG/DATE-END and MJD-BEG/MJD-END all present
    h = _header(DATE_OBS="2031-03-12", TIME_OBS="01:02:03.500", DATE_BEG="2031-03-12T01:02:03.500",
                DATE_END="2031-03-12T03:02:03.500", MJD_BEG=62207.04309, MJD_END=62207.12642, TIMESYS="UTC")
    t = observation_times(h, "ifu.fits")
    assert t.start.isot == "2031-03-12T01:02:03.500" and t.end.isot == "2031-03-12T03:02:03.500"
    assert abs(_seconds_between(t.mid, Time("2031-03-12T02:02:03.5", scale="utc"))) < 1e-6   # halfway, 1 h each side
    assert t.source == "DATE-BEG/DATE-END"


def test_date_only_date_obs_is_completed_by_time_obs():
    h = _header(DATE_OBS="2031-03-12", TIME_OBS="01:00:00", DATE_END="2031-03-12T02:00:00")
    t = observation_times(h, "c.fits")
    assert t.start.isot == "2031-03-12T01:00:00.000" and t.source == "DATE-OBS + TIME-OBS/DATE-END"
    assert abs(_seconds_between(t.mid, Time("2031-03-12T01:30:00", scale="utc"))) < 1e-6


def test_a_date_without_a_time_of_day_is_refused():
    with pytest.raises(CubeError, match=r"c\.fits: header card DATE-OBS = '2031-03-12' holds a date without a time"):
        observation_times(_header(DATE_OBS="2031-03-12", DATE_END="2031-03-12T02:00:00"), "c.fits")


def test_explicit_mid_cards_and_mjd_exposure_cards():
    # EXPSTART / EXPMID / EXPEND in MJD (a space telescope's exposure cards): EXPMID is the mid-time
    h = _header(EXPSTART=62207.0, EXPMID=62207.05, EXPEND=62207.125)
    t = observation_times(h, "x.fits")
    assert t.mid.mjd == pytest.approx(62207.05, abs=1e-9) and t.start.mjd == pytest.approx(62207.0, abs=1e-9)
    assert t.source.startswith("EXPMID")


def test_times_in_tt_are_returned_in_utc():
    h = _header(MJD_BEG=62207.0, MJD_END=62207.5, TIMESYS="TT")
    t = observation_times(h, "tt.fits")
    # astropy's TT -> UTC conversion, and the independent number TT - UTC = 69.184 s (from memory, see above)
    reference = Time(62207.25, format="mjd", scale="tt").utc
    assert abs(_seconds_between(t.mid, reference)) < 1e-6
    assert _seconds_between(Time(62207.25, format="mjd", scale="utc"), t.mid) == pytest.approx(69.184, abs=1e-3)


def test_a_start_with_an_elapsed_time():
    t = observation_times(_header(DATE_OBS="2031-03-12T01:00:00.25", TELAPSE=3600.0), "e.fits")
    assert_quantity_allclose((t.mid - t.start).to(u.s), 1800 * u.s, atol=1e-6 * u.s)
    assert t.source == "DATE-OBS + TELAPSE"


def test_a_start_only_product_is_refused_and_the_config_can_complete_it():
    # a ground pipeline's cube: DATE-OBS = start of the track (fractional seconds), no end card
    h = _header(DATE_OBS="2031-03-12T01:00:00.123456")
    with pytest.raises(CubeError, match=r"^track\.fits: the header gives only DATE-OBS, not the exposure's end or "
                                        r"middle; expected DATE-END .* 'time' \(mid-time\) or 'duration_s'"):
        observation_times(h, "track.fits")
    t = observation_times(h, "track.fits", duration=2 * u.h)
    assert_quantity_allclose((t.mid - t.start).to(u.s), 3600 * u.s, atol=1e-6 * u.s)
    assert t.source == "DATE-OBS + config 'duration_s'"
    t = observation_times(h, "track.fits", override="2031-03-12T02:00:00")
    assert t.start == t.mid == t.end and t.source == "config 'time'"


def test_on_source_exposure_never_places_the_mid_time():
    with pytest.raises(CubeError, match=r"only DATE-OBS and XPOSURE \(on-source time, not wall-clock\)"):
        observation_times(_header(DATE_OBS="2031-03-12T01:00:00", XPOSURE=1200.0), "s.fits")


@pytest.mark.parametrize("cards, match", [
    ({"TIMESYS": "LOCAL", "DATE-OBS": "2031-03-12T01:00:00", "DATE-END": "2031-03-12T02:00:00"},
     "header card TIMESYS = 'LOCAL' is not a time scale"),
    ({"DATE-OBS": "2031-03-12T03:00:00", "DATE-END": "2031-03-12T02:00:00"}, "DATE-END .* precedes DATE-OBS"),
    ({"MJD-BEG": "soon", "MJD-END": 62207.1}, "header card MJD-BEG = 'soon' is not a number"),
    ({"DATE-OBS": "2031-03-12T01:00:00", "TELAPSE": -5.0}, "TELAPSE = -5.0; expected a positive duration"),
    ({"OBJECT": "x"}, "no observation time in the header"),
])
def test_bad_time_cards_are_refused_by_name(cards, match):
    h = fits.Header()
    for key, value in cards.items():
        h[key] = value
    with pytest.raises(CubeError, match=match):
        observation_times(h, "bad.fits")
