"""Two-body orbits of small bodies and their observed geometry from Earth.

Perihelion elements (:class:`OrbitalElements`) of an elliptic, parabolic or
hyperbolic heliocentric orbit are propagated with the universal-variable Kepler
equation (:func:`propagate_universal`) and seen from the geocentre or a site with
a light-time iteration (:func:`observe`, :func:`ephemeris_from_elements`,
:func:`write_ephemeris`).  Only the Sun's point-mass attraction is modelled; the
Earth and Sun come from astropy's built-in ephemeris (ERFA ``epv00``).
"""

import math
import os
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.constants import GM_sun, c
from astropy.coordinates import EarthLocation
from astropy.table import QTable
from astropy.time import Time, TimeDelta

from pipeline.errors import EphemerisError, GasledgerTypeError
from pipeline.geometry.observers import OBLIQUITY_J2000, Observer, body_barycentric
from pipeline.offline import future_time_tolerated
from pipeline.quantities import checked_array

__all__ = [
    "OrbitalElements",
    "GM_SUN",
    "OBLIQUITY_J2000",
    "stumpff_c",
    "stumpff_s",
    "propagate_universal",
    "heliocentric_state",
    "observe",
    "write_ephemeris",
    "ephemeris_from_elements",
    "two_body_drift",
    "DRIFT_REFERENCE",
]

#: Heliocentric gravitational constant (IAU 2015 nominal value, via astropy).
GM_SUN = GM_sun.to(u.km**3 / u.s**2)

_C_KM_S = c.to_value(u.km / u.s)
_SERIES_LIMIT = 0.5  # |z| below which the Stumpff functions use their Taylor series
_SERIES_COEFFS = {
    first: [(-1.0) ** k / math.factorial(2 * k + first) for k in range(12)] for first in (2, 3)
}
_MAX_ITER = 200
_LIGHT_TIME_TOL_S = 1e-9
_MAX_ROWS = 1_000_000
_MAPPING_KEYS = ("q_au", "e", "i_deg", "node_deg", "peri_deg", "tp")
_ANGLES = ("inc", "node", "peri")


def _value(value, unit: u.Unit, name: str, scalar: bool = False) -> np.ndarray:
    """``value`` in ``unit`` as a finite float array, or EphemerisError naming it."""
    return checked_array(value, unit, name, sign="any", scalar=scalar, error=EphemerisError)


def _check_time(value, name: str) -> None:
    if not isinstance(value, Time):
        msg = f"'{name}' must be a scalar astropy Time, found {value!r}"
        raise GasledgerTypeError(msg)
    if not value.isscalar:
        msg = f"'{name}' must be a scalar astropy Time, found {value!r}"
        raise EphemerisError(msg)


@dataclass(frozen=True)
class OrbitalElements:
    """Perihelion elements of a two-body heliocentric orbit (ecliptic, equinox J2000).

    Parameters
    ----------
    q : `~astropy.units.Quantity`
        Perihelion distance (length) > 0, stored in au.
    e : float
        Eccentricity >= 0 (< 1 ellipse, == 1 parabola, > 1 hyperbola).
    inc, node, peri : `~astropy.units.Quantity`
        Inclination (0-180 deg), ascending node, argument of perihelion; stored in deg.
    tp, epoch : `~astropy.time.Time`
        Perihelion time; osculation epoch (optional, kept for the record only).

    Invalid fields raise `EphemerisError` naming the field; a field of the wrong kind (a plain number
    for ``q``, a string for ``tp``) raises `GasledgerTypeError`.
    """

    q: u.Quantity
    e: float
    inc: u.Quantity
    node: u.Quantity
    peri: u.Quantity
    tp: Time
    epoch: Time | None = None

    def __post_init__(self) -> None:
        q = float(_value(self.q, u.au, "q", scalar=True))
        if not q > 0:
            msg = f"'q' must be a perihelion distance > 0, found {self.q!r}"
            raise EphemerisError(msg)
        try:
            e = float(self.e)
        except (TypeError, ValueError):
            e = math.nan
        if not (math.isfinite(e) and e >= 0):
            msg = f"'e' must be a finite number >= 0, found {self.e!r}"
            raise EphemerisError(msg)
        angles = {n: float(_value(getattr(self, n), u.deg, n, True)) for n in _ANGLES}
        if not 0.0 <= angles["inc"] <= 180.0:
            msg = f"'inc' must lie within [0, 180] deg, found {self.inc!r}"
            raise EphemerisError(msg)
        _check_time(self.tp, "tp")
        if self.epoch is not None:
            _check_time(self.epoch, "epoch")
        object.__setattr__(self, "q", q * u.au)
        object.__setattr__(self, "e", e)
        for name, value in angles.items():
            object.__setattr__(self, name, value * u.deg)

    @classmethod
    def from_mapping(cls, m: Mapping) -> "OrbitalElements":
        """Build elements from a mapping of plain values.

        Keys: ``q_au``, ``e``, ``i_deg``, ``node_deg``, ``peri_deg``, ``tp`` and optionally
        ``epoch`` and ``time_scale``. Times are ISO strings or Julian dates (numbers > 2,400,000, or
        'JD2462000.5'), in ``time_scale`` (utc, the default; tt; or tdb, as element services give them), or
        `~astropy.time.Time`. A missing, unknown or unreadable key raises `EphemerisError` naming it.
        """
        if not isinstance(m, Mapping):
            msg = f"orbital elements must be a mapping, found {type(m).__name__}"
            raise EphemerisError(msg)
        allowed = (*_MAPPING_KEYS, "epoch", "time_scale")
        unknown = sorted(str(k) for k in m if k not in allowed)
        if unknown:
            msg = f"unknown orbital-element key(s) {unknown}, expected keys among {list(allowed)}"
            raise EphemerisError(msg)
        for key in _MAPPING_KEYS:
            if key not in m:
                msg = f"orbital-element key '{key}' is missing, expected {list(_MAPPING_KEYS)}"
                raise EphemerisError(msg)
        val = {}
        for key in _MAPPING_KEYS[:5]:
            try:
                val[key] = float(m[key])
            except (TypeError, ValueError) as exc:
                msg = f"orbital-element key '{key}' must be a number, found {m[key]!r}"
                raise EphemerisError(msg) from exc
        scale = str(m.get("time_scale", "utc")).lower()
        if scale not in ("utc", "tt", "tdb"):
            msg = f"orbital-element key 'time_scale' must be one of utc, tt, tdb, found {m['time_scale']!r}"
            raise EphemerisError(msg)
        for key in ("tp", "epoch"):
            val[key] = m.get(key)
            if val[key] is not None and not isinstance(val[key], Time):
                val[key] = _element_time(val[key], key, scale)
        return cls(q=val["q_au"] * u.au, e=val["e"], inc=val["i_deg"] * u.deg,
                   node=val["node_deg"] * u.deg, peri=val["peri_deg"] * u.deg,
                   tp=val["tp"], epoch=val["epoch"])


def _element_time(value, key: str, scale: str) -> Time:
    """An element's time: an ISO string, or a Julian date (a number > 2,400,000), in ``scale``; returned in UTC."""
    try:
        with future_time_tolerated():
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                if not value > 2_400_000:
                    msg = (f"orbital-element key '{key}' = {value!r} is not a Julian date; expected an ISO time or "
                           "a JD (> 2400000)")
                    raise EphemerisError(msg)
                return Time(float(value), format="jd", scale=scale).utc
            text = str(value).strip()
            if text.upper().startswith("JD"):
                return Time(float(text[2:]), format="jd", scale=scale).utc
            return Time(text, scale=scale).utc
    except EphemerisError:
        raise
    except (TypeError, ValueError) as exc:
        msg = f"orbital-element key '{key}' must be an ISO time or a Julian date, found {value!r}"
        raise EphemerisError(msg) from exc


#: Two-body drift from the osculating epoch, measured once against a numerically integrated (n-body)
#: ephemeris for a main-belt orbit: 0.2 arcsec after 30 days, 600 arcsec after 2.4 years. Between and
#: beyond, the power law through those two points, drift = 0.2" (dt / 30 d)^k, k = ln(3000) / ln(876/30).
DRIFT_REFERENCE = (30.0 * u.day, 0.2 * u.arcsec, 876.0 * u.day, 600.0 * u.arcsec)


def two_body_drift(dt: u.Quantity) -> u.Quantity:
    """Rough size of the two-body (no planetary perturbations) position error ``dt`` from the elements' epoch.

    A rule of thumb anchored on the two measurements of :data:`DRIFT_REFERENCE` (a main-belt orbit; a body
    passing close to a planet drifts faster); meant for a warning, not a correction.
    """
    t1, d1, t2, d2 = DRIFT_REFERENCE
    k = np.log((d2 / d1).decompose().value) / np.log((t2 / t1).decompose().value)
    return d1 * (np.abs(u.Quantity(dt, u.day)) / t1).decompose().value ** k


def _stumpff(z, first: int) -> np.ndarray:
    """C (first = 2) or S (first = 3): series for small |z|, closed forms elsewhere."""
    z = np.asarray(z, dtype=float)
    out = np.full_like(z, np.nan)  # NaN in, NaN out
    small, pos, neg = np.abs(z) < _SERIES_LIMIT, z >= _SERIES_LIMIT, z <= -_SERIES_LIMIT
    series = np.zeros_like(z[small])
    for coeff in reversed(_SERIES_COEFFS[first]):  # Horner's rule
        series = series * z[small] + coeff
    out[small] = series
    xp, xn = np.sqrt(z[pos]), np.sqrt(-z[neg])
    with np.errstate(over="ignore", invalid="ignore"):
        if first == 2:
            out[pos] = 2.0 * np.sin(0.5 * xp) ** 2 / z[pos]
            out[neg] = 2.0 * np.sinh(0.5 * xn) ** 2 / (-z[neg])
        else:
            out[pos] = (xp - np.sin(xp)) / xp**3
            out[neg] = (np.sinh(xn) - xn) / xn**3
    return out[()]


def stumpff_c(z: np.ndarray) -> np.ndarray:
    r"""Stumpff function :math:`C(z)` (dimensionless ``z`` of any sign; same shape out).

    Notes
    -----
    :math:`C(z) = (1-\cos\sqrt z)/z = 2\sin^2(\sqrt z/2)/z` for :math:`z>0`,
    :math:`(\cosh\sqrt{-z}-1)/(-z)` for :math:`z<0` and
    :math:`\sum_k (-z)^k/(2k+2)!` for :math:`|z|<0.5`, so :math:`C(0)=1/2`.  The
    half-angle form avoids the cancellation in :math:`1-\cos`.  Large negative
    ``z`` overflows to ``inf`` silently.

    References
    ----------
    Curtis, H. D., *Orbital Mechanics for Engineering Students*, Sect. 3.7.
    """
    return _stumpff(z, 2)


def stumpff_s(z: np.ndarray) -> np.ndarray:
    r"""Stumpff function :math:`S(z)` (dimensionless ``z`` of any sign; same shape out).

    Notes
    -----
    :math:`S(z) = (\sqrt z-\sin\sqrt z)/\sqrt z^3` for :math:`z>0`,
    :math:`(\sinh\sqrt{-z}-\sqrt{-z})/\sqrt{-z}^3` for :math:`z<0` and
    :math:`\sum_k (-z)^k/(2k+3)!` for :math:`|z|<0.5`, so :math:`S(0)=1/6`.
    Large negative ``z`` overflows to ``inf`` silently.

    References
    ----------
    Curtis, H. D., *Orbital Mechanics for Engineering Students*, Sect. 3.7.
    """
    return _stumpff(z, 3)


def _kepler_function(chi, sigma0, alpha, tau):
    """F(chi), F'(chi) = r and the rounding level of F, in units r0 = mu = 1."""
    with np.errstate(over="ignore", invalid="ignore"):
        z = alpha * chi**2
        cz, sz = stumpff_c(z), stumpff_s(z)
        t1, t2 = sigma0 * chi**2 * cz, (1.0 - alpha) * chi**3 * sz
        fun = t1 + t2 + chi - tau
        der = sigma0 * chi * (1.0 - z * sz) + (1.0 - alpha) * chi**2 * cz + 1.0
        noise = 8.0 * np.finfo(float).eps * (np.abs(t1) + np.abs(t2) + np.abs(chi) + np.abs(tau))
    # F increases monotonically (F' = r > 0): an overflow lies far beyond the
    # root, on the side of the sign of chi.
    fun = np.where(np.isfinite(fun), fun, np.copysign(np.inf, chi))
    return fun, der, noise


def _starting_guess(sigma0: float, alpha: float, tau: np.ndarray) -> np.ndarray:
    """Best (smallest |F|) of the short-arc, mean-motion and logarithmic starts."""
    guesses = [tau.copy()]  # short arc: chi ~ sqrt(mu) dt / r0
    if alpha > 0:
        guesses.append(alpha * tau)  # many revolutions: chi ~ sqrt(mu) alpha dt
    elif alpha < 0:  # Vallado (2013), Algorithm 8 (hyperbola)
        sqa, sign = math.sqrt(-1.0 / alpha), np.sign(tau)
        with np.errstate(divide="ignore", invalid="ignore"):
            arg = -2.0 * alpha * tau / (sigma0 + sign * sqa * (1.0 - alpha))
            hyp = sign * sqa * np.log(arg)
        guesses.append(np.where(np.isfinite(hyp) & (arg > 1.0), hyp, tau))
    best, best_f = guesses[0], np.abs(_kepler_function(guesses[0], sigma0, alpha, tau)[0])
    for guess in guesses[1:]:
        f = np.abs(_kepler_function(guess, sigma0, alpha, tau)[0])
        best, best_f = np.where(f < best_f, guess, best), np.minimum(f, best_f)
    return best


def _solve_nondimensional(sigma0: float, alpha: float, tau: np.ndarray) -> np.ndarray:
    """Solve F(chi) = 0 for each tau: Newton's method safeguarded by bisection.

    The root is bracketed between 0 (F(0) = -tau) and a far end found by
    doubling; a Newton step that leaves the bracket or fails to halve the step
    before last is replaced by bisection ("rtsafe", Press et al., Numerical
    Recipes, Sect. 9.4).
    """
    tau = np.asarray(tau, dtype=float)
    sign = np.sign(tau)
    chi = _starting_guess(sigma0, alpha, tau)
    chi = np.where(sign * chi > 0, chi, tau)  # the root has the sign of tau
    lo, hi = np.where(sign > 0, 0.0, chi), np.where(sign > 0, chi, 0.0)
    edge = chi.copy()
    for _ in range(2100):
        open_ = (sign * _kepler_function(edge, sigma0, alpha, tau)[0] < 0) & (sign != 0)
        if not open_.any():
            break
        # the far end is still short of the root: it becomes the near bound
        lo = np.where(open_, np.minimum(edge, 2.0 * edge), lo)
        hi = np.where(open_, np.maximum(edge, 2.0 * edge), hi)
        edge = np.where(open_, 2.0 * edge, edge)
    else:
        msg = "universal Kepler equation: could not bracket the root ('dt' too large?)"
        raise EphemerisError(msg)
    chi = np.clip(chi, lo, hi)
    done = sign == 0
    chi[done] = 0.0
    step_old, step = hi - lo, hi - lo
    for _ in range(_MAX_ITER):
        act = np.flatnonzero(~done)
        if act.size == 0:
            return chi
        x = chi[act]
        fun, der, noise = _kepler_function(x, sigma0, alpha, tau[act])
        lo[act] = np.where(fun < 0, x, lo[act])
        hi[act] = np.where(fun > 0, x, hi[act])
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            newton = x - fun / der
        tol = 4e-15 * np.maximum(np.abs(x), 1e-300)
        conv = (np.abs(fun) <= noise) | (np.abs(newton - x) <= tol) | (hi[act] - lo[act] <= tol)
        outside = ~np.isfinite(newton) | (newton < lo[act]) | (newton > hi[act])
        slow = np.abs(newton - x) > 0.5 * step_old[act]
        new = np.where((outside | slow) & ~conv, 0.5 * (lo[act] + hi[act]), newton)
        new = np.where(conv & outside, x, new)
        step_old[act], step[act] = step[act], np.abs(new - x)
        chi[act] = new
        done[act[conv]] = True
    if done.all():
        return chi
    msg = f"universal Kepler equation did not converge in {_MAX_ITER} iterations"
    raise EphemerisError(msg)


def _nondimensional_state(r0, v0, mu):
    """Scale a state to units r0 = mu = 1: (r0, v0, sigma0, alpha, L, V, T)."""
    r0, v0 = _value(r0, u.km, "r0"), _value(v0, u.km / u.s, "v0")
    mu = float(_value(mu, u.km**3 / u.s**2, "mu", scalar=True))
    if r0.shape != (3,) or v0.shape != (3,):
        msg = f"'r0' and 'v0' must have shape (3,), found {r0.shape} and {v0.shape}"
        raise EphemerisError(msg)
    length = float(np.linalg.norm(r0))
    if not (mu > 0 and length > 0):
        msg = f"'mu' must be > 0 and 'r0' non-zero, found mu={mu!r} km3/s2, |r0|={length!r} km"
        raise EphemerisError(msg)
    speed = math.sqrt(mu / length)
    rn, vn = r0 / length, v0 / speed
    return rn, vn, float(rn @ vn), 2.0 - float(vn @ vn), length, speed, length / speed


def _solve_universal_anomaly(
    r0: u.Quantity, v0: u.Quantity, dt: u.Quantity, mu: u.Quantity = GM_SUN
) -> u.Quantity:
    """Universal anomaly chi [km^0.5] reached after ``dt`` from the state (r0, v0)."""
    _rn, _vn, sigma0, alpha, length, _speed, time = _nondimensional_state(r0, v0, mu)
    tau = _value(dt, u.s, "dt") / time
    chi = _solve_nondimensional(sigma0, alpha, np.atleast_1d(tau)).reshape(np.shape(tau))
    return chi * math.sqrt(length) * u.km**0.5


def propagate_universal(
    r0: u.Quantity, v0: u.Quantity, dt: u.Quantity, mu: u.Quantity = GM_SUN
) -> tuple[u.Quantity, u.Quantity]:
    r"""Propagate a two-body state with the universal-variable Kepler equation.

    Parameters
    ----------
    r0, v0 : `~astropy.units.Quantity`, shape (3,)
        Initial position (length) and velocity (speed) relative to the central body.
    dt : `~astropy.units.Quantity`, shape (N,) or scalar
        Time steps from the initial state, of either sign.
    mu : `~astropy.units.Quantity`
        Gravitational parameter of the central body (default `GM_SUN`).

    Returns
    -------
    r, v : `~astropy.units.Quantity`
        Positions [km] and velocities [km/s], shape (3, N) (shape (3,) for a scalar ``dt``).

    Notes
    -----
    With :math:`\alpha = 2/r_0 - v_0^2/\mu` and :math:`z=\alpha\chi^2` the
    universal anomaly :math:`\chi` solves

    .. math::

        \sqrt\mu\,\Delta t = \frac{r_0 v_{r0}}{\sqrt\mu}\chi^2 C(z)
            + (1-\alpha r_0)\chi^3 S(z) + r_0\chi ,

    whose derivative in :math:`\chi` is :math:`r>0`: the root is unique.  It is
    bracketed and found by Newton's method with a bisection fallback (failure
    raises `EphemerisError`).  Then
    :math:`f = 1-\chi^2C/r_0`, :math:`g=\Delta t-\chi^3S/\sqrt\mu`,
    :math:`\dot f = \sqrt\mu\,\chi(zS-1)/(r r_0)`, :math:`\dot g = 1-\chi^2C/r`
    and :math:`\mathbf r = f\mathbf r_0 + g\mathbf v_0`,
    :math:`\mathbf v = \dot f\mathbf r_0 + \dot g\mathbf v_0`.  The work is
    done in units where :math:`r_0=\mu=1`.

    References
    ----------
    Curtis, H. D., *Orbital Mechanics for Engineering Students*, Sects. 3.7-3.8
    (Algorithms 3.3, 3.4).  Vallado, D. A., *Fundamentals of Astrodynamics and
    Applications*, Sect. 2.3.
    """
    rn, vn, sigma0, alpha, length, speed, time = _nondimensional_state(r0, v0, mu)
    dt_s = _value(dt, u.s, "dt")
    if dt_s.ndim > 1:
        msg = f"'dt' must be a scalar or a 1-D array, found shape {dt_s.shape}"
        raise EphemerisError(msg)
    tau = np.atleast_1d(dt_s) / time
    chi = _solve_nondimensional(sigma0, alpha, tau)
    z = alpha * chi**2
    cz, sz = stumpff_c(z), stumpff_s(z)
    r = (1.0 - chi**2 * cz) * rn[:, None] + (tau - chi**3 * sz) * vn[:, None]
    rmag = np.linalg.norm(r, axis=0)
    v = (chi * (z * sz - 1.0) / rmag) * rn[:, None] + (1.0 - chi**2 * cz / rmag) * vn[:, None]
    if dt_s.ndim == 0:
        r, v = r[:, 0], v[:, 0]
    return r * length * u.km, v * speed * u.km / u.s


def _rot(axis: int, angle: float) -> np.ndarray:
    """Active rotation matrix by ``angle`` [rad] about the x (0) or z (2) axis."""
    ca, sa = math.cos(angle), math.sin(angle)
    if axis == 0:
        return np.array([[1.0, 0.0, 0.0], [0.0, ca, -sa], [0.0, sa, ca]])
    return np.array([[ca, -sa, 0.0], [sa, ca, 0.0], [0.0, 0.0, 1.0]])


def heliocentric_state(elements: OrbitalElements, times: Time) -> tuple[u.Quantity, u.Quantity]:
    r"""Heliocentric position and velocity of a two-body orbit.

    Parameters
    ----------
    elements : OrbitalElements
    times : `~astropy.time.Time`
        Times (any scale; used in TDB, the orbit's dynamical time).

    Returns
    -------
    position, velocity : `~astropy.units.Quantity`, shape (3, N)
        Relative to the Sun, ICRS-oriented axes, in au and km/s.

    Notes
    -----
    At perihelion the body is at :math:`r=q` on the perifocal x axis moving
    along y at :math:`v_q=\sqrt{\mu(1+e)/q}` (vis-viva).  The perifocal frame is
    rotated to the ecliptic by :math:`R_z(\Omega)R_x(i)R_z(\omega)` and to
    equatorial axes by :math:`R_x(\varepsilon_0)`, :math:`\varepsilon_0 =
    84381.448''`.  These mean equator and equinox J2000 axes are taken as
    ICRS: the ~20 mas frame bias between them is neglected.  The perihelion
    state is propagated by :math:`t_\mathrm{TDB}-t_p` with :func:`propagate_universal`.

    References
    ----------
    Curtis, H. D., *Orbital Mechanics for Engineering Students*, Sect. 4.6.
    Explanatory Supplement to the Astronomical Almanac (3rd ed.), ch. 6.
    """
    if not isinstance(elements, OrbitalElements) or not isinstance(times, Time):
        found = f"{type(elements).__name__}, {type(times).__name__}"
        msg = f"'elements', 'times' must be OrbitalElements and Time, found {found}"
        raise GasledgerTypeError(msg)
    with future_time_tolerated():
        dt = np.atleast_1d((times.tdb - elements.tp.tdb).to_value(u.s)).ravel()
    q = elements.q.to_value(u.km)
    vq = math.sqrt(GM_SUN.to_value(u.km**3 / u.s**2) * (1.0 + elements.e) / q)
    rot = (
        _rot(0, OBLIQUITY_J2000.to_value(u.rad)) @ _rot(2, elements.node.to_value(u.rad))
        @ _rot(0, elements.inc.to_value(u.rad)) @ _rot(2, elements.peri.to_value(u.rad))
    )
    r, v = propagate_universal(rot[:, 0] * q * u.km, rot[:, 1] * vq * u.km / u.s, dt * u.s)
    return r.to(u.au), v


def _as_observer(observer: "Observer | EarthLocation | None") -> Observer:
    if observer is None:
        return Observer()
    if isinstance(observer, EarthLocation):
        return Observer(name="site", location=observer)
    if isinstance(observer, Observer):
        return observer
    msg = f"'observer' must be an Observer, an EarthLocation or None, found {type(observer).__name__}"
    raise GasledgerTypeError(msg)


def observe(
    elements: OrbitalElements, times: Time, location: "Observer | EarthLocation | None" = None
) -> QTable:
    r"""Astrometric geometry of a two-body orbit seen from an observer (the geocentre, a site or a spacecraft).

    Parameters
    ----------
    elements : OrbitalElements
    times : `~astropy.time.Time`
        Observation (reception) times, scalar or 1-D.
    location : `~pipeline.geometry.observers.Observer`, `~astropy.coordinates.EarthLocation` or None
        The observer: a site, a spacecraft (:class:`~pipeline.geometry.observers.Observer`), or None for the
        geocentre.

    Returns
    -------
    `~astropy.table.QTable`
        One row per time: ``time`` (UTC), ``ra``, ``dec`` [deg] (astrometric
        ICRS), ``r_h`` [au] (heliocentric distance at emission), ``delta`` [au],
        ``delta_dot`` [km/s] (positive receding), ``phase`` [deg]
        (Sun-target-observer), ``ra_rate`` [arcsec/h] (:math:`\dot\alpha\cos\delta`)
        and ``dec_rate`` [arcsec/h].

    Notes
    -----
    The observer is the Earth (astropy built-in ephemeris) plus, for a site, its
    GCRS position and velocity; a spacecraft's comes from its state table
    (:meth:`pipeline.geometry.observers.Observer.barycentric`).  The light time :math:`\tau` solves
    :math:`c\tau = |\mathbf r_T(t-\tau) - \mathbf r_O(t)|` by fixed-point
    iteration to 1e-9 s (each pass gains a factor ~v/c); the target's barycentric
    state is the Sun's at :math:`t-\tau` plus the heliocentric two-body one.
    With :math:`\boldsymbol\rho = \mathbf r_T(t-\tau) - \mathbf r_O(t)` and
    :math:`\dot{\boldsymbol\rho} = \mathbf v_T(t-\tau) - \mathbf v_O(t)`,

    .. math::

        \dot\Delta = \hat{\boldsymbol\rho}\cdot\dot{\boldsymbol\rho},\quad
        \dot\alpha\cos\delta = \frac{\rho_x\dot\rho_y-\rho_y\dot\rho_x}{\rho\,\rho_{xy}},\quad
        \dot\delta = \frac{\dot\rho_z\rho-\rho_z\dot\Delta}{\rho\,\rho_{xy}} .

    The factor :math:`1-\dot\tau` (1e-4 relative in the rates), stellar
    aberration (up to 20.5'') and light deflection are neglected.

    References
    ----------
    Explanatory Supplement to the Astronomical Almanac (3rd ed.), ch. 7.
    """
    if not isinstance(times, Time):
        msg = f"'times' must be Time, found {type(times).__name__}"
        raise GasledgerTypeError(msg)
    observer = _as_observer(location)
    times = times.reshape(-1)
    with future_time_tolerated():
        t_tdb, t_utc = times.tdb, times.utc
    r_obs, v_obs = observer.barycentric(times)
    tau = np.zeros(len(times))
    for _ in range(20):
        t_ret = t_tdb - TimeDelta(tau, format="sec")
        r_hel, v_hel = heliocentric_state(elements, t_ret)
        r_sun, v_sun = body_barycentric("sun", t_ret)
        rho = r_sun + r_hel.to_value(u.km) - r_obs
        tau_new = np.linalg.norm(rho, axis=0) / _C_KM_S
        change, tau = np.max(np.abs(tau_new - tau)), tau_new
        if change < _LIGHT_TIME_TOL_S:
            break
    else:
        msg = "light-time iteration did not converge in 20 passes"
        raise EphemerisError(msg)
    rho_dot = v_sun + v_hel.to_value(u.km / u.s) - v_obs
    dist = np.linalg.norm(rho, axis=0)
    rxy = np.hypot(rho[0], rho[1])
    delta_dot = np.sum(rho * rho_dot, axis=0) / dist
    to_sun = -r_hel.to_value(u.km)
    cross = np.linalg.norm(np.cross(to_sun, -rho, axis=0), axis=0)
    rate = u.rad / u.s
    table = QTable()
    table["time"] = t_utc
    table["ra"] = (np.mod(np.arctan2(rho[1], rho[0]), 2 * np.pi) * u.rad).to(u.deg)
    table["dec"] = (np.arctan2(rho[2], rxy) * u.rad).to(u.deg)
    table["r_h"] = np.linalg.norm(r_hel, axis=0)
    table["delta"] = (dist * u.km).to(u.au)
    table["delta_dot"] = delta_dot * u.km / u.s
    table["phase"] = (np.arctan2(cross, np.sum(-to_sun * rho, axis=0)) * u.rad).to(u.deg)
    ra_rate = (rho[0] * rho_dot[1] - rho[1] * rho_dot[0]) / (dist * rxy)
    table["ra_rate"] = (ra_rate * rate).to(u.arcsec / u.h)
    dec_rate = (rho_dot[2] * dist - rho[2] * delta_dot) / (dist * rxy)
    table["dec_rate"] = (dec_rate * rate).to(u.arcsec / u.h)
    table.meta["observer"] = observer.metadata()
    table.meta["frame"] = "ICRS astrometric (light-time corrected, no aberration)"
    table.meta["ephemeris"] = "two-body orbit; Earth and Sun from the astropy built-in ephemeris"
    return table


def write_ephemeris(table: QTable, path) -> None:
    """Write ``table`` (a `~astropy.table.QTable`) to ``path`` as ECSV, atomically.

    Units are kept and times written to the microsecond.  The table goes to a
    temporary file in the destination's directory, then :func:`os.replace` moves
    it over ``path``, so no reader sees a partial file.  Reading UTC times past
    the bundled leap-second table back should be wrapped in
    :func:`pipeline.offline.future_time_tolerated`.
    """
    if not isinstance(table, QTable):
        msg = f"'table' must be an astropy QTable, found {type(table).__name__}"
        raise GasledgerTypeError(msg)
    path = os.fspath(path)
    out = table.copy(copy_data=False)
    for name in out.colnames:
        if isinstance(out[name], Time):
            out[name].precision = 6
    fd, tmp = tempfile.mkstemp(prefix=".ephemeris-", suffix=".ecsv",
                               dir=os.path.dirname(os.path.abspath(path)))
    os.close(fd)
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp's 0600 would outlive the rename
        with future_time_tolerated():
            out.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise


def ephemeris_from_elements(
    elements: OrbitalElements,
    start: Time,
    stop: Time,
    step: u.Quantity,
    location: "Observer | EarthLocation | None" = None,
) -> QTable:
    """:func:`observe` on the grid ``start + k * step <= stop`` (``stop`` included on the grid).

    With a ``location`` the table also has ``delta_dot_geocentric``, the range rate seen from the geocentre.

    ``step`` is a time Quantity > 0; ``step <= 0``, ``stop < start`` or more than
    1,000,000 rows raise `EphemerisError`.  ``location`` as in :func:`observe`.
    """
    step_s = float(_value(step, u.s, "step", scalar=True))
    if not step_s > 0:
        msg = f"'step' must be > 0, found {step!r}"
        raise EphemerisError(msg)
    _check_time(start, "start")
    _check_time(stop, "stop")
    with future_time_tolerated():
        span = (stop - start).to_value(u.s)  # in the scale of 'start'
        if span < 0:
            msg = f"'stop' ({stop.isot}) must not precede 'start' ({start.isot})"
            raise EphemerisError(msg)
    n = int(math.floor(span / step_s + 1e-6)) + 1  # 'stop' counts if within 1e-6 step
    if n > _MAX_ROWS:
        msg = f"'step' gives {n} rows, more than the {_MAX_ROWS} allowed"
        raise EphemerisError(msg)
    with future_time_tolerated():
        times = start + TimeDelta(np.arange(n) * step_s, format="sec")
    table = observe(elements, times, location)
    if _as_observer(location).kind == "site":  # both range rates: topocentric (delta_dot) and geocentric
        table["delta_dot_geocentric"] = observe(elements, times, None)["delta_dot"]
    # the table says whom it is seen from (metadata 'observer', read by pipeline.geometry.ephemeris.check_observer)
    return table
