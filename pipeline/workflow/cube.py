"""Stage 'cube': everything one cube yields on its own, in one job.

A millimetre cube: its geometry, then for every covered line the sub-cube in the target's rest frame and its
aperture spectra, then its images. An infrared cube: its geometry, its bands (and dust continuum), then its images.
Nothing here depends on another cube, so a new cube reruns only its own job; one job per cube instead of one per
step and line saves each of those jobs' interpreter start and imports (a campaign of millimetre cubes with many
lines ran hundreds of them).

The steps are the stage functions of :mod:`pipeline.workflow.geometry`, :mod:`~pipeline.workflow.comoving`,
:mod:`~pipeline.workflow.extract`, :mod:`~pipeline.workflow.bands` and :mod:`~pipeline.workflow.cube_images`, run
in turn on the files each writes (every file atomically), so the products are those of the steps run apart.
"""

from __future__ import annotations

import contextlib
import logging
from pathlib import Path

from pipeline.errors import GasledgerError
from pipeline.settings import Settings
from pipeline.workflow import cube_images, geometry

__all__ = ["run_lines", "run_bands", "line_file"]

log = logging.getLogger(__name__)


def line_file(folder: str | Path, line_id: str) -> Path:
    """The file of line ``line_id`` in a cube's folder of sub-cubes or spectra (``<folder>/<line>.fits``)."""
    return Path(folder) / f"{line_id}.fits"


def run_lines(settings: Settings, line_ids: list[str], geometry_path: str, subcube_dir: str, spectra_dir: str,
              image_path: str) -> None:
    """A millimetre cube: geometry, each line's sub-cube and spectra (``<dir>/<line>.fits``), images."""
    from pipeline.workflow import comoving, extract      # here: an infrared cube's job need not import them

    cube_id = settings.cube.cube_id
    geometry.run(settings, geometry_path)
    Path(subcube_dir).mkdir(parents=True, exist_ok=True)
    Path(spectra_dir).mkdir(parents=True, exist_ok=True)
    for k, line_id in enumerate(line_ids, 1):
        sub = str(line_file(subcube_dir, line_id))
        with _naming_the_line(settings, line_id, sub):
            comoving.run(geometry_path, line_id, settings, sub)
            extract.run(sub, settings, str(line_file(spectra_dir, line_id)))
        log.info("cube %s: line %s done (%d of %d)", cube_id, line_id, k, len(line_ids))
    cube_images.run(geometry_path, line_ids, [], settings, image_path)


@contextlib.contextmanager
def _naming_the_line(settings: Settings, line_id: str, subcube_path: str):
    """A gasledger error of one line's steps names the cube file and the line (instead of the sub-cube file, which
    a failed job does not keep)."""
    try:
        yield
    except GasledgerError as exc:
        text = str(exc).removeprefix(f"{subcube_path}: ")
        try:
            named = type(exc)(f"cube {settings.cube.cube_id} ({settings.cube.path}), line {line_id}: {text}")
        except TypeError:  # an error class with another signature: leave it as it is
            raise exc from None
        raise named from exc


def run_bands(settings: Settings, band_ids: list[str], geometry_path: str, bands_path: str, image_path: str) -> None:
    """An infrared cube: geometry, its bands and dust continuum (the bands file), images."""
    from pipeline.workflow import bands                  # here: a millimetre cube's job need not import it

    geometry.run(settings, geometry_path)
    bands.run(geometry_path, band_ids, settings, bands_path)
    log.info("cube %s: %d bands measured", settings.cube.cube_id, len(band_ids))
    cube_images.run(geometry_path, [], band_ids, settings, image_path)
