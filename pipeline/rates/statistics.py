"""Limits on a non-negative quantity measured with Gaussian noise.

A production rate (or a line flux) cannot be negative, but its estimate from a
noisy spectrum can be.  This module turns an estimate ``x`` with standard error
``sigma`` into

- the classical (frequentist, boundary-blind) limit ``x + n sigma``;
- the Bayesian upper limit for a flat prior on ``mu >= 0``;
- the Feldman-Cousins unified interval, a Neyman construction with
  likelihood-ratio ordering that respects the boundary ``mu >= 0``;
- the detection significance ``x / sigma``;
- the inverse-variance mean of independent estimates, with its error.

Every function accepts plain floats, numpy arrays or astropy Quantities
(``estimate`` and ``sigma`` of the same physical type) and returns the same
kind: a Quantity in the unit of ``estimate``, or plain numbers.  NaN estimates
give NaN results, so masked entries of a table pass through.
"""

import math

import astropy.units as u
import numpy as np
from scipy import special

from pipeline.errors import LimitError

__all__ = [
    "nsigma_to_confidence",
    "classical_upper_limit",
    "bayesian_upper_limit",
    "feldman_cousins_acceptance_interval",
    "feldman_cousins_interval",
    "feldman_cousins_upper_limit",
    "detection_significance",
    "inverse_variance_mean",
]

ArrayOrQuantity = float | np.ndarray | u.Quantity

# Above this |estimate/sigma| (estimate negative) the Bayesian limit uses its
# asymptotic form; below it the exact closed form keeps ~1e-9 relative accuracy.
_BAYES_ASYMPTOTIC_Z = 1.0e4
_XTOL = 1.0e-13


# --------------------------------------------------------------------------- #
# input handling
# --------------------------------------------------------------------------- #
def _check_confidence(confidence: float) -> float:
    try:
        cl = float(confidence)
    except (TypeError, ValueError) as exc:
        msg = f"'confidence' must be a number in (0, 1), found {confidence!r}"
        raise LimitError(msg) from exc
    if not (0.0 < cl < 1.0):
        msg = f"'confidence' must lie in the open interval (0, 1), found {confidence!r}"
        raise LimitError(msg)
    return cl


def _in_one_unit(
    estimate: ArrayOrQuantity, sigma: ArrayOrQuantity
) -> tuple[np.ndarray, np.ndarray, u.UnitBase | None]:
    """Return estimate and sigma as float arrays in the unit of ``estimate``, and that unit.

    The unit is ``None`` when neither argument is a Quantity.
    """
    if isinstance(estimate, u.Quantity) or isinstance(sigma, u.Quantity):
        est_q = u.Quantity(estimate, dtype=float)
        return est_q.value, u.Quantity(sigma, dtype=float).to_value(est_q.unit), est_q.unit
    return np.asarray(estimate, dtype=float), np.asarray(sigma, dtype=float), None


def _split(
    estimate: ArrayOrQuantity, sigma: ArrayOrQuantity, name: str = "estimate"
) -> tuple[np.ndarray, np.ndarray, u.UnitBase | None]:
    """Return estimate and sigma as checked float arrays in one unit (broadcast), and that unit."""
    x, s, unit = _in_one_unit(estimate, sigma)
    bad = ~(np.isfinite(s) & (s > 0))
    if np.any(bad):
        found = sigma if np.ndim(s) == 0 else np.asarray(s)[bad]
        msg = f"'sigma' must be finite and > 0, found {found!r}"
        raise LimitError(msg)
    if np.any(np.isinf(x)):
        msg = f"{name!r} must be finite (NaN is passed through), found {estimate!r}"
        raise LimitError(msg)
    x, s = np.broadcast_arrays(x, s)
    return x, s, unit


def _wrap(values: np.ndarray, unit: u.UnitBase | None) -> ArrayOrQuantity:
    values = np.asarray(values, dtype=float)
    if unit is None:
        return values[()] if values.ndim == 0 else values
    return u.Quantity(values, unit)


def _sf(z: float) -> float:
    """Standard normal survival function of a scalar (accurate in the upper tail)."""
    return 0.5 * math.erfc(z / math.sqrt(2.0))


# --------------------------------------------------------------------------- #
# simple quantities
# --------------------------------------------------------------------------- #
def nsigma_to_confidence(nsigma: float | np.ndarray) -> float | np.ndarray:
    """One-sided Gaussian confidence level of an ``n``-sigma limit.

    Parameters
    ----------
    nsigma : float or array
        Number of standard deviations.

    Returns
    -------
    float or array
        ``Phi(nsigma)``, the standard normal CDF.

    Notes
    -----
    ``CL = Phi(n) = [1 + erf(n / sqrt(2))] / 2``; ``n = 3`` gives 0.99865.

    Examples
    --------
    >>> round(nsigma_to_confidence(3.0), 5)
    0.99865
    """
    n = np.asarray(nsigma, dtype=float)
    if np.any(np.isnan(n)):
        msg = f"'nsigma' must be a number, found {nsigma!r}"
        raise LimitError(msg)
    out = special.ndtr(n)
    return float(out) if np.ndim(out) == 0 else out


def classical_upper_limit(
    estimate: ArrayOrQuantity, sigma: ArrayOrQuantity, nsigma: float = 3.0
) -> ArrayOrQuantity:
    """Classical ``n``-sigma upper limit ``estimate + nsigma * sigma``.

    Parameters
    ----------
    estimate, sigma : float, array or Quantity
        Measured value and its standard error (same physical type).
    nsigma : float, optional
        Number of standard deviations (default 3).

    Returns
    -------
    float, array or Quantity
        The limit, in the unit of ``estimate``.

    Notes
    -----
    This limit ignores the physical boundary: a strongly negative estimate gives
    a negative (empty) limit.  Use :func:`bayesian_upper_limit` or
    :func:`feldman_cousins_upper_limit` for a limit that is always positive.

    Examples
    --------
    Q = (2.0 +- 0.5) x 1e26 /s gives the 3-sigma limit 2.0e26 + 3 x 0.5e26 = 3.5e26 /s:

    >>> import astropy.units as u
    >>> print(f"{classical_upper_limit(2.0e26 / u.s, 0.5e26 / u.s):.3g}")
    3.5e+26 1 / s
    """
    if not np.isfinite(nsigma):
        msg = f"'nsigma' must be finite, found {nsigma!r}"
        raise LimitError(msg)
    x, s, unit = _split(estimate, sigma)
    return _wrap(x + float(nsigma) * s, unit)


def detection_significance(estimate: ArrayOrQuantity, sigma: ArrayOrQuantity) -> ArrayOrQuantity:
    """Signal-to-noise ratio ``estimate / sigma``.

    Returns
    -------
    float, array or Quantity
        Plain numbers for plain input, a dimensionless Quantity for Quantity input.
    """
    x, s, unit = _split(estimate, sigma)
    return _wrap(x / s, None if unit is None else u.dimensionless_unscaled)


# --------------------------------------------------------------------------- #
# Bayesian limit, flat prior on mu >= 0
# --------------------------------------------------------------------------- #
def bayesian_upper_limit(
    estimate: ArrayOrQuantity, sigma: ArrayOrQuantity, confidence: float
) -> ArrayOrQuantity:
    """Bayesian upper limit for a flat prior on ``mu >= 0``.

    Parameters
    ----------
    estimate, sigma : float, array or Quantity
        Measured value ``x`` and its Gaussian standard error ``s`` (same physical
        type; they broadcast).
    confidence : float
        Posterior probability below the limit, in (0, 1).

    Returns
    -------
    float, array or Quantity
        The limit ``U > 0`` in the unit of ``estimate``.

    Notes
    -----
    With the likelihood ``N(x | mu, s)`` and a flat prior on ``mu >= 0`` the
    posterior is a Gaussian truncated at zero, and ``U`` solves

    .. math::

        \\frac{\\Phi((U-x)/s) - \\Phi(-x/s)}{1 - \\Phi(-x/s)} = CL .

    Written with the survival function, ``Q(t) = (1 - CL)\\,\\Phi(x/s)`` with
    ``t = (U - x)/s``, so ``t = -\\Phi^{-1}_{\\log}(\\ln(1-CL) + \\ln\\Phi(x/s))``
    where ``\\Phi^{-1}_{\\log}`` is the inverse of ``\\ln\\Phi``
    (:func:`scipy.special.ndtri_exp`).  Working in logarithms keeps
    ``x = -40 s`` finite.  For ``x/s < -10^4`` the asymptotic form (the
    posterior becomes exponential of rate ``|x|/s^2``) avoids
    the cancellation in ``x + s t``; with ``a = -x/s`` and ``L = -\\ln(1-CL)``,
    ``U = s (L/a) [1 - (L/2 + 1)/a^2]`` (expansion of the Mills ratio,
    relative error ``O(a^{-4})``).  Limits: ``x >> s`` gives
    ``x + s \\Phi^{-1}(CL)``; ``x = 0`` gives ``s \\Phi^{-1}((1+CL)/2)``.

    References
    ----------
    .. [1] Helene, O. 1983, Nucl. Instrum. Methods 212, 319 (upper limits of a
       non-negative parameter with a flat prior).
    .. [2] Particle Data Group, Review of Particle Physics, "Statistics",
       section on Bayesian intervals with a physical boundary.

    Examples
    --------
    An estimate of exactly zero: the posterior is a half-Gaussian, so the 95 % limit is
    ``s Phi^-1(0.975)``, the familiar 1.96 s:

    >>> from scipy.stats import norm
    >>> print(f"{bayesian_upper_limit(0.0, 1.0, 0.95):.5f}")
    1.95996
    >>> print(f"{norm.ppf(0.975):.5f}")
    1.95996
    """
    cl = _check_confidence(confidence)
    x, s, unit = _split(estimate, sigma)
    z = x / s
    log_tail = math.log1p(-cl) + special.log_ndtr(z)
    t = -special.ndtri_exp(log_tail)
    upper = x + s * t
    far = z < -_BAYES_ASYMPTOTIC_Z
    if np.any(far):
        big_l = -math.log1p(-cl)
        a = np.where(far, -z, 1.0)
        upper = np.where(far, s * (big_l / a) * (1.0 - (0.5 * big_l + 1.0) / (a * a)), upper)
    return _wrap(upper, unit)


# --------------------------------------------------------------------------- #
# Feldman-Cousins unified interval
# --------------------------------------------------------------------------- #
def _fc_setup(confidence: float) -> tuple[float, float, float]:
    """Tail probability ``1 - CL`` and the one- and two-sided normal quantiles of ``CL``."""
    cl = _check_confidence(confidence)
    if cl <= 0.5:
        msg = f"'confidence' of a Feldman-Cousins interval must be > 0.5, found {confidence!r}"
        raise LimitError(msg)
    alpha = 1.0 - cl  # exact in floating point for cl in (0.5, 1)
    # the normal quantile: isf(p) = -ndtri(p), as scipy.stats.norm.isf computes it (without loading scipy.stats)
    return alpha, float(-special.ndtri(alpha)), float(-special.ndtri(0.5 * alpha))


def _half_width(mu: float, alpha: float, z1: float, zc: float) -> float:
    """``d`` such that the acceptance interval of ``mu`` (sigma units) ends at ``mu + d``."""
    if mu >= zc:
        return zc
    if mu <= 0.0:
        return z1

    def excess(d: float) -> float:
        # P(x1 <= x <= mu + d | mu) - CL with x1 = (mu^2 - d^2) / (2 mu), d > mu,
        # written with tail probabilities to keep precision when CL -> 1
        return alpha - _sf(d) - _sf((mu * mu + d * d) / (2.0 * mu))

    lo = max(mu, z1)
    if excess(lo) >= 0.0:
        return lo
    from scipy import optimize     # loaded where a root is needed (most importers of this module never need one)

    return optimize.brentq(excess, lo, zc, xtol=_XTOL)


def _acceptance_unit(mu: float, alpha: float, z1: float, zc: float) -> tuple[float, float]:
    d = _half_width(mu, alpha, z1, zc)
    if mu <= 0.0:
        return -math.inf, d
    lower = mu - d if d <= mu else (mu * mu - d * d) / (2.0 * mu)
    return lower, mu + d


def _interval_unit(x: float, alpha: float, z1: float, zc: float) -> tuple[float, float]:
    """Feldman-Cousins interval of ``mu`` for one observation ``x`` (sigma units)."""
    from scipy import optimize

    # upper end: mu_hi with x1(mu_hi) = x
    if x >= 0.0:
        upper = x + zc
    else:

        def excess_hi(d: float) -> float:
            # on the band edge x1(mu) = x: mu - x = hypot(x, d)
            return alpha - _sf(d) - _sf(math.hypot(x, d))

        d = z1 if excess_hi(z1) >= 0.0 else optimize.brentq(excess_hi, z1, zc, xtol=_XTOL)
        upper = d * d / (math.hypot(x, d) - x)  # = x + hypot(x, d), without cancellation
    # lower end: mu_lo with x2(mu_lo) = x
    if x <= z1:
        lower = 0.0
    elif x >= 2.0 * zc:
        lower = x - zc
    else:

        def excess_lo(d: float) -> float:
            mu = x - d
            tail = 0.0 if mu <= 0.0 else _sf((mu * mu + d * d) / (2.0 * mu))
            return alpha - _sf(d) - tail

        a, b = max(z1, 0.5 * x), min(zc, x)
        d = a if excess_lo(a) >= 0.0 else optimize.brentq(excess_lo, a, b, xtol=_XTOL)
        lower = max(x - d, 0.0)
    return lower, upper


def _elementwise(fn, values: np.ndarray, alpha: float, z1: float, zc: float) -> tuple[np.ndarray, np.ndarray]:
    """Apply a unit-sigma interval function to every finite element; NaN elsewhere."""
    lower = np.full(values.shape, np.nan)
    upper = np.full(values.shape, np.nan)
    for idx in np.ndindex(values.shape):
        if np.isfinite(values[idx]):
            lower[idx], upper[idx] = fn(float(values[idx]), alpha, z1, zc)
    return lower, upper


def feldman_cousins_acceptance_interval(
    mu: ArrayOrQuantity, sigma: ArrayOrQuantity, confidence: float
) -> tuple[ArrayOrQuantity, ArrayOrQuantity]:
    """Acceptance interval ``[x1, x2]`` of the Feldman-Cousins construction.

    Parameters
    ----------
    mu : float, array or Quantity
        True value(s), ``>= 0``.
    sigma : float, array or Quantity
        Gaussian standard error (same physical type as ``mu``).
    confidence : float
        Confidence level in (0.5, 1); below 0.5 the band of
        ``mu = 0`` (all ``x <= 0`` tie in ``R``) no longer joins the rest.

    Returns
    -------
    lower, upper : float, array or Quantity
        Ends of the set of ``x`` accepted for ``mu``; ``lower = -inf`` at ``mu = 0``.

    Notes
    -----
    See :func:`feldman_cousins_interval`.
    """
    alpha, z1, zc = _fc_setup(confidence)
    m, s, unit = _split(mu, sigma, "mu")
    if np.any(m < 0):
        msg = f"'mu' must be >= 0, found {mu!r}"
        raise LimitError(msg)
    lower, upper = _elementwise(_acceptance_unit, m / s, alpha, z1, zc)
    return _wrap(lower * s, unit), _wrap(upper * s, unit)


def feldman_cousins_interval(
    estimate: ArrayOrQuantity, sigma: ArrayOrQuantity, confidence: float
) -> tuple[ArrayOrQuantity, ArrayOrQuantity]:
    """Feldman-Cousins unified confidence interval for a Gaussian mean ``mu >= 0``.

    Parameters
    ----------
    estimate, sigma : float, array or Quantity
        Measured value ``x`` and its Gaussian standard error ``s`` (same physical
        type; they broadcast).
    confidence : float
        Confidence level in (0.5, 1); below 0.5 the band of
        ``mu = 0`` (all ``x <= 0`` tie in ``R``) no longer joins the rest.

    Returns
    -------
    lower, upper : float, array or Quantity
        Ends of the interval, in the unit of ``estimate``; ``lower = 0`` when the
        interval is a pure upper limit.

    Notes
    -----
    In units of ``s``, for each ``mu >= 0`` the acceptance interval in ``x``
    collects the values of largest likelihood ratio

    .. math::

        R(x) = \\frac{P(x|\\mu)}{P(x|\\mu_{best})}, \\qquad
        \\mu_{best} = \\max(0, x),

    until its probability is ``CL``.  ``\\ln R = -(x-\\mu)^2/2`` for ``x >= 0``
    and ``x\\mu - \\mu^2/2`` for ``x < 0``, so the accepted set is
    ``[x_1, \\mu + d]`` with ``x_1 = \\mu - d`` when ``d <= \\mu`` and
    ``x_1 = (\\mu^2 - d^2)/(2\\mu)`` otherwise; ``d`` solves
    ``\\Phi(d) - \\Phi(x_1 - \\mu) = CL`` (:func:`scipy.optimize.brentq`).
    For ``\\mu >= \\Phi^{-1}((1+CL)/2)`` the band is the central one.

    The interval for an observed ``x`` is ``{\\mu : x_1(\\mu) <= x <= x_2(\\mu)}``.
    Both band edges increase with ``mu``; each end is found by root finding
    along the edge, parametrised by ``d``: on ``x_1(\\mu) = x`` one has
    ``\\mu - x = \\sqrt{x^2 + d^2}``, on ``x_2(\\mu) = x`` one has
    ``\\mu = x - d``, leaving a one-dimensional ``brentq`` in ``d`` for each.
    The interval is ``[0, x + z_c]`` for ``0 <= x <= \\Phi^{-1}(CL)`` and the
    central ``x \\pm z_c`` for ``x >= 2 z_c``, with ``z_c = \\Phi^{-1}((1+CL)/2)``.

    References
    ----------
    .. [1] Feldman, G. J. & Cousins, R. D. 1998, Phys. Rev. D 57, 3873,
       Sect. IV.B and Table X.
    """
    alpha, z1, zc = _fc_setup(confidence)
    x, s, unit = _split(estimate, sigma)
    lower, upper = _elementwise(_interval_unit, x / s, alpha, z1, zc)
    return _wrap(lower * s, unit), _wrap(upper * s, unit)


def feldman_cousins_upper_limit(
    estimate: ArrayOrQuantity, sigma: ArrayOrQuantity, confidence: float
) -> ArrayOrQuantity:
    """Upper end of the Feldman-Cousins interval (see :func:`feldman_cousins_interval`).

    Notes
    -----
    When the interval is two-sided (a detection at this confidence) the upper
    end is still returned; check the lower end to tell the cases apart.

    References
    ----------
    .. [1] Feldman, G. J. & Cousins, R. D. 1998, Phys. Rev. D 57, 3873.
    """
    return feldman_cousins_interval(estimate, sigma, confidence)[1]


# --------------------------------------------------------------------------- #
# combining estimates
# --------------------------------------------------------------------------- #
def inverse_variance_mean(
    values: ArrayOrQuantity, sigmas: ArrayOrQuantity, axis: int | None = 0
) -> tuple[ArrayOrQuantity, ArrayOrQuantity]:
    """Inverse-variance weighted mean of ``values`` along ``axis``, and its standard error.

    Parameters
    ----------
    values, sigmas : float, array or Quantity
        Independent estimates and their 1-sigma errors (same physical type); they
        broadcast against each other.
    axis : int or None, optional
        The axis combined (default 0, the first); None combines all.

    Returns
    -------
    mean, sigma : float, array or Quantity
        The weighted mean and its error, in the unit of ``values``.

    Notes
    -----
    With weights :math:`w_i = 1/\\sigma_i^2`, :math:`\\bar x = \\sum w_i x_i / \\sum w_i`
    and :math:`\\sigma_{\\bar x} = (\\sum w_i)^{-1/2}`: the maximum-likelihood common
    value of independent Gaussian estimates.  Evaluated in exactly this order
    (``w = 1.0 / sigma**2``, ``W = w.sum(axis)``, ``(w * x).sum(axis) / W``,
    ``1.0 / sqrt(W)``), so a caller that wrote it out the same way gets the same
    bits.  Nothing is checked: a NaN or zero sigma gives a NaN or infinite weight
    and the result follows.

    References
    ----------
    .. [1] Bevington, P. R. & Robinson, D. K. 2003, Data Reduction and Error Analysis
       for the Physical Sciences, 3rd ed., eqs. (4.17)-(4.19) (from memory).
    """
    x, s, unit = _in_one_unit(values, sigmas)
    w = 1.0 / s**2
    wsum = np.sum(w, axis=axis)
    mean = np.sum(w * x, axis=axis) / wsum
    return _wrap(mean, unit), _wrap(1.0 / np.sqrt(wsum), unit)
