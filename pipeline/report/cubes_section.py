"""The report's "Cubes" section: each cube's image (drawn by its cube job) and its aperture spectra with the model
at the quoted Q or limit (drawn here, since it needs the campaign's limits), with a cache of the spectra figures.
"""

from __future__ import annotations

import base64
import hashlib
import html
import logging
import pickle
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import astropy.units as u
import matplotlib
import numpy as np
from astropy.table import QTable

from pipeline.io.cubes import read_cube_info
from pipeline.io.products import BandMeasurements, LineSpectra
from pipeline.report.cube_figures import plot_cube_spectra
from pipeline.report.cube_spectra import SpectrumPanel, band_spectrum_panels, line_spectrum_panels
from pipeline.processes import Running, start_in_processes
from pipeline.report.figures import to_png

if TYPE_CHECKING:
    from pipeline.settings import Settings

log = logging.getLogger(__name__)

__all__ = ["cube_images_html", "cubes_section", "CubeSection", "CUBE_IMAGE_CLASS", "CUBE_SPECTRA_CLASS"]

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
    """One cube's spectra figure as PNG bytes."""
    return to_png(plot_cube_spectra(*figure))


@dataclass(frozen=True)
class _FigureWork:
    """What one cube's spectra figure is made from, when it is not read back by its input digest: the cube's
    spectra (paths to read, or read already) or bands, the limits, and what the panels need."""

    cube: Any
    title: str
    spectra: list
    measured: Any
    limits: QTable
    catalogue: Any
    coma: Any
    filtering: Any
    cache: Path | None


def _make(work: _FigureWork) -> tuple[bytes, Path | None, bool]:
    """One cube's spectra figure (PNG bytes), the cache path of its drawn content (None without a cache) and
    whether it was drawn: read from the cache when a figure of the same content is there, drawn otherwise. Run
    on the worker processes."""
    spectra = [s if isinstance(s, LineSpectra) else LineSpectra.from_fits(s) for s in work.spectra]
    measured = work.measured
    if isinstance(measured, (str, Path)):
        measured = BandMeasurements.from_fits(measured)
    if measured is not None:
        panels, notes = band_spectrum_panels(measured, work.limits, work.catalogue)
    else:
        kelvin = read_cube_info(work.cube.path, work.cube.beam_arcsec).bunit.is_equivalent(u.K)
        filtering = work.filtering
        panels, notes = line_spectrum_panels(spectra, work.limits, work.catalogue, work.coma, kelvin,
                                             filtering.shortest_baseline if filtering else None,
                                             filtering.correct if filtering else True)
    content = _content_path(work.title, panels, notes, work.cache) if work.cache is not None else None
    if content is not None and content.is_file():
        return content.read_bytes(), content, False
    return _draw((work.title, panels, notes)), content, True


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


def _drawn_species(spectra_files: list[Path], bands: bool, species_of_line: dict[str, str],
                   band_species: set[str]) -> set[str] | None:
    """The species whose quoted rows a cube's spectra figure can draw: those of its spectra files' lines (named
    ``<line>.fits``; ``species_of_line`` maps the catalogue's line ids to their species) and, with a bands file,
    ``band_species`` (those of every catalogue band). None when a spectra file names no catalogue line (then
    every row of the epoch is taken)."""
    if any(path.stem not in species_of_line for path in spectra_files):
        return None
    species = {species_of_line[path.stem] for path in spectra_files}
    if bands:
        species.update(band_species)
    return species


def _input_key(settings: "Settings", cube, title: str, files: list[Path], limits: QTable,
               species: set[str] | None) -> str:
    """A digest of everything one cube's spectra figure is drawn from: the code and matplotlib versions, the
    settings (the cube's own entry and every section but the list of cubes), the bytes of the cube's spectra or
    bands files, the cube file's size and modification time (its unit), and the quoted rows of its epoch in
    ``limits`` of the ``species`` it can draw (all species when None: a figure draws the rows of its own
    species only, so another species' new Q leaves it as it was). Equal digests give the same figure, so it
    can be read back without reading the spectra."""
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
    keep = (np.asarray(limits["epoch"], dtype=str) == cube.epoch) & np.asarray(limits["adopted"], dtype=bool)
    if species is not None:
        keep &= np.isin(np.asarray(limits["species"], dtype=str), sorted(species))
    rows = limits[keep]
    for row in rows:
        digest.update(repr(tuple(str(row[c]) for c in rows.colnames)).encode())
    return digest.hexdigest()


class CubeSection:
    """The report's "Cubes" section being made: each cube's image (made by its cube job, read from
    ``image_paths``, named ``<cube>.png``) and its spectra figure, drawn here because it needs the campaign's
    limits.

    ``settings`` is the run's :class:`pipeline.settings.Settings`; ``spectra_paths`` the extract step's files,
    ``bands_paths`` the bands files (each names its cube); ``limits`` the limits table (its ``adopted`` rows).
    With ``cache`` (a folder), a cube's spectra figure drawn by an earlier report from the same inputs (the
    digest of :func:`_input_key`: a new epoch leaves the earlier epochs' files and quoted rows as they were) is
    read back without reading its spectra; failing that, one whose drawn content has not changed (same title,
    panels, notes and code) is read back instead of drawn again. The folder keeps only this report's figures.

    Made in two steps, so that the figures can be drawn while the caller does other work: :meth:`start` makes
    the figures not read back by their inputs (spectra read, panels built, drawn or read back by their content)
    on child processes; :meth:`html` waits for them, keeps them in the cache and returns the section (the
    log says how many were read back and how many drawn).
    """

    def __init__(self, settings: "Settings", image_paths: list[str], spectra_paths: list[str],
                 bands_paths: list[str], limits: QTable, cache: str | Path | None = None) -> None:
        cache = None if cache is None else Path(cache)
        self._cache = cache
        self._used: set[Path] = set()
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
        species_of_line = {ln.line_id: ln.species for ln in catalogue.lines}       # once, for every cube's key
        band_species = {b.species for b in catalogue.bands}
        self._entries: list[tuple[str, bytes, str, bytes | None]] = []
        self._pending: list[tuple[int, Path | None, _FigureWork]] = []   # (entry, keyed cache path, what to make)
        for cube in settings.cubes:
            if cube.cube_id not in images:
                continue
            title = f"{cube.cube_id}  ·  epoch {cube.epoch}  ·  aperture spectra"
            caption = (f"Cube {cube.cube_id} (epoch {cube.epoch}): images of the integration window around the "
                       "target's predicted position.")
            keyed = None
            if by_cube is not None:
                files = by_cube[cube.cube_id] + ([bands_files[cube.cube_id]] if cube.cube_id in bands_files else [])
                species = _drawn_species(by_cube[cube.cube_id], cube.cube_id in bands_files, species_of_line,
                                         band_species)
                keyed = cache / f"in-{_input_key(settings, cube, title, files, limits, species)}.png"
                self._used.add(keyed)
                if keyed.is_file():
                    self._entries.append((cube.cube_id, images[cube.cube_id], caption, keyed.read_bytes()))
                    continue
                spectra, measured = by_cube[cube.cube_id], bands_files.get(cube.cube_id)
            else:
                spectra, measured = read.get(cube.cube_id, []), bands.get(cube.cube_id)
            self._pending.append((len(self._entries), keyed, _FigureWork(
                cube, title, spectra, measured, limits, catalogue, settings.coma, settings.interferometer, cache)))
            self._entries.append((cube.cube_id, images[cube.cube_id], caption, None))
        self._running: Running | None = None

    def start(self, children: int = 0) -> "CubeSection":
        """Start making the figures not read back by their inputs on ``children`` processes beside this one, and
        return at once (with 0, :meth:`html` makes them here)."""
        if self._running is None:
            self._running = start_in_processes(_make, [work for _, _, work in self._pending], children)
        return self

    def close(self) -> None:
        """Stop the figures being made (a step after :meth:`start` failed)."""
        if self._running is not None:
            self._running.close()

    def html(self) -> str:
        """The section's HTML, once every figure is made (made here, in turn, if :meth:`start` was not called)."""
        made = self.start(0)._running.results()
        entries = list(self._entries)
        for (k, keyed, _), (figure, content, _) in zip(self._pending, made):
            for path in (keyed, content):
                if path is not None:
                    self._used.add(path)
                    if not path.is_file():
                        _keep(path, figure)
            entries[k] = (*entries[k][:3], figure)
        drawn = sum(d for _, _, d in made)
        log.info("cube spectra figures: %d of %d read back by their inputs, %d by their drawn content, %d drawn",
                 len(entries) - len(self._pending), len(entries), len(self._pending) - drawn, drawn)
        if self._cache is not None and self._cache.is_dir():
            for stale in set(self._cache.glob("*.png")) - self._used:
                stale.unlink()
        return cube_images_html(entries)


def cubes_section(settings: "Settings", image_paths: list[str], spectra_paths: list[str], bands_paths: list[str],
                  limits: QTable, cache: str | Path | None = None, workers: int = 1) -> str:
    """The report's "Cubes" section (:class:`CubeSection`), its figures made on ``workers`` processes (this one
    waiting) or, with ``workers`` 1, here."""
    return CubeSection(settings, image_paths, spectra_paths, bands_paths, limits, cache).start(
        workers if workers > 1 else 0).html()
