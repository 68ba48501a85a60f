"""Conversions between measured fluxes, numbers of molecules and production rates.

Two steps, each in both directions: (1) flux <-> molecules, for a millimetre line
in LTE (integrated flux density, or main-beam ∫T_B dv of a Gaussian beam) or an
optically thin infrared band pumped by sunlight; (2) molecules <-> production rate
Q with the Haser model, in a circular aperture or weighted by a Gaussian beam
(:mod:`pipeline.coma.haser`).  Convenience functions chain both for a plain (not
beam-convolved) aperture.

Every map is linear in the measured quantity, so fluxes, counts and rates may be
negative (noisy data) and keep their sign; the scale factors (distances, sizes,
speeds, scale lengths, fluorescence efficiencies, the flux per molecule) must be
positive.  Array arguments broadcast with numpy's rules: ``t_kin[:, None]`` and
``rho_ap[None, :]`` give a temperature-by-aperture grid.
"""

from __future__ import annotations

import math

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.coma import haser
from pipeline.quantities import checked_array as _checked
from pipeline.catalogue.entries import Line, Species
from pipeline.errors import ConfigError, EphemerisError
from pipeline.coma.excitation import T_CMB, flux_per_molecule
from pipeline.coma.response import ComaModel, scale_lengths

__all__ = [
    "molecules_from_line_flux",
    "line_flux_from_molecules",
    "molecules_from_beam_brightness",
    "beam_brightness_from_molecules",
    "production_rate_from_aperture_count",
    "aperture_count_from_production_rate",
    "production_rate_from_beam_count",
    "beam_count_from_production_rate",
    "fluorescence_efficiency",
    "band_flux_from_molecules",
    "molecules_from_band_flux",
    "production_rate_from_line_flux",
    "line_flux_from_production_rate",
    "production_rate_from_band_flux",
    "band_flux_from_production_rate",
]

_LINE_FLUX = u.Jy * u.km / u.s
_BRIGHTNESS = u.K * u.km / u.s
_BAND_FLUX = u.W / u.m**2
_RATE = u.Unit("1 / s")
_GAUSS_AREA = math.pi / (4.0 * math.log(2.0))  # solid angle of a Gaussian beam / FWHM^2
_RJ_JY = 2.0 * const.k_B.si.value / const.c.si.value**2 * 1e26  # 2 k / c^2, in Jy s^2 / (K sr)
_HC = const.h.si.value * const.c.si.value  # J m


def _flux_per_molecule(line: Line, species: Species, t_kin, delta, t_bg) -> np.ndarray:
    """Checked ∫S dv per molecule in Jy km/s (> 0), broadcast over t_kin and delta."""
    temp = _checked(t_kin, u.K, "t_kin")
    dist = _checked(delta, u.au, "delta", error=EphemerisError)
    background = _checked(t_bg, u.K, "t_bg", sign="non-negative")
    per = flux_per_molecule(line, species, temp * u.K, dist * u.au, background * u.K).to_value(_LINE_FLUX)
    per = np.asarray(per, dtype=float)
    bad = ~(per > 0) | ~np.isfinite(per)
    if np.any(bad):
        t_bad = float(np.broadcast_to(temp, per.shape)[bad].ravel()[0])
        msg = (f"line {line.line_id}: 't_kin' = {t_bad!r} K gives a flux per molecule of "
               f"{float(per[bad].ravel()[0])!r} Jy km/s; expected t_kin above the background "
               f"'t_bg' = {float(np.max(background))!r} K so that the line is seen in emission")
        raise ConfigError(msg)
    return per


def _lengths(speed, length_parent, length_daughter):
    """Checked speed [km/s] and scale lengths [km] (the daughter one may be None)."""
    v = _checked(speed, u.km / u.s, "speed")
    lp = _checked(length_parent, u.km, "length_parent")
    ld = None if length_daughter is None else _checked(length_daughter, u.km, "length_daughter")
    return v, lp, ld


def _aperture_per_rate(rho_ap, speed, length_parent, length_daughter) -> np.ndarray:
    """Haser molecules in the aperture per unit Q, in s."""
    rho = _checked(rho_ap, u.km, "rho_ap", allow_inf=True)
    v, lp, ld = _lengths(speed, length_parent, length_daughter)
    args = (rho * u.km, 1.0 / u.s, v * (u.km / u.s), lp * u.km)
    n = haser.parent_aperture_count(*args) if ld is None else haser.daughter_aperture_count(*args, ld * u.km)
    return n.to_value(u.dimensionless_unscaled)


def _beam_per_rate(beam_fwhm_length, speed, length_parent, length_daughter) -> np.ndarray:
    """Beam-weighted Haser molecules per unit Q, in s."""
    fwhm = _checked(beam_fwhm_length, u.km, "beam_fwhm_length")
    v, lp, ld = _lengths(speed, length_parent, length_daughter)
    n = haser.beam_count(fwhm * u.km, 1.0 / u.s, v * (u.km / u.s), lp * u.km,
                         None if ld is None else ld * u.km)
    return n.to_value(u.dimensionless_unscaled)


def _jy_per_kelvin(line: Line, beam_fwhm) -> np.ndarray:
    """S / T_B = 2 k nu^2 Omega / c^2 of a Gaussian beam, in Jy/K."""
    theta = _checked(beam_fwhm, u.rad, "beam_fwhm")
    nu = line.freq.to_value(u.Hz)
    return _RJ_JY * nu * nu * _GAUSS_AREA * theta * theta


# ----------------------------------------------------------------------------- mm lines
def molecules_from_line_flux(flux: u.Quantity, line: Line, species: Species, t_kin: u.Quantity,
                             delta: u.Quantity, t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Number of molecules (dimensionless) that give the integrated line flux ``flux``.

    Parameters
    ----------
    flux : `~astropy.units.Quantity` [Jy km/s]
        Velocity-integrated flux density ∫S dv of the line (any sign).
    line, species : catalogue entries
    t_kin : `~astropy.units.Quantity` [temperature]
        LTE excitation temperature, above ``t_bg``.
    delta : `~astropy.units.Quantity` [length]
        Observer-target distance, > 0.
    t_bg : `~astropy.units.Quantity` [temperature]
        Background radiation temperature, default the CMB.

    Notes
    -----
    :math:`N = \\int S\\,dv / f_1`, with :math:`f_1` the flux of one molecule
    (:func:`pipeline.coma.excitation.flux_per_molecule`):
    :math:`f_1 = \\frac{c}{\\nu}\\frac{h\\nu A_{ul}}{4\\pi\\Delta^2}\\frac{g_u e^{-E_u/T}}{Q(T)}
    [1 - B_\\nu(T_{bg})/B_\\nu(T)]`.

    References
    ----------
    .. [1] Mangum, J. G. & Shirley, Y. L. 2015, PASP 127, 266.
    """
    f = _checked(flux, _LINE_FLUX, "flux", sign="any")
    return u.Quantity(f / _flux_per_molecule(line, species, t_kin, delta, t_bg), u.dimensionless_unscaled)


def line_flux_from_molecules(n_molecules: u.Quantity, line: Line, species: Species, t_kin: u.Quantity,
                             delta: u.Quantity, t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Integrated line flux (Jy km/s) of ``n_molecules``; the inverse of :func:`molecules_from_line_flux`.

    Notes
    -----
    :math:`\\int S\\,dv = N f_1` (see :func:`molecules_from_line_flux`).
    """
    n = _checked(n_molecules, u.dimensionless_unscaled, "n_molecules", sign="any")
    return u.Quantity(n * _flux_per_molecule(line, species, t_kin, delta, t_bg), _LINE_FLUX)


def molecules_from_beam_brightness(w: u.Quantity, line: Line, species: Species, t_kin: u.Quantity,
                                   delta: u.Quantity, beam_fwhm: u.Quantity,
                                   t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Beam-weighted number of molecules (dimensionless) from the main-beam brightness ``w``.

    Parameters
    ----------
    w : `~astropy.units.Quantity` [K km/s]
        W = ∫T_B dv, Rayleigh-Jeans main-beam brightness temperature (any sign).
    beam_fwhm : `~astropy.units.Quantity` [angle]
        FWHM of the circular Gaussian beam, > 0.
    line, species, t_kin, delta, t_bg
        As in :func:`molecules_from_line_flux`.

    Notes
    -----
    The beam-weighted flux density is :math:`S = (2k\\nu^2/c^2)\\,T_B\\,\\Omega_B` with
    :math:`\\Omega_B = \\pi\\theta^2/(4\\ln 2)`, so :math:`\\int S\\,dv = (2k\\nu^2/c^2)\\Omega_B W`
    and :math:`N_B = \\int S\\,dv / f_1`: the molecules weighted by the beam with its
    peak normalised to 1, the quantity of :func:`pipeline.coma.haser.beam_count`.

    References
    ----------
    .. [1] Mangum, J. G. & Shirley, Y. L. 2015, PASP 127, 266 (Rayleigh-Jeans
       brightness temperature, Gaussian beam solid angle).
    """
    ww = _checked(w, _BRIGHTNESS, "w", sign="any")
    per = _flux_per_molecule(line, species, t_kin, delta, t_bg)
    return u.Quantity(ww * _jy_per_kelvin(line, beam_fwhm) / per, u.dimensionless_unscaled)


def beam_brightness_from_molecules(n_molecules: u.Quantity, line: Line, species: Species,
                                   t_kin: u.Quantity, delta: u.Quantity, beam_fwhm: u.Quantity,
                                   t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Main-beam ∫T_B dv (K km/s) of a beam-weighted number of molecules.

    The inverse of :func:`molecules_from_beam_brightness`:
    :math:`W = N_B f_1 c^2 / (2k\\nu^2\\Omega_B)`.
    """
    n = _checked(n_molecules, u.dimensionless_unscaled, "n_molecules", sign="any")
    per = _flux_per_molecule(line, species, t_kin, delta, t_bg)
    return u.Quantity(n * per / _jy_per_kelvin(line, beam_fwhm), _BRIGHTNESS)


# ----------------------------------------------------------------------------- Haser step
def production_rate_from_aperture_count(n_ap: u.Quantity, rho_ap: u.Quantity, speed: u.Quantity,
                                        length_parent: u.Quantity,
                                        length_daughter: u.Quantity | None = None) -> u.Quantity:
    """Production rate (1/s) that puts ``n_ap`` molecules in a circular aperture.

    Parameters
    ----------
    n_ap : `~astropy.units.Quantity` [dimensionless]
        Molecules in a cylinder of radius ``rho_ap`` centred on the nucleus (any sign).
    rho_ap : `~astropy.units.Quantity` [length]
        Aperture radius at the target, > 0 (``inf``: the whole coma).
    speed, length_parent : `~astropy.units.Quantity`
        Outflow speed and parent scale length, > 0.
    length_daughter : `~astropy.units.Quantity`, optional
        Scale length of a daughter species; without it a parent is counted.

    Notes
    -----
    :math:`Q = N_{\\rm ap} / n_{\\rm ap}(\\rho)`, :math:`n_{\\rm ap}` the Haser aperture
    count for :math:`Q = 1\\,{\\rm s^{-1}}`; for a parent,
    :math:`n_{\\rm ap} = (L/v)[1 - {\\rm Ki}_2(\\rho/L)]`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    n = _checked(n_ap, u.dimensionless_unscaled, "n_ap", sign="any")
    return u.Quantity(n / _aperture_per_rate(rho_ap, speed, length_parent, length_daughter), _RATE)


def aperture_count_from_production_rate(q: u.Quantity, rho_ap: u.Quantity, speed: u.Quantity,
                                        length_parent: u.Quantity,
                                        length_daughter: u.Quantity | None = None) -> u.Quantity:
    """Molecules (dimensionless) in a circular aperture for a production rate ``q`` (1/s, any sign).

    The inverse of :func:`production_rate_from_aperture_count`: :math:`N_{\\rm ap} = Q\\,n_{\\rm ap}(\\rho)`.
    """
    qq = _checked(q, _RATE, "q", sign="any")
    return u.Quantity(qq * _aperture_per_rate(rho_ap, speed, length_parent, length_daughter),
                      u.dimensionless_unscaled)


def production_rate_from_beam_count(n_beam: u.Quantity, beam_fwhm_length: u.Quantity, speed: u.Quantity,
                                    length_parent: u.Quantity,
                                    length_daughter: u.Quantity | None = None) -> u.Quantity:
    """Production rate (1/s) from a beam-weighted number of molecules.

    Parameters
    ----------
    n_beam : `~astropy.units.Quantity` [dimensionless]
        Molecules weighted by a Gaussian beam centred on the nucleus, peak 1 (any sign).
    beam_fwhm_length : `~astropy.units.Quantity` [length]
        Beam FWHM as a length at the target (angle times distance), > 0.
    speed, length_parent, length_daughter
        As in :func:`production_rate_from_aperture_count`.

    Notes
    -----
    :math:`Q = N_B / n_B(\\theta)`, :math:`n_B` from :func:`pipeline.coma.haser.beam_count` with
    :math:`Q = 1\\,{\\rm s^{-1}}`; for :math:`L \\gg \\theta`,
    :math:`n_B \\to \\frac{\\pi\\theta}{4v}\\sqrt{\\pi/(4\\ln 2)}`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    """
    n = _checked(n_beam, u.dimensionless_unscaled, "n_beam", sign="any")
    return u.Quantity(n / _beam_per_rate(beam_fwhm_length, speed, length_parent, length_daughter), _RATE)


def beam_count_from_production_rate(q: u.Quantity, beam_fwhm_length: u.Quantity, speed: u.Quantity,
                                    length_parent: u.Quantity,
                                    length_daughter: u.Quantity | None = None) -> u.Quantity:
    """Beam-weighted molecules (dimensionless) for a production rate ``q`` (1/s, any sign).

    The inverse of :func:`production_rate_from_beam_count`: :math:`N_B = Q\\,n_B(\\theta)`.
    """
    qq = _checked(q, _RATE, "q", sign="any")
    return u.Quantity(qq * _beam_per_rate(beam_fwhm_length, speed, length_parent, length_daughter),
                      u.dimensionless_unscaled)


# ----------------------------------------------------------------------------- infrared bands
def fluorescence_efficiency(g_1au: u.Quantity, r_h: u.Quantity) -> u.Quantity:
    """Solar-pumped fluorescence efficiency (photons per molecule per second) at ``r_h``.

    Notes
    -----
    :math:`g(r_h) = g_{1\\,\\rm au}\\,(r_h / 1\\ {\\rm au})^{-2}`: the pumping rate
    follows the solar flux.

    References
    ----------
    .. [1] Crovisier, J. & Encrenaz, Th. 1983, A&A 126, 170 (from memory).
    """
    g = _checked(g_1au, _RATE, "g_1au")
    r = _checked(r_h, u.au, "r_h", error=EphemerisError)
    return u.Quantity(g / (r * r), _RATE)


def _band_flux_per_molecule(wavelength, g_1au, r_h, delta) -> np.ndarray:
    """Band flux of one molecule, in W m^-2."""
    lam = _checked(wavelength, u.m, "wavelength")
    g = fluorescence_efficiency(g_1au, r_h).to_value(_RATE)
    dist = _checked(delta, u.m, "delta", error=EphemerisError)
    return g * (_HC / lam) / (4.0 * math.pi * dist * dist)


def band_flux_from_molecules(n_molecules: u.Quantity, wavelength: u.Quantity, g_1au: u.Quantity,
                             r_h: u.Quantity, delta: u.Quantity) -> u.Quantity:
    """Flux (W m^-2) of an optically thin, solar-pumped fluorescence band from ``n_molecules``.

    Parameters
    ----------
    n_molecules : `~astropy.units.Quantity` [dimensionless]
        Molecules in the aperture (any sign).
    wavelength : `~astropy.units.Quantity` [length]
        Band wavelength, > 0 (each photon carries h c / wavelength).
    g_1au : `~astropy.units.Quantity` [1/s]
        Fluorescence efficiency at 1 au, photons per molecule per second, > 0.
    r_h, delta : `~astropy.units.Quantity` [length]
        Heliocentric and observer distances, > 0.

    Notes
    -----
    :math:`F = N\\,g(r_h)\\,\\frac{hc}{\\lambda}\\,\\frac{1}{4\\pi\\Delta^2}`,
    :math:`g(r_h) = g_{1\\,\\rm au}(r_h/1\\ {\\rm au})^{-2}` (isotropic emission).

    References
    ----------
    .. [1] Crovisier, J. & Encrenaz, Th. 1983, A&A 126, 170 (from memory).
    """
    n = _checked(n_molecules, u.dimensionless_unscaled, "n_molecules", sign="any")
    return u.Quantity(n * _band_flux_per_molecule(wavelength, g_1au, r_h, delta), _BAND_FLUX)


def molecules_from_band_flux(flux: u.Quantity, wavelength: u.Quantity, g_1au: u.Quantity,
                             r_h: u.Quantity, delta: u.Quantity) -> u.Quantity:
    """Molecules (dimensionless) giving the band flux ``flux`` (W m^-2, any sign).

    The inverse of :func:`band_flux_from_molecules`:
    :math:`N = 4\\pi\\Delta^2 F \\lambda / (h c\\, g(r_h))`.
    """
    f = _checked(flux, _BAND_FLUX, "flux", sign="any")
    return u.Quantity(f / _band_flux_per_molecule(wavelength, g_1au, r_h, delta), u.dimensionless_unscaled)


# ----------------------------------------------------------------------------- full chains
def _line_scale_lengths(species: Species, parent: Species | None, speed, r_h, solar_activity: str):
    """Parent and daughter (or None) photodestruction scale lengths of a line's species."""
    v = _checked(speed, u.km / u.s, "speed") * (u.km / u.s)
    r = _checked(r_h, u.au, "r_h", error=EphemerisError) * u.au
    return scale_lengths(species, parent, ComaModel(solar_activity=solar_activity), r, v)


def _line_flux_per_rate(line, species, t_kin, rho_ap, r_h, delta, speed, solar_activity, parent,
                        t_bg) -> np.ndarray:
    """Integrated line flux per unit Q in a plain aperture, in Jy km/s s."""
    lp, ld = _line_scale_lengths(species, parent, speed, r_h, solar_activity)
    count = _aperture_per_rate(rho_ap, speed, lp, ld)
    return _flux_per_molecule(line, species, t_kin, delta, t_bg) * count


def production_rate_from_line_flux(flux: u.Quantity, line: Line, species: Species, t_kin: u.Quantity,
                                   rho_ap: u.Quantity, r_h: u.Quantity, delta: u.Quantity,
                                   speed: u.Quantity, solar_activity: str = "quiet", *,
                                   parent: Species | None = None, t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Production rate (1/s) from the integrated flux of a mm line in a circular aperture.

    Parameters
    ----------
    flux : `~astropy.units.Quantity` [Jy km/s]
        ∫S dv in an aperture of radius ``rho_ap`` on an image not convolved with a
        beam (any sign).
    line, species : catalogue entries
    t_kin : `~astropy.units.Quantity` [temperature]
        LTE temperature, above ``t_bg``.
    rho_ap : `~astropy.units.Quantity` [length]
        Aperture radius at the target, > 0 (``inf`` allowed).
    r_h, delta : `~astropy.units.Quantity` [length]
        Heliocentric and observer distances, > 0.
    speed : `~astropy.units.Quantity` [speed]
        Outflow speed, > 0 (e.g. :func:`pipeline.coma.haser.outflow_speed_law`).
    solar_activity : {'quiet', 'active'}
        Which photodestruction rates of the catalogue to use.
    parent : `~pipeline.catalogue.entries.Species`, optional
        The parent of a daughter species (required then, refused for a parent).
    t_bg : `~astropy.units.Quantity` [temperature]
        Background temperature, default the CMB.

    Notes
    -----
    :math:`Q = \\int S\\,dv / [f_1(T, \\Delta)\\,n_{\\rm ap}(\\rho; v, L)]`, with the scale
    length :math:`L = v\\,(r_h/1\\,{\\rm au})^2/\\beta_{1\\,\\rm au}`
    (:func:`pipeline.coma.haser.scale_length`), :math:`f_1` as in
    :func:`molecules_from_line_flux` and :math:`n_{\\rm ap}` as in
    :func:`production_rate_from_aperture_count`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    .. [2] Mangum, J. G. & Shirley, Y. L. 2015, PASP 127, 266.
    """
    f = _checked(flux, _LINE_FLUX, "flux", sign="any")
    per = _line_flux_per_rate(line, species, t_kin, rho_ap, r_h, delta, speed, solar_activity, parent, t_bg)
    return u.Quantity(f / per, _RATE)


def line_flux_from_production_rate(q: u.Quantity, line: Line, species: Species, t_kin: u.Quantity,
                                   rho_ap: u.Quantity, r_h: u.Quantity, delta: u.Quantity,
                                   speed: u.Quantity, solar_activity: str = "quiet", *,
                                   parent: Species | None = None, t_bg: u.Quantity = T_CMB) -> u.Quantity:
    """Integrated line flux (Jy km/s) in a circular aperture for a production rate ``q`` (1/s).

    The inverse of :func:`production_rate_from_line_flux` (same parameters):
    :math:`\\int S\\,dv = Q\\,f_1\\,n_{\\rm ap}`.
    """
    qq = _checked(q, _RATE, "q", sign="any")
    per = _line_flux_per_rate(line, species, t_kin, rho_ap, r_h, delta, speed, solar_activity, parent, t_bg)
    return u.Quantity(qq * per, _LINE_FLUX)


def _band_flux_per_rate(wavelength, g_1au, rho_ap, r_h, delta, speed, photo_rate_1au) -> np.ndarray:
    """Band flux per unit Q in a plain aperture, in W m^-2 s."""
    v = _checked(speed, u.km / u.s, "speed") * (u.km / u.s)
    beta = _checked(photo_rate_1au, _RATE, "photo_rate_1au") * _RATE
    r = _checked(r_h, u.au, "r_h", error=EphemerisError) * u.au
    count = _aperture_per_rate(rho_ap, v, haser.scale_length(v, beta, r), None)
    return _band_flux_per_molecule(wavelength, g_1au, r_h, delta) * count


def production_rate_from_band_flux(flux: u.Quantity, wavelength: u.Quantity, g_1au: u.Quantity,
                                   rho_ap: u.Quantity, r_h: u.Quantity, delta: u.Quantity,
                                   speed: u.Quantity, photo_rate_1au: u.Quantity) -> u.Quantity:
    """Production rate (1/s) of a parent molecule from an infrared band flux in a circular aperture.

    ``flux`` (W m^-2, any sign) is the band flux in the aperture; ``wavelength`` and
    ``g_1au`` are as in :func:`band_flux_from_molecules`, ``rho_ap``, ``r_h``,
    ``delta`` and ``speed`` as in :func:`production_rate_from_line_flux`;
    ``photo_rate_1au`` (1/s, > 0) is the photodestruction rate at 1 au.

    Notes
    -----
    :math:`Q = 4\\pi\\Delta^2 F\\lambda / [h c\\, g(r_h)\\, n_{\\rm ap}(\\rho; v, L)]`,
    :math:`L = v\\,(r_h/1\\,{\\rm au})^2/\\beta_{1\\,\\rm au}`.

    References
    ----------
    .. [1] Haser, L. 1957, Bull. Soc. R. Sci. Liège 43, 740.
    .. [2] Crovisier, J. & Encrenaz, Th. 1983, A&A 126, 170 (from memory).
    """
    f = _checked(flux, _BAND_FLUX, "flux", sign="any")
    return u.Quantity(f / _band_flux_per_rate(wavelength, g_1au, rho_ap, r_h, delta, speed, photo_rate_1au),
                      _RATE)


def band_flux_from_production_rate(q: u.Quantity, wavelength: u.Quantity, g_1au: u.Quantity,
                                   rho_ap: u.Quantity, r_h: u.Quantity, delta: u.Quantity,
                                   speed: u.Quantity, photo_rate_1au: u.Quantity) -> u.Quantity:
    """Infrared band flux (W m^-2) in a circular aperture for a production rate ``q`` (1/s, any sign).

    The inverse of :func:`production_rate_from_band_flux` (same parameters).
    """
    qq = _checked(q, _RATE, "q", sign="any")
    return u.Quantity(qq * _band_flux_per_rate(wavelength, g_1au, rho_ap, r_h, delta, speed, photo_rate_1au),
                      _BAND_FLUX)
