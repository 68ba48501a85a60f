"""Planning the workflow: which catalogue lines each cube may cover.

Called when Snakemake builds its job graph, so it reads headers only. A line is
assigned to a cube when its rest frequency, shifted by any radial velocity up
to ``margin``, overlaps the band; whether the integration window is really
covered at the actual Doppler shift is decided in the comoving stage.
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u

from ..catalogue import Catalogue
from ..cube_io import read_cube_info

__all__ = ["lines_for_cube"]


def lines_for_cube(path: str, catalogue: Catalogue, species: list[str],
                   margin: u.Quantity = 100 * u.km / u.s) -> list[str]:
    """Line ids of ``species`` that may fall in the band of the cube at ``path``."""
    info = read_cube_info(path)
    fmin, fmax = info.frequencies.min(), info.frequencies.max()
    beta = (margin / const.c).decompose().value
    out = []
    for name in species:
        for line in catalogue.lines_of(name):
            if line.freq * (1 + beta) >= fmin and line.freq * (1 - beta) <= fmax:
                out.append(line.line_id)
    return out
