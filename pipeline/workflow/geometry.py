"""Stage 'geometry': the target's geometry for one cube, as a one-row ECSV table."""

from __future__ import annotations

from pathlib import Path

import astropy.units as u

from pipeline.geometry.ephemeris import check_observer, check_spacing, read_ephemeris
from pipeline.geometry.observing import cube_geometry
from pipeline.io.atomic import write_table
from pipeline.io.cubes import read_cube_info
from pipeline.io.provenance import provenance_record
from pipeline.settings import Settings

__all__ = ["run"]


def run(settings: Settings, out_path: str) -> None:
    """Compute and write the geometry table of the settings' cube."""
    cube = settings.cube
    info = read_cube_info(cube.path, cube.beam_arcsec)
    target = settings.target
    inputs = [cube.path]
    ephem = None
    if target.ephemeris is not None:
        ephem = read_ephemeris(target.ephemeris)
        inputs.append(target.ephemeris)
        check_spacing(ephem)
        check_observer(ephem, settings.location)
    table = cube_geometry(info, cube.cube_id, cube.epoch, cube.time, ephemeris=ephem, elements=target.elements,
                          location=settings.location, tracked=cube.tracked, position=cube.position,
                          offset=tuple(cube.offset),
                          duration=cube.duration_s * u.s if cube.duration_s is not None else None)
    table.meta["provenance"] = provenance_record(settings, inputs, "geometry")
    write_table(table, Path(out_path))
