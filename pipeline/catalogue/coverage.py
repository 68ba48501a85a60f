"""Planning the workflow: which catalogue lines (millimetre cubes) or bands (infrared cubes) each cube may cover.

Called when Snakemake builds its job graph, so it reads headers only. A line is
assigned to a millimetre cube when its rest frequency, shifted by any radial
velocity up to ``margin``, overlaps the band; whether the integration window is
really covered at the actual Doppler shift is decided in the comoving stage. An
infrared band is assigned to an infrared cube when its extent, shifted the same
way, overlaps the cube's wavelength range; the bands stage decides coverage.
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import Catalogue
from pipeline.io.cubes import CubeInfo, read_cube_info  # noqa: F401  (read_cube_info: named in docstrings)
from pipeline.io.cube_index import CubeSpan

__all__ = ["lines_for_cube", "bands_for_cube"]


def lines_for_cube(info: CubeInfo | CubeSpan, catalogue: Catalogue, species: list[str],
                   margin: u.Quantity = 100 * u.km / u.s) -> list[str]:
    """Line ids of ``species`` that may fall in the band of the cube ``info`` (:func:`read_cube_info`, or its
    :class:`~pipeline.io.cube_index.CubeSpan`), each species' lines by frequency.

    The catalogue's frequencies are compared as one array (a campaign's graph asks this of every cube)."""
    if info.regime == "infrared":
        return []
    fmin, fmax = (float(u.Quantity(f).to_value(u.GHz)) for f in info.frequency_range)
    beta = (margin / const.c).decompose().value
    freqs = catalogue.line_frequencies_ghz
    near = (freqs * (1 + beta) >= fmin) & (freqs * (1 - beta) <= fmax)
    hits = {catalogue.lines[k].line_id for k in np.flatnonzero(near)}
    return [line.line_id for name in species for line in catalogue.lines_of(name) if line.line_id in hits]


def bands_for_cube(info: CubeInfo | CubeSpan, catalogue: Catalogue, species: list[str],
                   margin: u.Quantity = 100 * u.km / u.s) -> list[str]:
    """Band ids of ``species`` whose extent may overlap the wavelength range of the infrared cube ``info``."""
    if info.regime != "infrared":
        return []
    lam = u.Quantity(info.frequency_range).to(u.um, equivalencies=u.spectral())
    beta = (margin / const.c).decompose().value
    out = []
    for name in species:
        for band in catalogue.bands_of(name):
            if band.extent_hi * (1 + beta) >= lam.min() and band.extent_lo * (1 - beta) <= lam.max():
                out.append(band.band_id)
    return out
