"""Model response: the flux a line gives per unit production rate, for one geometry and aperture.

R(T, ρ) = [∫S dv per molecule](T, Δ) × N_ap(ρ; Q = 1 s⁻¹, v, L, beam), so that a
measured integrated flux F in the aperture gives Q = F / R. N_ap counts the
molecules a circular aperture sees on an image convolved with the beam (Haser
parent distribution, :func:`pipeline.coma.haser.convolved_aperture_count`).

Under the non-LTE excitation model (``ComaModel.excitation`` a
:class:`~pipeline.coma.departure.NonLteSettings`) the flux per molecule stays the LTE one at the swept
T_kin and each molecule is weighted by its line's departure from LTE along the line of sight
(:mod:`pipeline.coma.departure`): R becomes R_LTE × D(T, ρ), D the weighted over the plain count.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import Band, Line, Species
from pipeline.errors import CatalogueError, ConfigError
from pipeline.coma.departure import ColumnWeight, NonLteSettings, line_column_weight
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.haser import (convolved_aperture_count, daughter_column_density, outflow_speed_law,
                                 parent_column_density, scale_length)
from pipeline.coma.line_profile import channel_fractions, thermal_dispersion

__all__ = ["ComaModel", "EXCITATION_NOT_GIVEN", "nonlte_settings", "line_column_weight_of", "outflow_speed",
           "scale_lengths", "line_response", "line_departure", "window_capture", "SPECTRAL_RESPONSES", "GridGeometry",
           "line_response_on_grid", "line_departure_on_grid", "filtering_departure_on_grid", "band_response_on_grid"]

#: ``ComaModel.excitation`` of a step that was not given the config's ``excitation`` section (reading it raises).
EXCITATION_NOT_GIVEN = "not given"


@dataclass(frozen=True)
class ComaModel:
    """The coma assumptions shared by every response: outflow, photodestruction and where a species comes from.

    ``source`` 'nucleus' releases every parent species at the nucleus (Haser parent); 'distributed' releases a
    species that the catalogue gives a distributed source (``Species.distributed_scale``, e.g. H2CO) as a Haser
    daughter of that source (its scale length at 1 au times r_h^2).

    ``excitation`` is how the millimetre lines are excited: None for LTE at the swept kinetic temperature, a
    :class:`~pipeline.coma.departure.NonLteSettings` for level populations along the outflow
    (:func:`nonlte_settings` reads it; :data:`EXCITATION_NOT_GIVEN` when the step was not given the section).
    """

    outflow: str | float = "law"      # 'law' (0.85 r_h^-0.5 km/s) or a speed in km/s
    solar_activity: str = "quiet"
    source: str = "nucleus"
    excitation: NonLteSettings | str | None = None


def nonlte_settings(model: ComaModel) -> NonLteSettings | None:
    """The model's non-LTE settings, None under LTE; ConfigError for a step that was not given ``excitation``."""
    if isinstance(model.excitation, str):
        msg = ("settings: this step was not given the config key 'excitation' (the coma model's line excitation); "
               "expected it in the rule's settings params (rules/*.smk, settings_of)")
        raise ConfigError(msg)
    return model.excitation


def line_column_weight_of(line: Line, species: Species, parent: Species | None, t_kin: u.Quantity,
                          r_h: u.Quantity, model: ComaModel) -> ColumnWeight | None:
    """The line's non-LTE column factor f(rho) at one kinetic temperature under ``model`` (None under LTE).

    :func:`pipeline.coma.departure.line_column_weight` with the model's outflow speed and scale lengths.
    """
    nonlte = nonlte_settings(model)
    if nonlte is None:
        return None
    r_h = u.Quantity(r_h, u.au)
    v = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v)
    return line_column_weight(line, species, u.Quantity(t_kin, u.K).reshape(()), r_h, v, length, daughter, nonlte)


def outflow_speed(model: ComaModel, r_h: u.Quantity) -> u.Quantity:
    """Outflow speed at ``r_h`` under the model."""
    if model.outflow == "law":
        return outflow_speed_law(u.Quantity(r_h, u.au))
    return float(model.outflow) * u.km / u.s


def scale_lengths(species: Species, parent: Species | None, model: ComaModel, r_h: u.Quantity,
                  speed: u.Quantity) -> tuple[u.Quantity, u.Quantity | None]:
    """Haser scale lengths (parent, daughter): a parent species gives (L, None); a daughter (L_parent, L).

    Under ``model.source == 'distributed'`` a species with a distributed source is a daughter of it:
    (distributed_scale r_h^2, L).

    Each is :func:`pipeline.coma.haser.scale_length` of the species' photodestruction rate under
    ``model.solar_activity``.  ``parent`` must be the catalogue entry of a daughter's parent, and None
    for a parent species (CatalogueError otherwise).
    """
    r_h = u.Quantity(r_h, u.au)
    if model.source not in ("nucleus", "distributed"):
        msg = f"coma model source must be 'nucleus' or 'distributed', found {model.source!r}"
        raise CatalogueError(msg)
    if model.source == "distributed" and species.parent is None and species.distributed_scale is not None:
        return (species.distributed_scale * (r_h / u.au).decompose().value ** 2,
                scale_length(speed, species.photo_rate(model.solar_activity), r_h))
    if species.parent is None:
        if parent is not None:
            msg = (f"species {species.name!r} is a parent molecule in the catalogue; 'parent' must be "
                   f"None, found species {parent.name!r}")
            raise CatalogueError(msg)
        return scale_length(speed, species.photo_rate(model.solar_activity), r_h), None
    if parent is None or parent.name != species.parent:
        found = None if parent is None else parent.name
        msg = (f"species {species.name!r} is a daughter of {species.parent!r}; 'parent' must be that "
               f"species, found {found!r}")
        raise CatalogueError(msg)
    return (scale_length(speed, parent.photo_rate(model.solar_activity), r_h),
            scale_length(speed, species.photo_rate(model.solar_activity), r_h))


def line_response(line: Line, species: Species, t_kin: u.Quantity, radii: u.Quantity,
                  r_h: u.Quantity, delta: u.Quantity, beam_fwhm: u.Quantity,
                  model: ComaModel, parent: Species | None = None) -> u.Quantity:
    """Integrated flux per unit production rate, shape (n_T, n_radii), in Jy km/s s.

    Parameters
    ----------
    line, species : catalogue entries
    t_kin : Quantity [temperature], shape (n_T,)
    radii : Quantity [length], shape (n_radii,), aperture radii at the target
    r_h, delta : Quantity [length], heliocentric and observer distances
    beam_fwhm : Quantity [length], beam FWHM at the target (0 for no beam)
    model : ComaModel
        Under non-LTE excitation the LTE response is multiplied by the line's departure D(T, ρ)
        (:func:`line_departure`).
    parent : Species, optional
        The parent's entry, needed when ``species`` is a daughter (Haser parent-daughter model).
    """
    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    radii = np.atleast_1d(u.Quantity(radii, u.km))
    v = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v)
    per_molecule = flux_per_molecule(line, species, t_kin, delta)          # (n_T,)
    count = convolved_aperture_count(radii, u.Quantity(beam_fwhm, u.km), 1.0 / u.s, v, length, daughter)  # (n_r,)
    resp = (per_molecule[:, None] * u.Quantity(count, u.dimensionless_unscaled)[None, :] * u.s).to(
        u.Jy * u.km / u.s * u.s)
    if nonlte_settings(model) is None:
        return resp
    return resp * line_departure(line, species, t_kin, radii, r_h, beam_fwhm, model, parent)


#: Nodes per unit ln r of the closed-form departure's integral over the sky.
_SKY_NODES_PER_E = 200


def line_departure(line: Line, species: Species, t_kin: u.Quantity, radii: u.Quantity, r_h: u.Quantity,
                   beam_fwhm: u.Quantity, model: ComaModel, parent: Species | None = None) -> np.ndarray:
    """D(T, ρ) of :func:`line_response`: the non-LTE over the LTE count of a circular aperture on a
    circular-Gaussian-convolved image (ones under LTE), shape (n_T, n_radii).

    Notes
    -----
    D = ∫ r N(r) f(r) W(r) dr / ∫ r N(r) W(r) dr over projected distances r, with N the Haser column
    (:func:`pipeline.coma.haser.parent_column_density`, or the daughter's), f the line's column factor
    (:func:`line_column_weight_of`) and W(r) = 1 - Q_1(r/σ, ρ/σ) the chance that the beam (σ = FWHM /
    sqrt(8 ln 2)) moves a molecule at r into the aperture (Marcum Q function, 1 - Q_1(a, b) the
    non-central chi-square distribution function with 2 degrees of freedom, non-centrality a², at b²:
    scipy.stats.ncx2; a step at ρ without a beam). Trapezoidal rule in ln r from 1e-7 ρ to ρ + 12σ.
    """
    from scipy.stats import ncx2

    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    radii = np.atleast_1d(u.Quantity(radii, u.km)).to_value(u.km)
    out = np.ones((t_kin.size, radii.size))
    if nonlte_settings(model) is None:
        return out
    r_h = u.Quantity(r_h, u.au)
    v = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v)
    sigma = u.Quantity(beam_fwhm, u.km).to_value(u.km) / np.sqrt(8 * np.log(2))
    weights = [line_column_weight_of(line, species, parent, t, r_h, model) for t in t_kin]
    for j, rho in enumerate(radii):
        hi = rho + 12.0 * sigma
        n = int(_SKY_NODES_PER_E * np.log(hi / (1e-7 * rho))) + 1
        r = np.geomspace(1e-7 * rho, hi, n)
        col = (parent_column_density(r * u.km, 1 / u.s, v, length) if daughter is None
               else daughter_column_density(r * u.km, 1 / u.s, v, length, daughter)).to_value(u.cm**-2)
        inside = (ncx2.cdf((rho / sigma) ** 2, 2, (r / sigma) ** 2) if sigma > 0 else (r <= rho).astype(float))
        base = r * r * col * inside                         # r N W dr = r² N W d(ln r)
        plain = np.trapezoid(base, np.log(r))
        for i, weight in enumerate(weights):
            out[i, j] = np.trapezoid(base * weight(r), np.log(r)) / plain
    return out


@dataclass(frozen=True)
class GridGeometry:
    """The data's own pixel grid around the target: what the extraction summed over.

    ``shape`` = (n_y, n_x); (``x``, ``y``) the aperture centre (0-based pixels); ``radii_pix`` the aperture
    radii; ``beam_pix`` = (FWHM major, minor [pixels], PA [deg]) of the beam or point-spread function, or None.
    """

    shape: tuple[int, int]
    x: float
    y: float
    pixel_arcsec: float
    radii_pix: list[float]
    beam_pix: tuple[float, float, float] | None


def _grid_count(grid: GridGeometry, species: Species, parent: Species | None, model: ComaModel, r_h: u.Quantity,
                delta: u.Quantity, weight=None) -> tuple[np.ndarray, u.Quantity, u.Quantity, u.Quantity | None]:
    """The molecules (Q = 1/s) each aperture counts on the data's grid (:func:`pipeline.coma.image.
    aperture_count_on_grid`, optionally with a column ``weight``), and the outflow speed and scale lengths used."""
    from pipeline.coma.image import aperture_count_on_grid

    v_out = outflow_speed(model, r_h)
    pix_km = (grid.pixel_arcsec * u.arcsec).to_value(u.rad) * u.Quantity(delta, u.au).to_value(u.km)
    length, daughter = scale_lengths(species, parent, model, r_h, v_out)
    extra = {} if weight is None else {"weight": weight}
    count = aperture_count_on_grid(grid.shape, grid.x, grid.y, list(grid.radii_pix), pix_km, grid.beam_pix, v_out,
                                   length, daughter, **extra)
    return count, v_out, length, daughter


def line_response_on_grid(line: Line, species: Species, parent: Species | None, t_kin: u.Quantity,
                          r_h: u.Quantity, delta: u.Quantity, grid: GridGeometry, model: ComaModel,
                          shortest_baseline: u.Quantity | None = None,
                          correct_filtering: bool = True) -> tuple[u.Quantity, np.ndarray]:
    """Line flux per unit production rate in each aperture, counted on the data's own pixel grid.

    R(T, ρ) = [∫S dv per molecule](T, Δ) × N_ap, with N_ap the molecules (for Q = 1/s) that each aperture
    counts on the model coma image convolved with the beam and summed with the extraction's exact-overlap
    weights (:func:`pipeline.coma.image.aperture_count_on_grid`); :func:`line_response` is its closed form
    for a circular Gaussian beam on an infinite grid, the check of this one. Under non-LTE excitation the response
    is multiplied by the line's departure on the same grid (:func:`line_departure_on_grid`), and the surviving
    fraction of an interferometer's filtering is that of the line's non-LTE brightness
    (:func:`filtering_departure_on_grid`: emission concentrated nearer the nucleus loses less to the missing short
    spacings, by 20-40 % in the tested cases).

    Parameters
    ----------
    line, species, parent : catalogue entries (``parent`` for a daughter species, else None)
    t_kin : Quantity [temperature], shape (n_T,)
    r_h, delta : Quantity [length]
    grid : GridGeometry
    model : ComaModel
    shortest_baseline : Quantity [length], optional
        An interferometer's shortest projected baseline: the fraction of the model flux that survives
        spatial filtering (:func:`pipeline.coma.filtering.surviving_fraction`) is returned.
    correct_filtering : bool
        Scale the response by that fraction.

    Returns
    -------
    response : Quantity, shape (n_T, n_apertures), in Jy km/s s
    surviving : ndarray, shape (n_T, n_apertures)
        1 without an interferometer; the same at every temperature under LTE.
    """
    from pipeline.coma.filtering import surviving_fraction

    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    r_h, delta = u.Quantity(r_h, u.au), u.Quantity(delta, u.au)
    count, v_out, length, daughter = _grid_count(grid, species, parent, model, r_h, delta)
    resp = (flux_per_molecule(line, species, t_kin, delta)[:, None] * count[None, :]).to_value(u.Jy * u.km / u.s)
    if nonlte_settings(model) is not None:
        resp = resp * line_departure_on_grid(line, species, parent, t_kin, r_h, delta, grid, model)
    surviving = np.ones((t_kin.size, len(grid.radii_pix)))
    if shortest_baseline is not None:
        args = _filtering_args(line, grid, v_out, length, daughter, delta, shortest_baseline)
        if nonlte_settings(model) is not None:      # the line's non-LTE brightness, at each temperature
            surviving = np.array([surviving_fraction(*args, weight=line_column_weight_of(line, species, parent, t,
                                                                                         r_h, model))
                                  for t in t_kin])
        else:
            surviving = np.tile(surviving_fraction(*args), (t_kin.size, 1))
        if correct_filtering:
            resp = resp * surviving
    return resp * (u.Jy * u.km / u.s * u.s), surviving


def _filtering_args(line: Line, grid: GridGeometry, v_out: u.Quantity, length: u.Quantity,
                    daughter: u.Quantity | None, delta: u.Quantity, shortest_baseline: u.Quantity) -> tuple:
    """The positional arguments of :func:`pipeline.coma.filtering.surviving_fraction` for one line on the grid."""
    from pipeline.coma.filtering import min_spatial_frequency

    return (grid.shape, grid.x, grid.y, grid.pixel_arcsec, list(grid.radii_pix), grid.beam_pix, v_out, length,
            min_spatial_frequency(shortest_baseline, line.freq), delta, daughter)


def filtering_departure_on_grid(line: Line, species: Species, parent: Species | None, t_kin: u.Quantity,
                                r_h: u.Quantity, delta: u.Quantity, grid: GridGeometry, model: ComaModel,
                                shortest_baseline: u.Quantity | None) -> np.ndarray:
    """The fraction of the line's non-LTE brightness that survives an interferometer's filtering over that of the
    plain Haser image (:func:`pipeline.coma.filtering.surviving_fraction` with and without the line's column
    factor f(rho)), shape (n_T, n_apertures); ones under LTE or without a baseline."""
    from pipeline.coma.filtering import surviving_fraction

    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    out = np.ones((t_kin.size, len(grid.radii_pix)))
    if shortest_baseline is None or nonlte_settings(model) is None:
        return out
    r_h, delta = u.Quantity(r_h, u.au), u.Quantity(delta, u.au)
    v_out = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v_out)
    args = _filtering_args(line, grid, v_out, length, daughter, delta, shortest_baseline)
    plain = surviving_fraction(*args)
    for i, t in enumerate(t_kin):
        weighted = surviving_fraction(*args, weight=line_column_weight_of(line, species, parent, t, r_h, model))
        out[i] = np.where(plain != 0, weighted / np.where(plain != 0, plain, 1.0), 1.0)
    return out


def line_departure_on_grid(line: Line, species: Species, parent: Species | None, t_kin: u.Quantity,
                           r_h: u.Quantity, delta: u.Quantity, grid: GridGeometry, model: ComaModel) -> np.ndarray:
    """D(T, aperture): the molecules each aperture counts weighted by the line's non-LTE column factor, over the
    plain count, on the data's own grid (ones under LTE), shape (n_T, n_apertures).

    The weighted count is :func:`pipeline.coma.image.aperture_count_on_grid` with each sub-pixel's molecules
    multiplied by f(ρ) at its centre (:func:`line_column_weight_of`), beam-convolved and summed with the
    extraction's weights like the plain count; the LTE flux per molecule times the weighted count is the line's
    non-LTE flux (the background term of f is taken at the local excitation temperature).
    """

    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    out = np.ones((t_kin.size, len(grid.radii_pix)))
    if nonlte_settings(model) is None:
        return out
    r_h, delta = u.Quantity(r_h, u.au), u.Quantity(delta, u.au)
    plain, _, _, _ = _grid_count(grid, species, parent, model, r_h, delta)
    for i, t in enumerate(t_kin):
        weight = line_column_weight_of(line, species, parent, t, r_h, model)
        weighted, _, _, _ = _grid_count(grid, species, parent, model, r_h, delta, weight=weight)
        out[i] = np.where(plain > 0, weighted / np.where(plain > 0, plain, 1.0), 1.0)
    return out


def band_response_on_grid(band: Band, species: Species, parent: Species | None, r_h: u.Quantity, delta: u.Quantity,
                          grid: GridGeometry, model: ComaModel) -> u.Quantity:
    """Band flux per unit production rate in each aperture, counted on the data's own pixel grid.

    R(ρ) = g(r_h) hc/λ / (4πΔ²) × N_ap: the optically thin, solar-pumped fluorescence of one molecule
    (:func:`pipeline.coma.conversion.band_flux_from_molecules`) times the molecules each aperture counts on the
    model coma convolved with the point-spread function (:func:`pipeline.coma.image.aperture_count_on_grid`).

    Returns
    -------
    Quantity, shape (n_apertures,), in W m-2 s (band flux per molecule/s)
    """
    from pipeline.coma.conversion import band_flux_from_molecules

    r_h, delta = u.Quantity(r_h, u.au), u.Quantity(delta, u.au)
    count, _, _, _ = _grid_count(grid, species, parent, model, r_h, delta)
    per_molecule = band_flux_from_molecules(1.0 * u.one, band.wavelength, band.g_1au, r_h, delta)
    return u.Quantity([(per_molecule * c).to_value(u.W / u.m**2) for c in count], u.W / u.m**2 * u.s)


SPECTRAL_RESPONSES = {"none": np.array([1.0]), "hanning": np.array([0.25, 0.5, 0.25])}


def window_capture(species: Species, t_kin: u.Quantity, velocity: np.ndarray, weights: np.ndarray,
                   v_out: u.Quantity, spectral_response: str = "hanning") -> np.ndarray:
    """Fraction of the line flux that the weighted window sum captures, per temperature.

    The model profile (arcsine plus thermal, :mod:`pipeline.coma.line_profile`) is
    integrated over each channel of ``velocity`` [km/s], convolved with the
    instrument's channel response (``'hanning'``: [1/4, 1/2, 1/4], as most
    correlators deliver; ``'none'``), and summed with the window ``weights``.
    """
    if spectral_response not in SPECTRAL_RESPONSES:
        msg = f"spectral_response must be one of {', '.join(SPECTRAL_RESPONSES)}, found {spectral_response!r}"
        raise ConfigError(msg)
    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    sig = thermal_dispersion(t_kin, species.mass).to_value(u.km / u.s)
    velocity = np.ascontiguousarray(velocity, dtype=float)
    weights = np.ascontiguousarray(weights, dtype=float)
    return np.array(_capture(tuple(sig.tolist()), velocity.tobytes(), weights.tobytes(),
                             float(u.Quantity(v_out).to_value(u.km / u.s)), spectral_response))


@functools.lru_cache(maxsize=1024)
def _capture(sigmas: tuple[float, ...], velocity: bytes, weights: bytes, v_out: float,
             spectral_response: str) -> tuple[float, ...]:
    """:func:`window_capture` on plain values (kept per process: the injection asks it again for every sky
    position at the same velocity)."""
    kernel = SPECTRAL_RESPONSES[spectral_response]
    vel, wts = np.frombuffer(velocity), np.frombuffer(weights)
    return tuple(float(np.sum(np.convolve(channel_fractions(vel, v_out, s), kernel, mode="same") * wts))
                 for s in sigmas)
