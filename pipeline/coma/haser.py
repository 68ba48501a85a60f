"""The Haser model of a cometary coma.

Molecules leave the nucleus isotropically at a constant speed ``v`` and are destroyed
(a parent) or made from a parent and destroyed in turn (a daughter) with fixed scale
lengths.  This module gives number densities, column densities, and the number of
molecules seen in a circular aperture, in a Gaussian beam, and in a circular aperture
on a beam-convolved image: the numbers that turn a line flux into a production rate.

Notes
-----
Every line-of-sight integral is written with :math:`\\sec t = \\cosh w`, which
turns the Bickley-type integrals of the model into integrals over
:math:`w \\in [0, \\infty)` of functions that are even and analytic in the strip
:math:`|{\\rm Im}\\, w| < \\pi/2` and decay at least like :math:`\\mathrm{sech}^2 w`.
The trapezoidal rule converges geometrically for such integrands; the step and
the range are chosen per element so that the relative error stays near the
double-precision round-off (below :math:`10^{-12}`) for any ratio of aperture to
scale length.  Beam-weighted counts are integrals of the aperture count against
a smooth weight, done with composite Gauss-Legendre panels graded towards the
nucleus (relative error below :math:`10^{-9}`).

All functions broadcast over their array arguments.
"""

import math

import astropy.units as u
import numpy as np
from scipy.special import i1e

from pipeline.coma.thermal import mean_thermal_speed
from pipeline.errors import EphemerisError
from pipeline.quantities import checked_array as _checked

__all__ = [
    "outflow_speed_law",
    "thermal_speed",
    "scale_length",
    "parent_density",
    "daughter_density",
    "parent_column_density",
    "daughter_column_density",
    "parent_aperture_count",
    "daughter_aperture_count",
    "beam_count",
    "convolved_aperture_count",
]

_KM3_TO_CM3 = 1e-15  # km^-3 -> cm^-3
_KM2_TO_CM2 = 1e-10  # km^-2 -> cm^-2
_LOG_EPS = 39.2  # -ln(1e-17): tail cut of the trapezoidal sums
_H_MAX = 0.2  # largest trapezoid step in w (error ~ exp(-2 pi d / h), d ~ 1.4)
_W_CAP = 200.0  # largest range in w (cosh stays finite)
_CHUNK = 131_072  # largest number of integrand values evaluated at once (cache-sized)
_FWHM_TO_SIGMA = 1.0 / math.sqrt(8.0 * math.log(2.0))
_X_MAX = 1e100  # largest distance / scale length used for a daughter (see _ratio)
#: (-1)^k / (k! (k+1) (k+2)), k = 0..13: series of _delta for nu <= 1/4 (next term < 1e-18)
_DELTA_SERIES = tuple((-1.0) ** k / (math.factorial(k) * (k + 1) * (k + 2)) for k in range(14))


def _panel_nodes(n_uniform: int = 12, n_graded: int = 14, order: int = 10, order_graded: int = 8):
    """Gauss-Legendre nodes and weights on [0, 1]: uniform panels, the first graded to 0."""
    first = 1.0 / n_uniform
    graded = [0.0] + [first * 2.0 ** (-k) for k in range(n_graded, -1, -1)]
    uniform = [j * first for j in range(1, n_uniform + 1)]
    nodes, weights = [], []
    for edges, n in ((graded, order_graded), (uniform, order)):
        x, w = np.polynomial.legendre.leggauss(n)
        edges = np.array(edges)
        half = 0.5 * np.diff(edges)
        mid = 0.5 * (edges[1:] + edges[:-1])
        nodes.append((mid[:, None] + half[:, None] * x).ravel())
        weights.append((half[:, None] * w).ravel())
    return np.concatenate(nodes), np.concatenate(weights)


_S_NODES, _S_WEIGHTS = _panel_nodes()


# ----------------------------------------------------------------------------- kernels
def _phi(y: np.ndarray) -> np.ndarray:
    """(1 - exp(-y)) / y for y >= 0, equal to 1 at y = 0 (expm1 keeps it exact for small y)."""
    positive = y > 0
    return np.where(positive, -np.expm1(-y) / np.where(positive, y, 1.0), 1.0)


def _delta(mu: np.ndarray, nu: np.ndarray) -> np.ndarray:
    """Int_0^1 s exp(-mu s) phi((nu - mu) s) ds for 0 <= mu <= nu, without cancellation."""
    mu, nu = np.broadcast_arrays(np.asarray(mu, float), np.asarray(nu, float))
    out = np.empty(mu.shape)
    small = nu <= 0.25
    m, n = mu[small], nu[small]
    # mean over [mu, nu] of psi(s) = sum_k (-s)^k / (k! (k+2)); h_k = sum_j mu^j nu^(k-j)
    h, mk = np.ones_like(m), np.ones_like(m)
    total = 0.5 * h
    for coefficient in _DELTA_SERIES[1:]:
        mk = mk * m
        h = n * h + mk
        total = total + coefficient * h
    out[small] = total
    m, n = mu[~small], nu[~small]
    out[~small] = (_phi(m) - np.exp(-m) * _phi(n - m)) / n
    return out


def _even_trapezoid(integrand, w_max, h_max, *params) -> np.ndarray:
    """Int_0^inf integrand(w, *params) dw of an even integrand, by the trapezoidal rule."""
    arrays = np.broadcast_arrays(*(np.asarray(a, float) for a in (w_max, h_max, *params)))
    shape = arrays[0].shape
    wm, hm, *ps = (a.ravel() for a in arrays)
    out = np.empty(wm.size)
    if wm.size == 0:
        return out.reshape(shape)
    n_all = np.maximum(np.ceil(wm / hm).astype(int) + 1, 8)
    order = np.argsort(n_all, kind="stable")  # chunks of similar node counts
    start = 0
    while start < wm.size:
        rows = max(1, _CHUNK // int(n_all[order[min(start + _CHUNK // 8, wm.size) - 1]]))
        idx = order[start:start + rows]
        n = int(n_all[idx].max())
        h = wm[idx] / (n - 1)
        vals = integrand(h[:, None] * np.arange(n), *(p[idx, None] for p in ps))
        out[idx] = h * (vals.sum(axis=1) - 0.5 * vals[:, 0])
        start += rows
    return out.reshape(shape)


def _decay_range(x: np.ndarray) -> np.ndarray:
    """w beyond which exp(-x cosh w) is below exp(-40) of its value at w = 0."""
    xs = np.maximum(x, 1e-3)
    big = np.arccosh(1.0 + 40.0 / xs)
    tiny = math.log(80.0) - np.log(np.maximum(x, 1e-300))
    return np.minimum(np.where(x < 1e-3, tiny, big), _W_CAP)


def _ki1(x: np.ndarray) -> np.ndarray:
    """Bickley function Ki_1(x) = int_0^(pi/2) exp(-x / cos t) dt, x > 0."""
    x = np.minimum(x, 1e4)  # Ki_1 underflows to 0 well before
    w_max = np.minimum(_decay_range(x), 42.0)
    h_max = np.minimum(_H_MAX, 0.7 / np.sqrt(np.maximum(x, 1e-300)))
    return _even_trapezoid(lambda w, x: np.exp(-x * np.cosh(w)) / np.cosh(w), w_max, h_max, x)


def _one_minus_ki2(x: np.ndarray) -> np.ndarray:
    """1 - Ki_2(x) = int_0^(pi/2) cos t (1 - exp(-x / cos t)) dt, x >= 0 (inf allowed)."""
    x = np.minimum(x, 1e3)  # Ki_2(1e3) underflows
    lower = -np.expm1(-x)
    w_max = np.clip(0.5 * (math.log(2.0) - np.log(np.maximum(lower, 1e-300)) + _LOG_EPS), 4.0, _W_CAP)
    return _even_trapezoid(lambda w, x: -np.expm1(-x * np.cosh(w)) / np.cosh(w) ** 2, w_max, _H_MAX, x)


def _ratio(a: np.ndarray, b: np.ndarray, clip: bool = True) -> np.ndarray:
    """a / b (overflow to inf allowed), capped at _X_MAX if ``clip`` (daughters are evaluated
    within 1e4 longer scale lengths, so a cap only hits terms of relative size 1 / _X_MAX)."""
    with np.errstate(over="ignore"):
        x = a / b
    return np.minimum(x, _X_MAX) if clip else x


def _daughter_ki1(xp: np.ndarray, xd: np.ndarray) -> np.ndarray:
    """L_d/(L_p - L_d) [Ki_1(xp) - Ki_1(xd)] / xp, stable for L_p ~ L_d and small x."""
    x_min, x_del = np.minimum(xp, xd), np.abs(xp - xd)
    h_max = np.minimum(_H_MAX, 0.7 / np.sqrt(np.maximum(x_min, 1e-300)))
    integrand = lambda w, x_min, x_del: np.exp(-x_min * np.cosh(w)) * _phi(x_del * np.cosh(w))  # noqa: E731
    return _even_trapezoid(integrand, _decay_range(x_min), h_max, x_min, x_del)


def _daughter_fraction(xp: np.ndarray, xd: np.ndarray) -> np.ndarray:
    """Daughter aperture count in units of Q L_p / v, divided by xp^2 (xp, xd > 0 finite)."""
    x_min, x_max = np.minimum(xp, xd), np.maximum(xp, xd)
    lower = np.maximum(x_min * x_max * _delta(x_min, x_max), 1e-300)
    w_max = np.clip(0.5 * (math.log(2.0) - np.log(lower) + _LOG_EPS), 4.0, _W_CAP)
    integrand = lambda w, x_min, x_max: _delta(x_min * np.cosh(w), x_max * np.cosh(w))  # noqa: E731
    return _even_trapezoid(integrand, w_max, _H_MAX, x_min, x_max)


def _count_per_rate(rho: np.ndarray, lp: np.ndarray, ld=None) -> np.ndarray:
    """Molecules in a cylinder of radius rho [km] per unit Q / v, i.e. in km."""
    rho, lp = np.broadcast_arrays(rho, lp)
    if ld is None:
        return lp * _one_minus_ki2(_ratio(rho, lp, clip=False))
    rho, lp, ld = np.broadcast_arrays(rho, lp, ld)
    out = ld.copy()  # total content Q L_d / v, reached to double precision beyond 1e3 L
    out[rho == 0] = 0.0
    inner = (rho > 0) & (rho < 1e3 * np.maximum(lp, ld))
    r, p, d = rho[inner], lp[inner], ld[inner]
    xp = _ratio(r, p)
    out[inner] = r * (xp * _daughter_fraction(xp, _ratio(r, d)))
    return out


def _weighted(rho_lo, span, lp, ld, weight) -> np.ndarray:
    """Int aperture_count(r) weight(r) dr over [rho_lo, rho_lo + span], per unit Q / v."""
    r = rho_lo[..., None] + span[..., None] * _S_NODES
    counts = _count_per_rate(r, lp[..., None], None if ld is None else ld[..., None])
    return span * ((counts * weight(r)) @ _S_WEIGHTS)


# ----------------------------------------------------------------------------- speeds, lengths
def outflow_speed_law(r_h: u.Quantity) -> u.Quantity:
    """Gas outflow speed at heliocentric distance ``r_h`` (a length, > 0), in km/s.

    Notes
    -----
    :math:`v = 0.85\\ {\\rm km\\,s^{-1}}\\,(r_h / 1\\ {\\rm au})^{-1/2}`.

    References
    ----------
    .. [1] Biver, N. et al. 1997, Earth Moon Planets 78, 5; Biver, N. et al. 2006,
       A&A 449, 1255 (the empirical law, from memory).
    """
    r = _checked(r_h, u.au, "r_h", error=EphemerisError)
    return u.Quantity(0.85 / np.sqrt(r), u.km / u.s)


def thermal_speed(temperature: u.Quantity, molecular_mass: u.Quantity) -> u.Quantity:
    """Mean speed of a Maxwell-Boltzmann gas, in km/s.

    Parameters
    ----------
    temperature, molecular_mass : `~astropy.units.Quantity`
        Kinetic temperature and mass of one molecule (e.g. in ``u.u``), both > 0.

    Notes
    -----
    :math:`\\bar v = \\sqrt{8 k T / (\\pi m)}`, from :func:`pipeline.coma.thermal.mean_thermal_speed`
    (the home of the thermal-speed formulas).
    """
    return mean_thermal_speed(temperature, molecular_mass)


def scale_length(speed: u.Quantity, rate_1au: u.Quantity, r_h: u.Quantity) -> u.Quantity:
    """Scale length (km) of a species destroyed by sunlight.

    Parameters
    ----------
    speed, rate_1au, r_h : `~astropy.units.Quantity`
        Outflow speed, photodestruction rate at 1 au (1/s) and heliocentric distance, all > 0.

    Notes
    -----
    :math:`L = v\\,\\tau`, :math:`\\tau = (r_h / 1\\ {\\rm au})^2 / \\beta_{1\\,\\rm au}`.

    Examples
    --------
    At 2 au the lifetime is four times the 1 au one, so L = 0.8 km/s x 4 / (1.3e-5 /s):

    >>> import astropy.units as u
    >>> length = scale_length(0.8 * u.km / u.s, 1.3e-5 / u.s, 2.0 * u.au)
    >>> print(f"{length:.4g}")
    2.462e+05 km
    >>> print(f"{0.8 * 2.0**2 / 1.3e-5:.4g}")
    2.462e+05
    """
    v = _checked(speed, u.km / u.s, "speed")
    beta = _checked(rate_1au, 1 / u.s, "rate_1au")
    r = _checked(r_h, u.au, "r_h", error=EphemerisError)
    return u.Quantity(v * r * r / beta, u.km)


# ----------------------------------------------------------------------------- densities
def _common(q, speed, length_parent, length_daughter=None, parent_name="length_parent"):
    """Checked q [1/s], speed [km/s] and scale lengths [km] (the daughter one may be None)."""
    qq = _checked(q, 1 / u.s, "q", sign="non-negative")
    v = _checked(speed, u.km / u.s, "speed")
    lp = _checked(length_parent, u.km, parent_name)
    ld = None if length_daughter is None else _checked(length_daughter, u.km, "length_daughter")
    return qq, v, lp, ld


def parent_density(r: u.Quantity, q: u.Quantity, speed: u.Quantity, length: u.Quantity) -> u.Quantity:
    """Number density (cm^-3) of a parent species at distance ``r`` from the nucleus.

    Parameters
    ----------
    r, q, speed, length : `~astropy.units.Quantity`
        Distance (> 0), production rate (1/s, >= 0), outflow speed (> 0), scale length (> 0).

    Notes
    -----
    :math:`n(r) = Q\\,e^{-r/L} / (4\\pi r^2 v)`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    rr = _checked(r, u.km, "r")
    qq, v, length_km, _ = _common(q, speed, length, parent_name="length")
    n = qq * np.exp(-rr / length_km) / (4.0 * math.pi * rr * rr * v)
    return u.Quantity(n * _KM3_TO_CM3, u.cm**-3)


def daughter_density(r: u.Quantity, q: u.Quantity, speed: u.Quantity, length_parent: u.Quantity,
                     length_daughter: u.Quantity) -> u.Quantity:
    """Number density (cm^-3) of a daughter made by a parent of scale length ``length_parent``.

    Parameters are those of :func:`parent_density`; ``length_daughter`` (> 0) is the
    daughter's own scale length.  Both species move at ``speed``.

    Notes
    -----
    :math:`n_d(r) = \\frac{Q}{4\\pi r^2 v}\\frac{L_d}{L_p - L_d}(e^{-r/L_p} - e^{-r/L_d})`,
    evaluated as :math:`\\frac{Q}{4\\pi r^2 v}\\frac{r}{L_p}e^{-r/L_>}\\,\\varphi(r|1/L_p - 1/L_d|)`
    with :math:`L_> = \\max(L_p, L_d)` and :math:`\\varphi(y) = (1 - e^{-y})/y`, which is
    exact at :math:`L_p = L_d` (:math:`n = Q r e^{-r/L} / (4\\pi r^2 v L)`).

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    rr = _checked(r, u.km, "r")
    qq, v, lp, ld = _common(q, speed, length_parent, length_daughter)
    a, b = 1.0 / lp, 1.0 / ld
    kernel = a * rr * np.exp(-np.minimum(a, b) * rr) * _phi(np.abs(a - b) * rr)
    n = qq * kernel / (4.0 * math.pi * rr * rr * v)
    return u.Quantity(n * _KM3_TO_CM3, u.cm**-3)


def parent_column_density(rho: u.Quantity, q: u.Quantity, speed: u.Quantity,
                          length: u.Quantity) -> u.Quantity:
    """Column density (cm^-2) of a parent species at projected distance ``rho`` (> 0).

    Parameters ``q``, ``speed`` and ``length`` are those of :func:`parent_density`.

    Notes
    -----
    :math:`N(\\rho) = \\frac{Q}{2\\pi v \\rho}\\int_0^{\\pi/2} e^{-\\rho/(L\\cos t)}\\,dt
    = \\frac{Q}{2\\pi v\\rho}\\,{\\rm Ki}_1(\\rho/L)`, with the Bickley function
    :math:`{\\rm Ki}_1(x) = \\pi/2 - \\int_0^x K_0`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    .. [2] Abramowitz, M. & Stegun, I. A. 1964, Handbook of Mathematical Functions,
       section 11.2 (repeated integrals of K_0; from memory).
    """
    rr = _checked(rho, u.km, "rho")
    qq, v, length_km, _ = _common(q, speed, length, parent_name="length")
    rr, length_km = np.broadcast_arrays(rr, length_km)
    col = qq * _ki1(_ratio(rr, length_km, clip=False)) / (2.0 * math.pi * v * rr)
    return u.Quantity(col * _KM2_TO_CM2, u.cm**-2)


def daughter_column_density(rho: u.Quantity, q: u.Quantity, speed: u.Quantity, length_parent: u.Quantity,
                            length_daughter: u.Quantity) -> u.Quantity:
    """Column density (cm^-2) of a daughter species at projected distance ``rho`` (> 0).

    Parameters are those of :func:`daughter_density`.

    Notes
    -----
    :math:`N_d(\\rho) = \\frac{Q}{2\\pi v\\rho}\\frac{L_d}{L_p - L_d}
    [{\\rm Ki}_1(\\rho/L_p) - {\\rm Ki}_1(\\rho/L_d)]`, computed from the stable
    form of the density kernel (see :func:`daughter_density`).  Accurate for
    :math:`\\rho \\ge 10^{-80}` scale lengths (the central logarithmic cusp is cut there).

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    rr = _checked(rho, u.km, "rho")
    qq, v, lp, ld = _common(q, speed, length_parent, length_daughter)
    rr, lp, ld = np.broadcast_arrays(rr, lp, ld)
    ki = np.zeros(rr.shape)  # 0 (underflow) beyond 1e4 scale lengths
    near = rr < 1e4 * np.maximum(lp, ld)
    xp = _ratio(rr[near], lp[near])
    ki[near] = xp * _daughter_ki1(xp, _ratio(rr[near], ld[near]))
    col = qq * ki / (2.0 * math.pi * v * rr)
    return u.Quantity(col * _KM2_TO_CM2, u.cm**-2)


# ----------------------------------------------------------------------------- counts
def parent_aperture_count(rho_ap: u.Quantity, q: u.Quantity, speed: u.Quantity,
                          length: u.Quantity) -> u.Quantity:
    """Number of parent molecules (dimensionless) in a cylinder of radius ``rho_ap`` through the coma.

    ``rho_ap`` is the aperture radius at the comet, >= 0 (``inf``: the whole coma);
    ``q``, ``speed`` and ``length`` are those of :func:`parent_density`.

    Notes
    -----
    :math:`N_{\\rm ap} = \\frac{QL}{v}\\int_0^{\\pi/2}\\cos t\\,(1 - e^{-x/\\cos t})\\,dt
    = \\frac{QL}{v}[1 - {\\rm Ki}_2(x)]`, :math:`x = \\rho_{\\rm ap}/L`; it tends to
    :math:`\\pi Q\\rho_{\\rm ap}/(2v)` for :math:`x \\to 0` and to :math:`QL/v` for
    :math:`x \\to \\infty`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.

    Examples
    --------
    The two limits: an aperture of 1e-4 scale lengths holds pi Q rho / (2 v) molecules, the whole
    coma Q L / v (Q = 1e28 /s, v = 1 km/s, L = 1e6 km):

    >>> import math
    >>> import astropy.units as u
    >>> q, v, length = 1e28 / u.s, 1.0 * u.km / u.s, 1e6 * u.km
    >>> print(f"{parent_aperture_count(100 * u.km, q, v, length):.3g}")
    1.57e+30
    >>> print(f"{math.pi * 1e28 * 100 / (2 * 1.0):.3g}")
    1.57e+30
    >>> print(f"{parent_aperture_count(math.inf * u.km, q, v, length):.6g}")
    1e+34
    """
    rr = _checked(rho_ap, u.km, "rho_ap", sign="non-negative", allow_inf=True)
    qq, v, length_km, _ = _common(q, speed, length, parent_name="length")
    return u.Quantity(qq / v * _count_per_rate(rr, length_km), u.dimensionless_unscaled)


def daughter_aperture_count(rho_ap: u.Quantity, q: u.Quantity, speed: u.Quantity, length_parent: u.Quantity,
                            length_daughter: u.Quantity) -> u.Quantity:
    """Number of daughter molecules (dimensionless) in a cylinder of radius ``rho_ap``.

    ``rho_ap`` is as in :func:`parent_aperture_count`, the other parameters as in
    :func:`daughter_density`.

    Notes
    -----
    With :math:`F(R) = \\int_0^R f(r)\\,dr` of the density kernel :math:`f` of
    :func:`daughter_density`, :math:`N_{\\rm ap} = \\frac{Q}{v}\\int_0^{\\pi/2}\\cos t\\,
    F(\\rho_{\\rm ap}/\\cos t)\\,dt`; it tends to :math:`Q L_d / v` for a large aperture.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    rr = _checked(rho_ap, u.km, "rho_ap", sign="non-negative", allow_inf=True)
    qq, v, lp, ld = _common(q, speed, length_parent, length_daughter)
    return u.Quantity(qq / v * _count_per_rate(rr, lp, ld), u.dimensionless_unscaled)


def beam_count(fwhm: u.Quantity, q: u.Quantity, speed: u.Quantity, length_parent: u.Quantity,
               length_daughter: u.Quantity | None = None) -> u.Quantity:
    """Number of molecules (dimensionless) weighted by a Gaussian beam centred on the nucleus.

    Parameters
    ----------
    fwhm : `~astropy.units.Quantity`
        Full width at half maximum of the beam, as a length at the comet, > 0.
    q, speed, length_parent : `~astropy.units.Quantity`
        As in :func:`daughter_density`.
    length_daughter : `~astropy.units.Quantity`, optional
        Scale length of the daughter; without it the parent is counted.

    Notes
    -----
    With the beam peak normalised to 1,
    :math:`N_B = \\int_0^\\infty 2\\pi\\rho N(\\rho)\\,e^{-\\alpha\\rho^2}d\\rho
    = \\int_0^\\infty N_{\\rm ap}(\\rho)\\,2\\alpha\\rho\\,e^{-\\alpha\\rho^2}d\\rho`,
    :math:`\\alpha = 4\\ln 2/\\theta^2` (integration by parts).  For :math:`L \\gg \\theta`
    it tends to :math:`\\frac{\\pi Q\\theta}{4v}\\sqrt{\\pi/(4\\ln 2)}`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    theta = _checked(fwhm, u.km, "fwhm")
    qq, v, lp, ld = _common(q, speed, length_parent, length_daughter)
    arrays = np.broadcast_arrays(theta, lp, *(() if ld is None else (ld,)))
    theta, lp, ld = arrays[0], arrays[1], (arrays[2] if ld is not None else None)
    a = 4.0 * math.log(2.0)

    def weight(r):
        t = r / theta[..., None]
        return 2.0 * a * t * np.exp(-a * t * t) / theta[..., None]

    n = _weighted(np.zeros_like(theta), theta * math.sqrt(46.0 / a), lp, ld, weight)
    return u.Quantity(qq / v * n, u.dimensionless_unscaled)


def convolved_aperture_count(rho_ap: u.Quantity, beam_fwhm: u.Quantity, q: u.Quantity, speed: u.Quantity,
                             length_parent: u.Quantity,
                             length_daughter: u.Quantity | None = None) -> u.Quantity:
    """Molecules (dimensionless) counted by a circular aperture on a beam-convolved image.

    Parameters
    ----------
    rho_ap : `~astropy.units.Quantity`
        Aperture radius at the comet, centred on the nucleus, >= 0 (``inf`` allowed).
    beam_fwhm : `~astropy.units.Quantity`
        FWHM of the circular Gaussian (unit integral) that convolved the image, >= 0;
        0 gives the plain aperture count.
    q, speed, length_parent, length_daughter : `~astropy.units.Quantity`
        As in :func:`beam_count`.

    Notes
    -----
    :math:`N = \\int_0^\\infty 2\\pi r N(r) W(r)\\,dr`, where
    :math:`W(r) = 1 - Q_1(r/\\sigma, \\rho_{\\rm ap}/\\sigma)` is the chance that a 2-D
    Gaussian of width :math:`\\sigma = \\theta/\\sqrt{8\\ln 2}` centred at distance
    :math:`r` falls inside the aperture (:math:`Q_1`: Marcum Q function).  Integrated
    by parts, :math:`N = \\int_0^\\infty N_{\\rm ap}(r)\\,p(r)\\,dr` with the smooth weight
    :math:`p = -dW/dr = \\frac{\\rho_{\\rm ap}}{\\sigma^2}e^{-(r^2+\\rho_{\\rm ap}^2)/2\\sigma^2}
    I_1(r\\rho_{\\rm ap}/\\sigma^2)`, from
    :math:`\\partial Q_1(a, b)/\\partial a = b\\,e^{-(a^2+b^2)/2} I_1(ab)`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    .. [2] Marcum, J. I. 1960, IRE Trans. Inf. Theory 6, 59 (the Q function; from memory).
    """
    radius = _checked(rho_ap, u.km, "rho_ap", sign="non-negative", allow_inf=True)
    sigma = _checked(beam_fwhm, u.km, "beam_fwhm", sign="non-negative") * _FWHM_TO_SIGMA
    qq, v, lp, ld = _common(q, speed, length_parent, length_daughter)
    arrays = np.broadcast_arrays(radius, sigma, lp, *(() if ld is None else (ld,)))
    shape = arrays[0].shape
    radius, sigma, lp = (a.ravel() for a in arrays[:3])
    ld = arrays[3].ravel() if ld is not None else None
    out = _count_per_rate(radius, lp, ld)
    # beyond rho_ap = 1e8 sigma the blur changes the count by < (sigma / rho_ap)^2 = 1e-16
    blurred = (sigma > 0) & (radius > 0) & (radius < 1e8 * sigma)
    if np.any(blurred):
        rad, sig = radius[blurred], sigma[blurred]
        lo = np.maximum(rad - 10.0 * sig, 0.0)
        span = rad + 10.0 * sig - lo

        def weight(r):
            ss = sig[:, None]
            a, b = r / ss, rad[:, None] / ss
            return b / ss * i1e(a * b) * np.exp(-0.5 * (a - b) ** 2)

        out[blurred] = _weighted(lo, span, lp[blurred], None if ld is None else ld[blurred], weight)
    return u.Quantity(qq / v * out.reshape(shape), u.dimensionless_unscaled)
