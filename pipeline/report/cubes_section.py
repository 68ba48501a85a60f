"""The report's "Cubes" section: each cube's image (drawn by its cube job) and its aperture spectra with the model
at the quoted Q or limit (drawn here, since it needs the campaign's limits), with a cache of the spectra figures.
"""

from __future__ import annotations

import base64
import hashlib
import html
import pickle
from pathlib import Path
from typing import TYPE_CHECKING

import astropy.units as u
import matplotlib
import numpy as np
from astropy.table import QTable

from pipeline.io.cubes import read_cube_info
from pipeline.io.products import BandMeasurements, LineSpectra
from pipeline.report.cube_figures import plot_cube_spectra
from pipeline.report.cube_spectra import SpectrumPanel, band_spectrum_panels, line_spectrum_panels
from pipeline.report.figures import to_png

if TYPE_CHECKING:
    from pipeline.settings import Settings

__all__ = ["cube_images_html", "cubes_section", "CUBE_IMAGE_CLASS", "CUBE_SPECTRA_CLASS"]

#: HTML class of each cube's image in the report (the browser check counts them).
CUBE_IMAGE_CLASS = "cube-image"
#: HTML class of each cube's spectra figure in the report.
CUBE_SPECTRA_CLASS = "cube-spectra"


def cube_images_html(entries: list[tuple[str, bytes, str, bytes | None]]) -> str:
    """The report's "Cubes" section: per cube, its image (class :data:`CUBE_IMAGE_CLASS`) and its spectra figure.

    ``entries`` are (cube id, image PNG, caption, spectra PNG or None), in the campaign's cube order.
    """
    parts = ["<p>Per cube: the integrated line of each configured species (millimetre) or the continuum-subtracted "
             "band (infrared) over its integration window, and the continuum, with the target's predicted position "
             "(red cross), the apertures (orange circles), the beam (grey ellipse) and north/east. Contours: 3, 5, "
             "8, 13… × the image rms (dashed: −3, −5); the rms, and the peak inside the largest aperture with its "
             "distance from the predicted position, in the lower right. Below each, unfolded on a click, the "
             "cube's aperture spectra in its own units (Jy, K or F<sub>λ</sub>) with the model at the quoted "
             "production rate (red) or at the upper limit (orange) of limits.ecsv for that epoch.</p>"]
    for cube_id, png, caption, spectra in entries:
        data = base64.b64encode(png).decode("ascii")
        name = html.escape(cube_id)
        parts.append(f'<figure id="cube-{name}"><img class="{CUBE_IMAGE_CLASS}" src="data:image/png;base64,{data}" '
                     f'alt="integrated-line and continuum images of cube {name}" style="max-width:100%">'
                     f"<figcaption>{html.escape(caption)}</figcaption></figure>")
        if spectra is not None:
            sdata = base64.b64encode(spectra).decode("ascii")
            parts.append(f"<details><summary>Aperture spectra of cube {name}, with the model at the quoted Q or "
                         f'at the limit</summary><figure><img class="{CUBE_SPECTRA_CLASS}" '
                         f'src="data:image/png;base64,{sdata}" alt="aperture spectra of cube {name}" '
                         'style="max-width:100%"></figure></details>')
    return "".join(parts)


def _content_path(title: str, panels: list[SpectrumPanel], notes: list[str], cache: Path) -> Path:
    """Where the cache keeps the figure that draws ``title``, ``panels`` and ``notes`` (with this code)."""
    from pipeline.io.provenance import code_version

    key = hashlib.sha256(pickle.dumps((code_version(), matplotlib.__version__, title, panels, notes),
                                      protocol=5)).hexdigest()
    return cache / f"{key}.png"


def _draw(figure: tuple[str, list[SpectrumPanel], list[str]]) -> bytes:
    """One cube's spectra figure as PNG bytes (a module-level function, so worker processes can run it)."""
    return to_png(plot_cube_spectra(*figure))


def _draw_all(figures: list[tuple[str, list[SpectrumPanel], list[str]]], workers: int) -> list[bytes]:
    """The figures drawn, in order: on ``workers`` processes when there are several figures and workers (each
    figure is independent; the PNG bytes are the same either way)."""
    if workers <= 1 or len(figures) <= 1:
        return [_draw(f) for f in figures]
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=min(workers, len(figures)),
                             mp_context=multiprocessing.get_context("fork")) as pool:
        return list(pool.map(_draw, figures, chunksize=max(1, len(figures) // (4 * workers))))


def _keep(path: Path, png: bytes) -> None:
    """Write a figure into the cache folder (atomically)."""
    from pipeline.io.atomic import atomic_path

    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp:
        tmp.write_bytes(png)


def _spectra_by_cube(cube_ids: list[str], spectra_paths: list[str]) -> dict[str, list[Path]] | None:
    """Each cube's spectra files by the workflow's layout (``spectra/<cube>/<line>.fits``); None when a file does
    not follow it (then nothing is keyed on the files)."""
    out: dict[str, list[Path]] = {c: [] for c in cube_ids}
    for path in map(Path, spectra_paths):
        if path.parent.name not in out:
            return None
        out[path.parent.name].append(path)
    return out


def _input_key(settings: "Settings", cube, title: str, files: list[Path], limits: QTable) -> str:
    """A digest of everything one cube's spectra figure is drawn from: the code and matplotlib versions, the
    settings (the cube's own entry and every section but the list of cubes), the bytes of the cube's spectra or
    bands files, the cube file's size and modification time (its unit), and the quoted rows of its epoch in
    ``limits``. Equal digests give the same figure, so it can be read back without reading the spectra."""
    from pipeline.io.provenance import code_version

    digest = hashlib.sha256()
    record = {k: v for k, v in settings.record.items() if k != "cubes"}
    cube_file = Path(cube.path)
    stat = cube_file.stat() if cube_file.is_file() else None
    digest.update(pickle.dumps((code_version(), matplotlib.__version__, title, repr(cube), repr(record),
                                (stat.st_size, stat.st_mtime_ns) if stat else None), protocol=5))
    for path in sorted(files):
        digest.update(path.name.encode())
        digest.update(hashlib.sha256(path.read_bytes()).digest())
    rows = limits[(np.asarray(limits["epoch"], dtype=str) == cube.epoch) & np.asarray(limits["adopted"], dtype=bool)]
    for row in rows:
        digest.update(repr(tuple(str(row[c]) for c in rows.colnames)).encode())
    return digest.hexdigest()


def cubes_section(settings: "Settings", image_paths: list[str], spectra_paths: list[str], bands_paths: list[str],
                  limits: QTable, cache: str | Path | None = None, workers: int = 1) -> str:
    """The report's "Cubes" section: each cube's image (made by its cube job, read from ``image_paths``,
    named ``<cube>.png``) and its spectra figure, drawn here because it needs the campaign's limits.

    ``settings`` is the run's :class:`pipeline.settings.Settings`; ``spectra_paths`` the extract step's files,
    ``bands_paths`` the bands files (each names its cube); ``limits`` the limits table (its ``adopted`` rows).
    With ``cache`` (a folder), a cube's spectra figure drawn by an earlier report from the same inputs (the
    digest of :func:`_input_key`: a new epoch leaves the earlier epochs' files and quoted rows as they were) is
    read back without reading its spectra; failing that, one whose drawn content has not changed (same title,
    panels, notes and code) is read back instead of drawn again. The folder keeps only this report's figures.
    The figures to draw are drawn on ``workers`` processes.
    """
    cache = None if cache is None else Path(cache)
    used: set[Path] = set()
    catalogue = settings.catalogue()
    images = {Path(p).stem: Path(p).read_bytes() for p in image_paths}
    ids = [c.cube_id for c in settings.cubes]
    by_cube = _spectra_by_cube(ids, spectra_paths) if cache is not None else None
    bands_files = {Path(p).stem: Path(p) for p in bands_paths}
    if by_cube is not None and not set(bands_files) <= set(ids):
        by_cube = None                                      # a bands file not named after its cube
    if by_cube is None:                                     # no layout to go by: read every file, once
        read: dict[str, list[LineSpectra]] = {}
        for path in spectra_paths:
            s = LineSpectra.from_fits(path)
            read.setdefault(s.meta.cube_id, []).append(s)
        bands = {m.cube_id: m for m in (BandMeasurements.from_fits(p) for p in bands_paths)}
    filtering = settings.interferometer
    entries = []
    pending = []                    # (entry index, figure to draw, cache paths to keep it under)
    for cube in settings.cubes:
        if cube.cube_id not in images:
            continue
        title = f"{cube.cube_id}  ·  epoch {cube.epoch}  ·  aperture spectra"
        caption = (f"Cube {cube.cube_id} (epoch {cube.epoch}): images of the integration window around the "
                   "target's predicted position.")
        keyed = None
        if by_cube is not None:
            files = by_cube[cube.cube_id] + ([bands_files[cube.cube_id]] if cube.cube_id in bands_files else [])
            keyed = cache / f"in-{_input_key(settings, cube, title, files, limits)}.png"
            used.add(keyed)
            if keyed.is_file():
                entries.append((cube.cube_id, images[cube.cube_id], caption, keyed.read_bytes()))
                continue
            spectra = [LineSpectra.from_fits(p) for p in by_cube[cube.cube_id]]
            measured = (BandMeasurements.from_fits(bands_files[cube.cube_id]) if cube.cube_id in bands_files
                        else None)
        else:
            spectra, measured = read.get(cube.cube_id, []), bands.get(cube.cube_id)
        if measured is not None:
            panels, notes = band_spectrum_panels(measured, limits, catalogue)
        else:
            kelvin = read_cube_info(cube.path, cube.beam_arcsec).bunit.is_equivalent(u.K)
            panels, notes = line_spectrum_panels(spectra, limits, catalogue, settings.coma,
                                                 kelvin, filtering.shortest_baseline if filtering else None,
                                                 filtering.correct if filtering else True)
        content = _content_path(title, panels, notes, cache) if cache is not None else None
        if content is not None:
            used.add(content)
            if content.is_file():
                figure = content.read_bytes()
                if keyed is not None:
                    _keep(keyed, figure)
                entries.append((cube.cube_id, images[cube.cube_id], caption, figure))
                continue
        pending.append((len(entries), (title, panels, notes), [p for p in (keyed, content) if p is not None]))
        entries.append((cube.cube_id, images[cube.cube_id], caption, None))
    for (k, _, paths), figure in zip(pending, _draw_all([f for _, f, _ in pending], workers)):
        for path in paths:
            _keep(path, figure)
        entries[k] = (*entries[k][:3], figure)
    if cache is not None and cache.is_dir():
        for stale in set(cache.glob("*.png")) - used:
            stale.unlink()
    return cube_images_html(entries)
