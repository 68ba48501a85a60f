"""Stage 'geometry': the target's geometry for one cube, as a one-row ECSV table."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from pipeline.io.atomic import write_table
from pipeline.io.cubes import read_cube_info
from pipeline.geometry.ephemeris import check_spacing, read_ephemeris
from pipeline.geometry.observing import cube_geometry
from pipeline.geometry.orbit import OrbitalElements
from pipeline.io.provenance import provenance_record
from pipeline.workflow.common import location_from_config

__all__ = ["run"]


def run(cube_path: str, cube_id: str, epoch: str, time_override: str | None,
        config: dict[str, Any], out_path: str, tracked: bool = True, position: str = "auto",
        offset: tuple[float, float] = (0.0, 0.0)) -> None:
    """Compute and write the geometry table of one cube."""
    info = read_cube_info(cube_path)
    target = config["target"]
    inputs = [cube_path]
    if "ephemeris" in target:
        ephem, elements = read_ephemeris(target["ephemeris"]), None
        inputs.append(target["ephemeris"])
        check_spacing(ephem)
    else:
        ephem, elements = None, OrbitalElements.from_mapping(target["elements"])
    table = cube_geometry(info, cube_id, epoch, time_override, ephemeris=ephem, elements=elements,
                          location=location_from_config(config), tracked=tracked,
                          position=position, offset=tuple(offset))
    table.meta["provenance"] = provenance_record(config, inputs, "geometry")
    write_table(table, Path(out_path))
