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
    observer = settings.observer_of()
    table_path = settings.ephemeris_of()
    inputs = [cube.path]
    ephem = None
    if table_path is not None:
        ephem = read_ephemeris(table_path)
        inputs.append(table_path)
        check_spacing(ephem)
        check_observer(ephem, observer)
    if observer.states is not None:
        observer.state_table()       # read and checked even when this cube's geometry needs no state of it
        inputs.append(observer.states)
    table = cube_geometry(info, cube.cube_id, cube.epoch, cube.time, ephemeris=ephem,
                          elements=settings.elements_of(), observer=observer, tracked=cube.tracked,
                          position=cube.position,
                          offset=tuple(cube.offset),
                          duration=cube.duration_s * u.s if cube.duration_s is not None else None)
    table.meta["provenance"] = provenance_record(settings, inputs, "geometry")
    write_table(table, Path(out_path))
