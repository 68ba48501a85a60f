"""Figures of each cube: the integrated-line (or band) and continuum images with the target's predicted position,
the apertures and the beam drawn on them, and the aperture spectra with the model at the quoted Q or limit.

The images and their geometry are computed in :mod:`pipeline.spectra.cube_images`, the spectra's panels in
:mod:`pipeline.report.cube_spectra`; this module only draws (the cube job draws the images, the report the spectra:
:mod:`pipeline.report.cubes_section`). It imports no more than drawing needs.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import astropy.units as u
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.patches import Circle, Ellipse  # noqa: E402

if TYPE_CHECKING:
    from pipeline.report.cube_spectra import SpectrumPanel
    from pipeline.spectra.cube_images import ImageFrame, SkyImage

__all__ = ["plot_cube_images", "plot_cube_spectra", "unit_label"]

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


def _extent(frame: "ImageFrame") -> list[float]:
    ny, nx = frame.shape
    s = frame.pixel_scale.to_value(u.arcsec)
    x0, y0 = frame.target
    return [(-0.5 - x0) * s, (nx - 0.5 - x0) * s, (-0.5 - y0) * s, (ny - 0.5 - y0) * s]


def _panel(ax, fig, frame: "ImageFrame", image: "SkyImage", stats: dict[str, float] | None) -> None:
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


def plot_cube_images(title: str, frame: "ImageFrame", images: "list[SkyImage]",
                     stats: list[dict[str, float] | None]):
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


def plot_cube_spectra(title: str, panels: "list[SpectrumPanel]", notes: list[str]):
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
