"""Figures of each cube: the integrated-line (or band) and continuum images with the target's predicted position,
the apertures and the beam drawn on them; and the report's HTML for them.

The images and their geometry are computed in :mod:`pipeline.spectra.cube_images`; this module only draws.
"""

from __future__ import annotations

import base64
import html

import astropy.units as u
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.patches import Circle, Ellipse  # noqa: E402

from pipeline.spectra.cube_images import ImageFrame, SkyImage  # noqa: E402

__all__ = ["plot_cube_images", "unit_label", "cube_images_html", "CUBE_IMAGE_CLASS", "CUBE_SPECTRA_CLASS"]

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
                           (u.W / u.m**2, "W m$^{{-2}}${p}")):
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


def cube_images_html(entries: list[tuple[str, bytes, str, bytes | None]]) -> str:
    """The report's "Cubes" section: per cube, its image (class :data:`CUBE_IMAGE_CLASS`) and its spectra figure.

    ``entries`` are (cube id, image PNG, caption, spectra PNG or None), in the campaign's cube order.
    """
    parts = ["<p>Per cube: the integrated line of each configured species (millimetre) or the continuum-subtracted "
             "band (infrared) over its integration window, and the continuum, with the target's predicted position "
             "(red cross), the apertures (orange circles), the beam (grey ellipse) and north/east. Contours: 3, 5, "
             "8, 13… × the image rms (dashed: −3, −5). Below each, the aperture spectra of that cube in its own "
             "units with the model at the quoted production rate or at the upper limit.</p>"]
    for cube_id, png, caption, spectra in entries:
        data = base64.b64encode(png).decode("ascii")
        name = html.escape(cube_id)
        parts.append(f'<figure id="cube-{name}"><img class="{CUBE_IMAGE_CLASS}" src="data:image/png;base64,{data}" '
                     f'alt="integrated-line and continuum images of cube {name}" style="max-width:100%">'
                     f"<figcaption>{html.escape(caption)}</figcaption></figure>")
        if spectra is not None:
            sdata = base64.b64encode(spectra).decode("ascii")
            parts.append(f'<figure><img class="{CUBE_SPECTRA_CLASS}" src="data:image/png;base64,{sdata}" '
                         f'alt="aperture spectra of cube {name}" style="max-width:100%"></figure>')
    return "".join(parts)
