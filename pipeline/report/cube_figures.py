"""Figures of each cube: the integrated-line (or band) and continuum images with the target's predicted position,
the apertures and the beam drawn on them; and the report's HTML for them.

The images and their geometry are computed in :mod:`pipeline.spectra.cube_images`; this module only draws.
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

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from astropy.table import QTable  # noqa: E402
from matplotlib.patches import Circle, Ellipse  # noqa: E402

from pipeline.io.cubes import read_cube_info  # noqa: E402
from pipeline.io.products import BandMeasurements, LineSpectra  # noqa: E402
from pipeline.report.cube_spectra import SpectrumPanel, band_spectrum_panels, line_spectrum_panels  # noqa: E402
from pipeline.report.figures import to_png  # noqa: E402
from pipeline.spectra.cube_images import ImageFrame, SkyImage  # noqa: E402

if TYPE_CHECKING:
    from pipeline.settings import Settings

__all__ = ["plot_cube_images", "plot_cube_spectra", "unit_label", "cube_images_html", "cubes_section",
           "CUBE_IMAGE_CLASS", "CUBE_SPECTRA_CLASS"]

#: HTML class of each cube's image in the report (the browser check counts them).
CUBE_IMAGE_CLASS = "cube-image"
#: HTML class of each cube's spectra figure in the report.
CUBE_SPECTRA_CLASS = "cube-spectra"
_PER_ROW = 3


def unit_label(unit: u.UnitBase) -> str:
    """A unit as an observer writes it: 'Jy/beam km/s', 'W m^-2 sr^-1', 'MJy/sr'."""
    unit = u.Unit(unit)
    for per, text in ((u.beam, "/beam"), (u.pix, "/pixel"), (u.sr, "/sr")):
        rest = unit * per
        for base, name in ((u.Jy * u.km / u.s, "Jy{p} km/s"), (u.mJy * u.km / u.s, "mJy{p} km/s"),
                           (u.K * u.km / u.s, "K km/s"), (u.Jy, "Jy{p}"), (u.mJy, "mJy{p}"), (u.MJy, "MJy{p}"),
                           (u.W / u.m**2, "W m$^{{-2}}${p}"), (u.W / u.m**2 / u.um, "W m$^{{-2}}$ µm$^{{-1}}${p}")):
            if rest == base or (rest.is_equivalent(base) and np.isclose(rest.to(base), 1.0)):
                return name.format(p=text)
    if unit.is_equivalent(u.K * u.km / u.s):
        return "K km/s"
    if unit == u.K:
        return "K"
    return unit.to_string()


def _extent(frame: ImageFrame) -> list[float]:
    ny, nx = frame.shape
    s = frame.pixel_scale.to_value(u.arcsec)
    x0, y0 = frame.target
    return [(-0.5 - x0) * s, (nx - 0.5 - x0) * s, (-0.5 - y0) * s, (ny - 0.5 - y0) * s]


def _panel(ax, fig, frame: ImageFrame, image: SkyImage, stats: dict[str, float] | None) -> None:
    s = frame.pixel_scale.to_value(u.arcsec)
    if image.data is None:
        ax.text(0.5, 0.5, f"{image.name}\nno image: {image.note}", ha="center", va="center", fontsize=8,
                wrap=True, transform=ax.transAxes)
        ax.set_xticks([])
        ax.set_yticks([])
        return
    values = np.asarray(image.data.value, dtype=float)
    noise = stats["noise"] if stats else float("nan")
    biggest = np.nanmax(np.abs(values)) if np.isfinite(values).any() else 1.0
    power = int(np.floor(np.log10(biggest))) if biggest > 0 else 0
    power = power if abs(power) >= 3 else 0                   # shown in the colour bar's label, not as an offset
    values = values / 10.0**power
    noise = noise / 10.0**power
    finite = values[np.isfinite(values)]
    lo, hi = (np.percentile(finite, [1, 99.7]) if finite.size else (0.0, 1.0))
    if np.isfinite(noise) and noise > 0:
        lo, hi = min(lo, -3 * noise), max(hi, 5 * noise)
    im = ax.imshow(values, origin="lower", cmap="viridis", vmin=lo, vmax=hi, extent=_extent(frame),
                   interpolation="nearest")
    bar = fig.colorbar(im, ax=ax, fraction=0.046, pad=0.03)
    bar.set_label((f"10$^{{{power}}}$ " if power else "") + unit_label(image.data.unit), fontsize=7)
    bar.ax.tick_params(labelsize=6)
    if np.isfinite(noise) and noise > 0 and finite.size:
        levels = [k * noise for k in (3, 5, 8, 13, 21, 34, 55, 89) if k * noise < finite.max()]
        neg = [-k * noise for k in (5, 3) if -k * noise > finite.min()]
        ny, nx = values.shape
        xs = (np.arange(nx) - frame.target[0]) * s
        ys = (np.arange(ny) - frame.target[1]) * s
        if levels:
            ax.contour(xs, ys, values, levels=levels, colors="white", linewidths=0.7)
        if neg:
            ax.contour(xs, ys, values, levels=neg, colors="white", linewidths=0.7, linestyles="dashed")
    for r, label in zip(frame.radii_pix, frame.aperture_labels):
        ax.add_patch(Circle((0.0, 0.0), r * s, fill=False, ec="tab:orange", lw=1.1, ls="--"))
        ax.text(0.0, r * s, label, color="tab:orange", fontsize=6.5, ha="center", va="bottom")
    ax.plot([0.0], [0.0], marker="+", ms=14, mew=1.6, color="tab:red", label="predicted position")
    xmin, xmax, ymin, ymax = _extent(frame)
    if frame.beam is not None:
        b = frame.beam
        cx = xmin + 0.12 * (xmax - xmin)
        cy = ymin + 0.12 * (ymax - ymin)
        ax.add_patch(Ellipse((cx, cy), b.width_pix * s, b.height_pix * s, angle=b.angle_deg, fc="0.85", ec="k",
                             lw=0.8))
    # compass: north and east arrows in the upper-left corner
    ox, oy = xmin + 0.2 * (xmax - xmin), ymax - 0.2 * (ymax - ymin)
    length = 0.09 * (xmax - xmin)
    for (dx, dy), name in ((frame.north, "N"), (frame.east, "E")):
        ax.annotate("", xy=(ox + dx * length, oy + dy * length), xytext=(ox, oy),
                    arrowprops={"arrowstyle": "->", "color": "white", "lw": 1.0})
        ax.text(ox + dx * length * 1.35, oy + dy * length * 1.35, name, color="white", fontsize=7, ha="center",
                va="center")
    title = image.name if image.kind != "line" else f"{image.name} integrated line"
    if image.kind == "continuum":
        title = "continuum"
    ax.set_title(f"{title}\n{image.detail}", fontsize=8)
    if stats:
        ax.text(0.98, 0.02, f"rms {noise:.2g}\npeak {stats['snr']:.1f}σ at {stats['offset_arcsec']:.1f}″",
                transform=ax.transAxes, ha="right", va="bottom", fontsize=6.5, color="white",
                bbox={"fc": "black", "alpha": 0.4, "lw": 0, "pad": 1.5})
    ax.set_xlabel("offset along pixel x [arcsec]", fontsize=7)
    ax.set_ylabel("offset along pixel y [arcsec]", fontsize=7)
    ax.tick_params(labelsize=6.5)


def plot_cube_images(title: str, frame: ImageFrame, images: list[SkyImage], stats: list[dict[str, float] | None]):
    """One row (or a few) of panels: each integrated line or band, then the continuum.

    On every panel: the image (colour, with contours at 3, 5, 8, 13, ... times its rms and dashed at -3, -5),
    the target's predicted position (red cross, at offset 0, 0), the apertures (orange dashed circles), the beam
    (grey ellipse, lower left) and the directions of north and east (arrows, upper left).
    """
    n = max(1, len(images))
    cols = min(n, _PER_ROW)
    rows = int(np.ceil(n / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(3.7 * cols, 3.5 * rows + 0.5), squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k >= len(images):
            ax.set_axis_off()
            continue
        _panel(ax, fig, frame, images[k], stats[k])
    fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return fig


def plot_cube_spectra(title: str, panels: list[SpectrumPanel], notes: list[str]):
    """The cube's aperture spectra, one panel per line or band: the spectrum (black) with its ±1σ channel noise
    (grey), the integration window (blue), the fitted continuum (green, infrared) and the model at the quoted Q
    (red) or at the upper limit (orange); each panel's title says which, at what temperature and aperture.

    Millimetre panels show ±8 window half-widths around the line (at least ±10 km/s), or what the spectrum has.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    n = max(1, len(panels))
    cols = min(n, _PER_ROW)
    rows = int(np.ceil(n / cols))
    legend_rows = {1: 3, 2: 2}.get(cols, 1)
    bottom_in = 0.2 * legend_rows + 0.13 * len(notes) + 0.1          # legend and notes below the panels [inch]
    height = 2.7 * rows + 0.35 + bottom_in
    fig, axes = plt.subplots(rows, cols, figsize=(max(3.9 * cols, 5.0), height), squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k >= len(panels):
            ax.set_axis_off()
            if not panels and k == 0:
                ax.text(0.5, 0.5, "no spectrum of a configured species in this cube", ha="center", va="center",
                        fontsize=8, transform=ax.transAxes)
            continue
        p = panels[k]
        ax.axvspan(*p.window, color="tab:blue", alpha=0.12, lw=0)
        sigma = np.broadcast_to(p.sigma, p.flux.shape)
        base = p.continuum if p.continuum is not None else np.zeros_like(p.flux)
        ax.fill_between(p.x, base - sigma, base + sigma, step="mid", color="0.85", lw=0)
        ax.step(p.x, p.flux, where="mid", color="0.1", lw=0.7)
        if p.continuum is not None:
            ax.plot(p.x, p.continuum, color="tab:green", lw=1.0)
        if p.model is not None:
            colour = "tab:red" if p.model_label.startswith("model at Q") else "tab:orange"
            ax.plot(p.x, p.model, color=colour, lw=1.3)
        if p.x_label.startswith("velocity"):
            half = max(8 * (p.window[1] - p.window[0]) / 2, 10.0)
            centre = 0.5 * (p.window[0] + p.window[1])
            ax.set_xlim(max(np.min(p.x), centre - half), min(np.max(p.x), centre + half))
        ax.set_title(f"{p.title}\n{p.model_label}", fontsize=7.5)
        ax.set_xlabel(p.x_label, fontsize=7)
        ax.set_ylabel(p.y_label, fontsize=7)
        ax.tick_params(labelsize=6.5)
    handles = [Line2D([], [], color="0.1", lw=0.8, label="aperture spectrum"),
               Patch(color="0.85", label="±1σ per channel"), Patch(color="tab:blue", alpha=0.12,
                                                                   label="integration window"),
               Line2D([], [], color="tab:red", lw=1.3, label="model at the quoted Q (detection)"),
               Line2D([], [], color="tab:orange", lw=1.3, label="model at the upper limit")]
    if any(p.continuum is not None for p in panels):
        handles.append(Line2D([], [], color="tab:green", lw=1.0, label="continuum fit"))
    fig.suptitle(title, fontsize=9)
    fig.legend(handles=handles, loc="lower center", ncol=int(np.ceil(len(handles) / legend_rows)), fontsize=6.5,
               frameon=False, bbox_to_anchor=(0.5, (0.13 * len(notes) + 0.05) / height))
    if notes:
        fig.text(0.01, 0.03 / height, "\n".join(notes), fontsize=6.5, va="bottom", ha="left", color="0.3")
    _fixed_layout(fig, rows, cols, bottom_in)
    return fig


def _fixed_layout(fig, rows: int, cols: int, bottom_in: float) -> None:
    """Margins in inches for the panel grid (two-line panel titles, axis labels, the suptitle, the legend and
    notes below), set directly: the figure's text sizes are fixed, and measuring them (tight_layout) took a third
    of the drawing time of each cube's figure."""
    width, height = fig.get_size_inches()
    left, right, gap_x = 0.62, 0.12, 0.62                   # y label and ticks; the right edge; between columns
    top, gap_y, bottom = 0.66, 0.78, bottom_in + 0.42       # suptitle and panel title; between rows; x label
    axis_w = (width - left - right - (cols - 1) * gap_x) / cols
    axis_h = (height - top - bottom - (rows - 1) * gap_y) / rows
    fig.subplots_adjust(left=left / width, right=1 - right / width, bottom=bottom / height, top=1 - top / height,
                        wspace=gap_x / axis_w, hspace=gap_y / axis_h)


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
