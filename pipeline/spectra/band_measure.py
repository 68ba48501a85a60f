"""Integrated fluxes of infrared emission bands on a continuum, with their errors.

An aperture spectrum F_lambda(lambda_i) (W m^-2 um^-1) with a per-channel 1-sigma
is given on a wavelength axis of contiguous channels, not necessarily uniform
(bin edges midway between channel centres, the outer edges mirrored). A band is
described by the wavelength range [lo, hi] its emission covers; its template is a
boxcar over [lo, hi] (standing for the unresolved rotational structure)
convolved with a Gaussian line-spread function of FWHM lambda_c / R. The
template's integrals have closed forms through the antiderivative of the normal
cdf, int Phi(t) dt = t Phi(t) + phi(t), so the fraction of a band inside an
integration window (the capture) and inside each channel bin are exact.

The band flux is the window integral of the spectrum minus a weighted
least-squares polynomial continuum fitted to line-free channels on both sides,
divided by the capture. The estimator is linear in the data, F_band = a . F, and
the vector ``a`` is built explicitly, so the error propagated from the error
spectrum is exactly sqrt(sum a_i^2 sigma_i^2). Because resampled cubes have
correlated channels, the error is also measured from the data (the scatter of
same-shaped window sums over the continuum residuals, :func:`pipeline.spectra.noise.window_sum_noise`,
or else the reduced chi-square of the continuum fit), and the larger of the two
is adopted.

Internally everything is a plain float in um and W m^-2 um^-1; the public
functions take and return Quantities.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from scipy.special import ndtr

from pipeline.errors import ConfigError, CoverageError, CubeError
from pipeline.quantities import checked_array
from pipeline.spectra.ir_spectra import F_LAMBDA
from pipeline.spectra.noise import window_sum_noise

__all__ = ["channel_widths", "integration_window", "band_capture", "band_template", "binned_band_template",
           "continuum_mask", "BandMeasurement", "measure_band", "continuum_level", "FWHM_TO_SIGMA"]

#: Gaussian sigma over FWHM, 1 / (2 sqrt(2 ln 2)).
FWHM_TO_SIGMA = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
_BAND_FLUX = u.W / u.m**2
_SNAP = 1e-9           # channel fractions this close to 0 or 1 (rounding slivers) are set to 0 or 1
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


# ----------------------------------------------------------------------------- input checks
def _um(x, name: str) -> np.ndarray:
    """``x`` (a length Quantity) in um as a float array, finite."""
    return checked_array(x, u.um, name, sign="any")


def _scalar_um(x, name: str) -> float:
    return float(checked_array(x, u.um, name, sign="any", scalar=True))


def _range(lo, hi, names: tuple[str, str]) -> tuple[float, float]:
    a, b = _scalar_um(lo, names[0]), _scalar_um(hi, names[1])
    if not (0 < a < b):
        msg = f"'{names[0]}' and '{names[1]}' are {a!r} and {b!r} um; expected 0 < {names[0]} < {names[1]}"
        raise ConfigError(msg)
    return a, b


def _positive(x, name: str) -> float:
    try:
        value = float(x)
    except (TypeError, ValueError) as exc:
        msg = f"'{name}' must be a number, found {x!r}"
        raise ConfigError(msg) from exc
    if not (value > 0 and math.isfinite(value)):
        msg = f"'{name}' must be > 0 and finite, found {value!r}"
        raise ConfigError(msg)
    return value


def _axis(wavelength) -> np.ndarray:
    """Checked wavelength axis in um: 1-d, at least 2 channels, strictly monotonic."""
    lam = _um(wavelength, "wavelength")
    if lam.ndim != 1 or lam.size < 2:
        msg = f"'wavelength' must be a 1-d axis of at least 2 channels, found shape {lam.shape}"
        raise CubeError(msg)
    d = np.diff(lam)
    if not (np.all(d > 0) or np.all(d < 0)):
        msg = "'wavelength' must be strictly increasing or strictly decreasing; found repeated or unordered channels"
        raise CubeError(msg)
    return lam


def _spectrum(x, name: str, n: int) -> np.ndarray:
    """``x`` in W m^-2 um^-1 as a float array of ``n`` channels (NaN allowed)."""
    out = checked_array(x, F_LAMBDA, name, sign="any", allow_inf=True, allow_nan=True)
    if out.shape != (n,):
        msg = f"'{name}' has shape {out.shape}; expected ({n},), one value per wavelength channel"
        raise CubeError(msg)
    return out


def _mask(x, name: str, n: int) -> np.ndarray:
    out = np.asarray(x)
    if out.shape != (n,) or out.dtype != bool:
        msg = f"'{name}' must be a boolean array of shape ({n},), found dtype {out.dtype} and shape {out.shape}"
        raise CubeError(msg)
    return out


# ----------------------------------------------------------------------------- plain-float helpers
def _bin_edges(lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper edge of each channel bin (edges midway between centres, outer edges mirrored)."""
    mid = 0.5 * (lam[:-1] + lam[1:])
    edges = np.concatenate([[2.0 * lam[0] - mid[0]], mid, [2.0 * lam[-1] - mid[-1]]])
    return np.minimum(edges[:-1], edges[1:]), np.maximum(edges[:-1], edges[1:])


def _window_fraction(lower: np.ndarray, upper: np.ndarray, a: float, b: float) -> np.ndarray:
    """Fraction of each bin [lower, upper] inside [a, b], rounding slivers snapped to 0 or 1."""
    frac = np.clip(np.minimum(upper, b) - np.maximum(lower, a), 0.0, None) / (upper - lower)
    frac[frac < _SNAP] = 0.0
    frac[frac > 1.0 - _SNAP] = 1.0
    return frac


def _lsf_sigma(lo: float, hi: float, resolving_power: float) -> float:
    return 0.5 * (lo + hi) / resolving_power * FWHM_TO_SIGMA


def _g(t: np.ndarray) -> np.ndarray:
    """phi(|t|) - |t| Phi(-|t|): the antiderivative t Phi(t) + phi(t) less its asymptote max(t, 0)."""
    t = np.abs(t)
    return np.exp(-0.5 * t * t) * _INV_SQRT_2PI - t * ndtr(-t)


def _template_fraction(a, b, lo: float, hi: float, sigma: float) -> np.ndarray:
    """Fraction of the boxcar [lo, hi] (x) Gaussian(sigma) template inside [a, b] (a <= b, arrays broadcast).

    int_a^b [Phi((x-lo)/s) - Phi((x-hi)/s)] dx / (hi-lo) with int Phi = G(t) = t Phi(t) + phi(t).
    Writing G(t) = max(t, 0) + g(t), the max-parts add up to the plain overlap of [a, b] with
    [lo, hi] and the g-parts are small corrections, which keeps full precision far from the band.
    """
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    overlap = np.clip(np.minimum(b, hi) - np.maximum(a, lo), 0.0, None)
    corr = _g((b - lo) / sigma) - _g((a - lo) / sigma) - _g((b - hi) / sigma) + _g((a - hi) / sigma)
    return (overlap + sigma * corr) / (hi - lo)


def _design(x: np.ndarray, order: int) -> np.ndarray:
    return np.vander(x, order + 1, increasing=True)


def _wls(x: np.ndarray, s: np.ndarray, order: int) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least squares y ~ sum_k beta_k x^k (weights 1/s^2): hat matrix H (beta = H y) and covariance."""
    pinv = np.linalg.pinv(_design(x, order) / s[:, None])
    return pinv / s[None, :], pinv @ pinv.T


def _null_window_sum_rms(design_std: np.ndarray, use: np.ndarray, kernel: np.ndarray) -> float:
    """RMS that the window sums of standardised fit residuals have for independent unit-variance channels.

    The residuals are (I - P) z with P = Q Q^T the projection on the (standardised) design's columns, so a
    sum k_s . r has variance |k_s|^2 - |Q^T k_s|^2. Averaged over the placements ``s`` that
    :func:`pipeline.spectra.noise.window_sum_noise` uses (every kernel channel in ``use``), this is what the
    measured scatter is compared with: the fit takes out part of the window-scale noise, more so the
    larger the window is against the continuum stretches.
    """
    nz = np.flatnonzero(kernel > 0)
    k = kernel[nz.min():nz.max() + 1]
    placements = np.correlate(use.astype(float), np.ones(k.size), mode="valid") >= k.size - 0.5
    q, _ = np.linalg.qr(design_std)
    full = np.zeros((use.size, q.shape[1]))
    full[use] = q
    proj = np.array([np.correlate(full[:, c], k, mode="valid")[placements] for c in range(q.shape[1])])
    return float(np.sqrt(np.sum(k * k) - np.mean(np.sum(proj * proj, axis=0))))


# ----------------------------------------------------------------------------- axis, windows, template
def channel_widths(wavelength: u.Quantity) -> u.Quantity:
    """Widths of contiguous channels (um), edges midway between centres and the outer edges mirrored.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Channel centres, strictly increasing or decreasing, not necessarily uniform.

    Returns
    -------
    `~astropy.units.Quantity` [um]
        Positive bin widths, one per channel.

    Raises
    ------
    CubeError
        When the axis has fewer than 2 channels or is not strictly monotonic.
    """
    lower, upper = _bin_edges(_axis(wavelength))
    return (upper - lower) * u.um


def integration_window(lo: u.Quantity, hi: u.Quantity, resolving_power: float,
                       margin_fwhm: float = 1.5) -> tuple[u.Quantity, u.Quantity]:
    """The band extent [lo, hi] widened on each side by ``margin_fwhm`` line-spread FWHM.

    Parameters
    ----------
    lo, hi : `~astropy.units.Quantity` [length]
        Wavelength range of the band's emission, 0 < lo < hi.
    resolving_power : float
        R = lambda / FWHM of the instrument's line-spread function, > 0.
    margin_fwhm : float
        Margin on each side in units of the FWHM at that edge (lo / R and hi / R), >= 0.

    Returns
    -------
    tuple of `~astropy.units.Quantity` [um]
        (lo - margin lo / R, hi + margin hi / R).
    """
    a, b = _range(lo, hi, ("lo", "hi"))
    rp = _positive(resolving_power, "resolving_power")
    margin = float(margin_fwhm)
    if not (margin >= 0 and math.isfinite(margin)):
        msg = f"'margin_fwhm' must be >= 0 and finite, found {margin_fwhm!r}"
        raise ConfigError(msg)
    return (a - margin * a / rp) * u.um, (b + margin * b / rp) * u.um


def band_capture(lo: u.Quantity, hi: u.Quantity, window_lo: u.Quantity, window_hi: u.Quantity,
                 resolving_power: float) -> float:
    """Fraction of the band template inside the window [window_lo, window_hi].

    Parameters
    ----------
    lo, hi : `~astropy.units.Quantity` [length]
        Wavelength range of the band's emission (the boxcar envelope).
    window_lo, window_hi : `~astropy.units.Quantity` [length]
        Integration window.
    resolving_power : float
        R; the line-spread function is a Gaussian of FWHM (lo + hi) / (2 R).

    Returns
    -------
    float
        The capture, in [0, 1].

    Notes
    -----
    The template density is :math:`p(x) = [\\Phi((x-lo)/s) - \\Phi((x-hi)/s)]/(hi-lo)` with
    :math:`s = \\mathrm{FWHM}/(2\\sqrt{2\\ln 2})`; its integral over [a, b] follows from
    :math:`\\int\\Phi(t)\\,dt = t\\Phi(t) + \\phi(t)`.
    """
    a, b = _range(lo, hi, ("lo", "hi"))
    wa, wb = _range(window_lo, window_hi, ("window_lo", "window_hi"))
    sigma = _lsf_sigma(a, b, _positive(resolving_power, "resolving_power"))
    return float(np.clip(_template_fraction(wa, wb, a, b, sigma), 0.0, 1.0))


def band_template(wavelength: u.Quantity, lo: u.Quantity, hi: u.Quantity, resolving_power: float) -> u.Quantity:
    """The band template as a profile density (integral 1) at the channel centres (1/um).

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Where to evaluate (any shape).
    lo, hi, resolving_power
        As in :func:`band_capture`.

    Returns
    -------
    `~astropy.units.Quantity` [1/um]
        :math:`[\\Phi((\\lambda-lo)/s) - \\Phi((\\lambda-hi)/s)]/(hi-lo)`, exact.
    """
    lam = _um(wavelength, "wavelength")
    a, b = _range(lo, hi, ("lo", "hi"))
    s = _lsf_sigma(a, b, _positive(resolving_power, "resolving_power"))
    left = ndtr((lam - a) / s) - ndtr((lam - b) / s)
    right = ndtr((b - lam) / s) - ndtr((a - lam) / s)      # the same, without cancellation past the band
    return np.where(lam <= 0.5 * (a + b), left, right) / (b - a) / u.um


def binned_band_template(wavelength: u.Quantity, lo: u.Quantity, hi: u.Quantity,
                         resolving_power: float) -> u.Quantity:
    """Fraction of the band template falling in each channel bin (dimensionless).

    The template is integrated exactly over each bin (edges from :func:`channel_widths`), so
    the fractions sum to the capture of the range the axis covers. Dividing by the channel
    widths gives the mean template density per channel, which injects a band flux-conservingly.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Channel centres (strictly monotonic).
    lo, hi, resolving_power
        As in :func:`band_capture`.
    """
    lower, upper = _bin_edges(_axis(wavelength))
    a, b = _range(lo, hi, ("lo", "hi"))
    s = _lsf_sigma(a, b, _positive(resolving_power, "resolving_power"))
    return np.clip(_template_fraction(lower, upper, a, b, s), 0.0, 1.0) * u.one


def continuum_mask(wavelength: u.Quantity, window_lo: u.Quantity, window_hi: u.Quantity, width_factor: float = 1.0,
                   exclude: list[tuple[u.Quantity, u.Quantity]] | tuple = ()) -> np.ndarray:
    """Line-free channels for the continuum of one band.

    Channels whose bins lie fully inside [window_lo - W f, window_lo) or (window_hi, window_hi + W f],
    W = window_hi - window_lo, f = ``width_factor``, less every channel whose bin overlaps one of the
    ``exclude`` ranges (the windows of other bands). A bin edge within 1e-9 of its width of a range
    edge counts as on it.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Channel centres.
    window_lo, window_hi : `~astropy.units.Quantity` [length]
        The band's integration window.
    width_factor : float
        Width of each continuum side in units of the window width, > 0.
    exclude : list of (lo, hi) Quantity pairs
        Ranges kept out of the continuum.

    Returns
    -------
    numpy.ndarray of bool
    """
    lower, upper = _bin_edges(_axis(wavelength))
    a, b = _range(window_lo, window_hi, ("window_lo", "window_hi"))
    side = (b - a) * _positive(width_factor, "width_factor")
    tol = _SNAP * (upper - lower)
    left = (lower >= a - side - tol) & (upper <= a + tol)
    right = (lower >= b - tol) & (upper <= b + side + tol)
    free = left | right
    for k, pair in enumerate(exclude):
        if len(pair) != 2:
            msg = f"'exclude[{k}]' must be a (lo, hi) pair of wavelengths, found {pair!r}"
            raise ConfigError(msg)
        xa, xb = _scalar_um(pair[0], f"exclude[{k}][0]"), _scalar_um(pair[1], f"exclude[{k}][1]")
        xa, xb = min(xa, xb), max(xa, xb)
        free &= ~(np.minimum(upper, xb) - np.maximum(lower, xa) > tol)
    return free


# ----------------------------------------------------------------------------- measurement
@dataclass(frozen=True)
class BandMeasurement:
    """Integrated band flux with its errors and the continuum under it."""

    flux: u.Quantity                  # W m^-2, corrected for the capture
    sigma: u.Quantity                 # adopted 1-sigma: max(sigma_err, sigma_empirical)
    sigma_err: u.Quantity             # propagated from the error spectrum, sqrt(sum a_i^2 sigma_i^2)
    sigma_empirical: u.Quantity       # measured from the continuum residuals (NaN when not measurable)
    empirical_method: str             # "window_sums", "chi2" or "none"
    continuum_at_centre: u.Quantity   # W m^-2 um^-1, at the window centre
    continuum_err: u.Quantity         # its 1-sigma from the fit covariance (error spectrum)
    chi2_reduced: float               # of the continuum fit
    n_window_channels: int            # channels with a non-zero window weight
    n_continuum: int                  # finite continuum channels used in the fit
    capture: float                    # fraction of the band inside the window the flux was divided by
    continuum_model: u.Quantity       # the fitted continuum at every channel (W m^-2 um^-1)
    n_noise_windows: int = 0          # independent line-free windows behind "window_sums" (0 otherwise)


def measure_band(wavelength: u.Quantity, flux: u.Quantity, sigma: u.Quantity, window_lo: u.Quantity,
                 window_hi: u.Quantity, continuum: np.ndarray, order: int = 1, capture: float = 1.0,
                 min_windows: int = 10, continuum_shape: np.ndarray | None = None) -> BandMeasurement:
    """Integrated flux of a band over a continuum polynomial, with propagated and empirical errors.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Channel centres (contiguous bins, strictly monotonic, any direction).
    flux, sigma : `~astropy.units.Quantity` [W m^-2 um^-1]
        The spectrum and its per-channel 1-sigma (NaN allowed outside the window).
    window_lo, window_hi : `~astropy.units.Quantity` [length]
        Integration window; must lie inside the range the channel bins cover.
    continuum : numpy.ndarray of bool
        Line-free channels for the continuum (e.g. :func:`continuum_mask`); channels with finite
        flux and a finite sigma > 0 are used, channels overlapping the window never.
    order : int
        Degree of the continuum polynomial in (lambda - lambda_c), >= 0.
    capture : float
        Fraction of the band inside the window (:func:`band_capture`), in (0, 1].
    min_windows : int
        Passed to :func:`pipeline.spectra.noise.window_sum_noise`, which warns (NoiseWarning) below it.

    Returns
    -------
    BandMeasurement

    Raises
    ------
    CoverageError
        When the window is not inside the axis, a channel of the window has non-finite flux or
        sigma, or fewer than ``order + 2`` continuum channels (or none on one side for
        ``order >= 1``) are usable.

    Notes
    -----
    With w_i the length of channel i's bin inside the window (so sum w_i F_i is the window integral)
    and the continuum c(lambda) = X beta, beta = H F_c, H = (X_c^T W X_c)^-1 X_c^T W (W = diag 1/sigma^2),

    F_band = [sum_i w_i F_i - (X^T w)^T H F_c] / capture = a . F,

    so sigma_err^2 = sum a_i^2 sigma_i^2 exactly for independent channels.

    The empirical error rescales sigma_err by what the continuum residuals r = F - c show:

    * "window_sums" (preferred, when :func:`pipeline.spectra.noise.window_sum_noise` finds at least two
      line-free placements of the window): the residuals in units of their sigma, r_i / sigma_i,
      summed with the window's weight pattern k = w / capture, scatter (rms) by S; independent
      channels with a right error spectrum would give S0^2 = mean over the same placements of
      |k_s|^2 - |Q^T k_s|^2 (Q spans the standardised fit design; the fit removes part of the
      window-scale noise). sigma_empirical = sigma_err * S / S0: the factor carries channel-to-channel
      correlation and a mis-scaled error spectrum onto both parts of the estimator, the window sum and
      the continuum subtracted from it.
    * "chi2" otherwise: sigma_err * sqrt(chi2_nu) of the continuum fit (catches a mis-scaled error
      spectrum, not correlation).
    """
    lam = _axis(wavelength)
    n = lam.size
    f = _spectrum(flux, "flux", n)
    s = _spectrum(sigma, "sigma", n)
    cont = _mask(continuum, "continuum", n)
    if np.any(s < 0):
        msg = f"'sigma' holds a negative value ({float(s[s < 0][0])!r} W m-2 um-1); expected 1-sigma errors >= 0"
        raise CubeError(msg)
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order < 0:
        msg = f"'order' must be an integer >= 0, found {order!r}"
        raise ConfigError(msg)
    cap = float(capture)
    if not (0 < cap <= 1 + 1e-12):
        msg = f"'capture' must be in (0, 1], found {capture!r}"
        raise ConfigError(msg)
    a, b = _range(window_lo, window_hi, ("window_lo", "window_hi"))
    lower, upper = _bin_edges(lam)
    tol = _SNAP * float(np.min(upper - lower))
    if a < lower.min() - tol or b > upper.max() + tol:
        msg = (f"the window {a:.6g}-{b:.6g} um is not fully inside the spectrum's "
               f"{lower.min():.6g}-{upper.max():.6g} um")
        raise CoverageError(msg)

    w = _window_fraction(lower, upper, a, b) * (upper - lower)          # um, sum w F = window integral
    shape = np.ones(n)
    if continuum_shape is not None:
        shape = np.asarray(continuum_shape, dtype=float).reshape(-1)
        if shape.size != n or not np.all(np.isfinite(shape) & (shape > 0)):
            msg = (f"'continuum_shape' must hold {n} positive finite values (one per channel), found "
                   f"{shape.size} values with minimum {float(np.nanmin(shape)) if shape.size else float('nan')!r}")
            raise ConfigError(msg)
        f, s, w = f / shape, s / shape, w * shape
    win = w > 0
    bad = win & ~(np.isfinite(f) & np.isfinite(s))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        msg = (f"{int(bad.sum())} of the {int(win.sum())} channels in the window {a:.6g}-{b:.6g} um have "
               f"non-finite flux or sigma (first at {lam[i]:.6g} um); expected finite data across the window")
        raise CoverageError(msg)
    use = cont & ~win & np.isfinite(f) & np.isfinite(s) & (s > 0)
    n_c = int(use.sum())
    n_left, n_right = int(np.sum(use & (lam < a))), int(np.sum(use & (lam > b)))
    if n_c < order + 2 or (order >= 1 and min(n_left, n_right) == 0):
        msg = (f"only {n_c} usable continuum channels ({n_left} below and {n_right} above the window "
               f"{a:.6g}-{b:.6g} um); expected at least {order + 2} for a polynomial of order {order}"
               + (", with channels on both sides" if order >= 1 else ""))
        raise CoverageError(msg)

    centre = 0.5 * (a + b)
    scale = 0.5 * (b - a)
    x = (lam - centre) / scale                     # conditioning only: beta_0 is the level at the centre
    hat, cov = _wls(x[use], s[use], order)
    beta = hat @ f[use]
    model = _design(x, order) @ beta
    coef = np.zeros(n)
    coef[win] = w[win]
    coef[use] -= (_design(x[win], order).T @ w[win]) @ hat
    coef /= cap
    support = win | use
    band = float(coef[support] @ f[support])
    sigma_err = float(np.sqrt(np.sum((coef[support] * s[support]) ** 2)))

    resid = f[use] - model[use]
    dof = n_c - (order + 1)
    chi2 = float(np.sum((resid / s[use]) ** 2) / dof)
    emp, method, n_ind = math.nan, "none", 0
    standardised = np.full(n, np.nan)
    standardised[use] = resid / s[use]
    kernel = w / cap
    try:
        noise = window_sum_noise(standardised, use, kernel, min_windows=min_windows)
    except CoverageError:
        noise = None
    if noise is not None:
        null = _null_window_sum_rms(_design(x[use], order) / s[use, None], use, kernel)
        emp = sigma_err * noise.sigma / null
        method, n_ind = "window_sums", noise.n_independent
    elif math.isfinite(chi2):
        emp, method = sigma_err * math.sqrt(chi2), "chi2"
    adopted = sigma_err if not math.isfinite(emp) else max(sigma_err, emp)
    order_ = np.argsort(lam)
    shape_c = float(np.interp(centre, lam[order_], shape[order_]))
    return BandMeasurement(flux=band * _BAND_FLUX, sigma=adopted * _BAND_FLUX, sigma_err=sigma_err * _BAND_FLUX,
                           sigma_empirical=emp * _BAND_FLUX, empirical_method=method,
                           continuum_at_centre=float(beta[0]) * shape_c * F_LAMBDA,
                           continuum_err=float(np.sqrt(cov[0, 0])) * shape_c * F_LAMBDA, chi2_reduced=chi2,
                           n_window_channels=int(win.sum()), n_continuum=n_c, capture=cap,
                           continuum_model=model * shape * F_LAMBDA, n_noise_windows=int(n_ind))


def continuum_level(wavelength: u.Quantity, flux: u.Quantity, sigma: u.Quantity, at: u.Quantity,
                    half_width: u.Quantity, free: np.ndarray) -> tuple[u.Quantity, u.Quantity]:
    """Continuum F_lambda at ``at`` and its 1-sigma from a weighted straight line through nearby free channels.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` [length]
        Channel centres.
    flux, sigma : `~astropy.units.Quantity` [W m^-2 um^-1]
        Spectrum and per-channel 1-sigma.
    at : `~astropy.units.Quantity` [length]
        Where the level is wanted.
    half_width : `~astropy.units.Quantity` [length]
        Channels with |lambda - at| <= half_width are fitted, > 0.
    free : numpy.ndarray of bool
        Line-free channels; of those, the ones with finite flux and a finite sigma > 0 are used.

    Returns
    -------
    tuple of `~astropy.units.Quantity` [W m^-2 um^-1]
        The fitted level at ``at`` and its 1-sigma (weights 1/sigma^2, covariance from the error spectrum).

    Raises
    ------
    CoverageError
        When fewer than 3 channels are usable.
    """
    lam = _axis(wavelength)
    n = lam.size
    f, s = _spectrum(flux, "flux", n), _spectrum(sigma, "sigma", n)
    ok = _mask(free, "free", n)
    centre = _scalar_um(at, "at")
    half = _scalar_um(half_width, "half_width")
    if not half > 0:
        msg = f"'half_width' must be > 0, found {half!r} um"
        raise ConfigError(msg)
    tol = _SNAP * float(np.median(np.abs(np.diff(lam))))
    use = ok & (np.abs(lam - centre) <= half + tol) & np.isfinite(f) & np.isfinite(s) & (s > 0)
    if use.sum() < 3:
        msg = (f"only {int(use.sum())} usable line-free channels within {half:.6g} um of {centre:.6g} um; "
               "expected at least 3 for a straight-line continuum")
        raise CoverageError(msg)
    hat, cov = _wls((lam[use] - centre) / half, s[use], 1)
    return float((hat @ f[use])[0]) * F_LAMBDA, float(np.sqrt(cov[0, 0])) * F_LAMBDA
