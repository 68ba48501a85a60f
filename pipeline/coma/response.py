"""Model response: the flux a line gives per unit production rate, for one geometry and aperture.

R(T, ρ) = [∫S dv per molecule](T, Δ) × N_ap(ρ; Q = 1 s⁻¹, v, L, beam), so that a
measured integrated flux F in the aperture gives Q = F / R. N_ap counts the
molecules a circular aperture sees on an image convolved with the beam (Haser
parent distribution, :func:`pipeline.coma.haser.convolved_aperture_count`).
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import Band, Line, Species
from pipeline.errors import CatalogueError, ConfigError
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.haser import convolved_aperture_count, outflow_speed_law, scale_length
from pipeline.coma.line_profile import channel_fractions, thermal_dispersion

__all__ = ["ComaModel", "outflow_speed", "scale_lengths", "line_response", "window_capture", "SPECTRAL_RESPONSES", "GridGeometry", "line_response_on_grid", "band_response_on_grid"]


@dataclass(frozen=True)
class ComaModel:
    """The coma assumptions shared by every response: outflow, photodestruction and where a species comes from.

    ``source`` 'nucleus' releases every parent species at the nucleus (Haser parent); 'distributed' releases a
    species that the catalogue gives a distributed source (``Species.distributed_scale``, e.g. H2CO) as a Haser
    daughter of that source (its scale length at 1 au times r_h^2).
    """

    outflow: str | float = "law"      # 'law' (0.85 r_h^-0.5 km/s) or a speed in km/s
    solar_activity: str = "quiet"
    source: str = "nucleus"


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
    parent : Species, optional
        The parent's entry, needed when ``species`` is a daughter (Haser parent-daughter model).
    """
    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    radii = np.atleast_1d(u.Quantity(radii, u.km))
    v = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v)
    per_molecule = flux_per_molecule(line, species, t_kin, delta)          # (n_T,)
    count = convolved_aperture_count(radii, u.Quantity(beam_fwhm, u.km), 1.0 / u.s, v, length, daughter)  # (n_r,)
    return (per_molecule[:, None] * u.Quantity(count, u.dimensionless_unscaled)[None, :] * u.s).to(
        u.Jy * u.km / u.s * u.s)


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


def line_response_on_grid(line: Line, species: Species, parent: Species | None, t_kin: u.Quantity,
                          r_h: u.Quantity, delta: u.Quantity, grid: GridGeometry, model: ComaModel,
                          shortest_baseline: u.Quantity | None = None,
                          correct_filtering: bool = True) -> tuple[u.Quantity, np.ndarray]:
    """Line flux per unit production rate in each aperture, counted on the data's own pixel grid.

    R(T, ρ) = [∫S dv per molecule](T, Δ) × N_ap, with N_ap the molecules (for Q = 1/s) that each aperture
    counts on the model coma image convolved with the beam and summed with the extraction's exact-overlap
    weights (:func:`pipeline.coma.image.aperture_count_on_grid`); :func:`line_response` is its closed form
    for a circular Gaussian beam on an infinite grid, the check of this one.

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
    surviving : ndarray, shape (n_apertures,)
        1 without an interferometer.
    """
    from pipeline.coma.filtering import min_spatial_frequency, surviving_fraction
    from pipeline.coma.image import aperture_count_on_grid

    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    r_h, delta = u.Quantity(r_h, u.au), u.Quantity(delta, u.au)
    v_out = outflow_speed(model, r_h)
    pix_km = (grid.pixel_arcsec * u.arcsec).to_value(u.rad) * delta.to_value(u.km)
    length, daughter = scale_lengths(species, parent, model, r_h, v_out)
    count = aperture_count_on_grid(grid.shape, grid.x, grid.y, list(grid.radii_pix), pix_km, grid.beam_pix, v_out,
                                   length, daughter)
    resp = (flux_per_molecule(line, species, t_kin, delta)[:, None] * count[None, :]).to_value(u.Jy * u.km / u.s)
    surviving = np.ones(len(grid.radii_pix))
    if shortest_baseline is not None:
        q_min = min_spatial_frequency(shortest_baseline, line.freq)
        surviving = surviving_fraction(grid.shape, grid.x, grid.y, grid.pixel_arcsec, list(grid.radii_pix),
                                       grid.beam_pix, v_out, length, q_min, delta, daughter)
        if correct_filtering:
            resp = resp * surviving[None, :]
    return resp * (u.Jy * u.km / u.s * u.s), surviving


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
    from pipeline.coma.image import aperture_count_on_grid

    r_h, delta = u.Quantity(r_h, u.au), u.Quantity(delta, u.au)
    v_out = outflow_speed(model, r_h)
    length, daughter = scale_lengths(species, parent, model, r_h, v_out)
    pix_km = (grid.pixel_arcsec * u.arcsec).to_value(u.rad) * delta.to_value(u.km)
    count = aperture_count_on_grid(grid.shape, grid.x, grid.y, list(grid.radii_pix), pix_km, grid.beam_pix, v_out,
                                   length, daughter)
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
    kernel = SPECTRAL_RESPONSES[spectral_response]
    t_kin = np.atleast_1d(u.Quantity(t_kin, u.K))
    sig = thermal_dispersion(t_kin, species.mass).to_value(u.km / u.s)
    v = u.Quantity(v_out).to_value(u.km / u.s)
    out = []
    for s in sig:
        prof = np.convolve(channel_fractions(velocity, v, s), kernel, mode="same")
        out.append(float(np.sum(prof * weights)))
    return np.array(out)
