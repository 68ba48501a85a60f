"""Spectral reference frames: from a cube's labelled frequencies to velocity in the target's rest frame.

A cube's spectral axis is labelled in the frame its SPECSYS names. gasledger
brings every axis to the observatory's own (topocentric) frame with astropy's
:class:`~astropy.coordinates.SpectralCoord`, then removes the target's
topocentric radial velocity from the ephemeris. A SPECSYS = SOURCE axis is
already in the target's frame and is used as it is.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.coordinates import EarthLocation, SkyCoord, SpectralCoord
from astropy.time import Time

from pipeline.errors import CubeError
from pipeline.geometry.observers import Observer
from pipeline.offline import future_time_tolerated

__all__ = [
    "observer_frame_factor",
    "to_topocentric",
    "to_target_frame",
    "radio_velocity",
    "linear_axis",
]

_FRAME_OF_SPECSYS = {"GEOCENTR": "gcrs", "BARYCENT": "icrs", "LSRK": "lsrk"}
_FAR = 1e9 * u.au  # a target this far away has the same direction from every observer


def _observer(location: "Observer | EarthLocation | None", time: Time):
    if isinstance(location, Observer):
        return location.frame(time)
    return Observer(location=location).frame(time)


def observer_frame_factor(specsys: str, time: Time, location: "Observer | EarthLocation | None",
                          ra: u.Quantity, dec: u.Quantity) -> float:
    """Doppler factor D with f(SPECSYS frame) = D * f(observer's frame) towards (ra, dec).

    Computed with astropy's SpectralCoord.with_observer_stationary_relative_to
    for the observer ``location``: an Earth-fixed site (EarthLocation), the
    geocentre (None) or any :class:`~pipeline.geometry.observers.Observer`, a
    spacecraft included. TOPOCENT (the observer's own frame) gives exactly 1.
    """
    if specsys == "TOPOCENT":
        return 1.0
    if specsys not in _FRAME_OF_SPECSYS:
        msg = f"SPECSYS = {specsys!r} cannot be converted to the observatory frame; expected " \
              f"TOPOCENT, {', '.join(_FRAME_OF_SPECSYS)} (or SOURCE, which needs no conversion)"
        raise CubeError(msg)
    target = SkyCoord(ra, dec, distance=_FAR, pm_ra_cosdec=0 * u.mas / u.yr, pm_dec=0 * u.mas / u.yr,
                      radial_velocity=0 * u.km / u.s, frame="icrs")
    ref = 100.0 * u.GHz
    with future_time_tolerated():
        sc = SpectralCoord(ref, observer=_observer(location, time), target=target)
        shifted = sc.with_observer_stationary_relative_to(_FRAME_OF_SPECSYS[specsys])
    return float((shifted / sc).decompose())


def to_topocentric(freqs: u.Quantity, specsys: str, time: Time, location: "Observer | EarthLocation | None",
                   ra: u.Quantity, dec: u.Quantity) -> u.Quantity:
    """Frequencies the observer measured (in its own frame), from frequencies labelled in ``specsys``.

    A change of observer velocity multiplies every frequency by the same
    relativistic Doppler factor, so f_topo = f_specsys / D.
    """
    return (u.Quantity(freqs, u.Hz) / observer_frame_factor(specsys, time, location, ra, dec)).to(u.Hz)


def to_target_frame(freq_topo: u.Quantity, delta_dot: u.Quantity) -> u.Quantity:
    """Rest-frame frequencies of the target from topocentric ones.

    ``delta_dot`` is the target's topocentric range rate (positive receding);
    the relativistic Doppler shift is removed with SpectralCoord.to_rest.
    """
    sc = SpectralCoord(u.Quantity(freq_topo, u.Hz), radial_velocity=u.Quantity(delta_dot, u.km / u.s),
                       doppler_convention="relativistic")
    return sc.to_rest().to(u.Hz)


def radio_velocity(freq: u.Quantity, rest: u.Quantity) -> u.Quantity:
    """Radio-convention velocity of ``freq`` relative to ``rest`` (astropy doppler_radio)."""
    return u.Quantity(freq, u.Hz).to(u.km / u.s, equivalencies=u.doppler_radio(rest))


def linear_axis(values: np.ndarray) -> tuple[float, float, float]:
    """Least-squares linear axis through ``values``: start, step, and the largest deviation in channels.

    A FREQ axis relabelled in radio velocity stays exactly linear; WAVE and VOPT axes do not, and their
    sub-cubes carry the exact per-channel velocities in a table beside the approximate linear WCS.
    """
    idx = np.arange(values.size, dtype=float)
    slope, intercept = np.polyfit(idx, values, 1)
    dev = float(np.max(np.abs(values - (slope * idx + intercept))) / abs(slope))
    return float(intercept), float(slope), dev
