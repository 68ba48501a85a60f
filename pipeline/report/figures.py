"""Figures of the report: stacked spectra, the mass budget and the temperature sweep (matplotlib, PNG)."""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

__all__ = ["SpectrumPanel", "BandPanel", "plot_band_spectra", "plot_stacked_spectra", "plot_mass_budget", "plot_temperature_sweep", "plot_rotational_diagrams", "to_png"]


class SpectrumPanel:
    """What one panel of the stacked-spectra figure shows.

    Besides the stack and its model: ``title`` (which instrument carries a combined result), ``own_model`` and
    ``own_label`` (the model at the millimetre lines' own limit, where other instruments enter the combined one),
    ``estimates`` (label, Q, σ_Q of each instrument) and ``combined`` (Q, σ_Q, Q upper, detected) for the side
    panel that shows what the quoted value rests on.
    """

    def __init__(self, species: str, velocity: np.ndarray, density: np.ndarray, window: float,
                 model: np.ndarray, label: str, detected: bool):
        self.species, self.velocity, self.density = species, velocity, density
        self.window, self.model, self.label, self.detected = window, model, label, detected
        self.title: str | None = None
        self.own_model: np.ndarray | None = None
        self.own_label = ""
        self.estimates: list[tuple[str, float, float]] = []
        self.combined: tuple[float, float, float, bool] | None = None


class BandPanel:
    """One infrared cube's aperture spectrum with its fitted continua and band windows (rest wavelength, um)."""

    def __init__(self, title: str, wavelength: np.ndarray, flux: np.ndarray, sigma: np.ndarray,
                 continua: list[np.ndarray], windows: list[tuple[str, float, float]]):
        self.title, self.wavelength, self.flux, self.sigma = title, wavelength, flux, sigma
        self.continua, self.windows = continua, windows


def plot_band_spectra(panels: list[BandPanel], afrho: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] | None = None,
                      afrho_label: str = ""):
    """One panel per infrared cube: F_lambda in the smallest aperture, continuum fits, band windows shaded.

    ``afrho`` (epoch -> wavelengths [um], Afrho and its error [cm]) adds a last panel: the dust's Afrho against
    wavelength, whose slope is the dust colour.
    """
    n = max(1, len(panels)) + (1 if afrho else 0)
    fig, axes = plt.subplots(n, 1, figsize=(7.5, 2.4 * n), squeeze=False)
    if afrho:
        ax = axes[-1, 0]
        for epoch, (lam, val, err) in sorted(afrho.items()):
            ax.errorbar(lam, val, yerr=err, fmt="o-", ms=4, lw=1, capsize=2, label=f"epoch {epoch}")
        ax.set_ylabel("Afρ [cm]", fontsize=8)
        ax.set_title(f"dust continuum: Afρ against wavelength {afrho_label}".strip(), fontsize=8)
        ax.legend(fontsize=7, loc="best", framealpha=0.8)
        ax.set_xlabel("wavelength [µm]")
    if not panels:
        axes[0, 0].text(0.5, 0.5, "no infrared cube in this campaign", ha="center", va="center")
        axes[0, 0].set_axis_off()
    for ax, p in zip(axes[:, 0], panels):
        scale = 10.0 ** np.floor(np.log10(np.nanmax(np.abs(p.flux)) or 1.0))
        ax.fill_between(p.wavelength, (p.flux - p.sigma) / scale, (p.flux + p.sigma) / scale, step="mid",
                        color="0.8", lw=0, label="±1σ (ERR)")
        ax.step(p.wavelength, p.flux / scale, where="mid", color="0.15", lw=0.8, label="aperture spectrum")
        for k, c in enumerate(p.continua):
            ax.plot(p.wavelength, c / scale, color="tab:green", lw=1.2, label="continuum fit" if k == 0 else None)
        for k, (name, lo, hi) in enumerate(p.windows):
            ax.axvspan(lo, hi, color="tab:blue", alpha=0.12, label="band windows" if k == 0 else None)
            ax.text(0.5 * (lo + hi), 0.95, name, transform=ax.get_xaxis_transform(), ha="center", va="top",
                    fontsize=7)
        ax.set_ylabel(f"F$_\\lambda$ [10$^{{{int(np.log10(scale))}}}$ W m$^{{-2}}$ µm$^{{-1}}$]", fontsize=8)
        ax.set_title(p.title, fontsize=8)
        ax.legend(fontsize=6, loc="best", framealpha=0.8)
    axes[len(panels) - 1 if panels else 0, 0].set_xlabel("wavelength in the target's rest frame [µm]")
    fig.tight_layout()
    return fig


def to_png(fig) -> bytes:
    """Render a figure to PNG bytes (fixed metadata, so identical figures give identical bytes)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()


def _estimates_axis(ax, p: SpectrumPanel) -> None:
    """The side panel: each instrument's Q ± σ, the combined Q ± σ and the quoted limit, on one Q axis."""
    rows = list(p.estimates)
    if p.combined is not None:
        rows.append(("combined (quoted)", p.combined[0], p.combined[1]))
    y = np.arange(len(rows))[::-1]
    for k, (label, q, s) in enumerate(rows):
        ax.errorbar([q], [y[k]], xerr=[s], fmt="o", ms=4, capsize=3,
                    color="0.15" if label.startswith("combined") else "tab:blue")
    if p.combined is not None:
        q, s, q_up, detected = p.combined
        if not detected:
            ax.plot([q_up], [y[-1]], marker=8, ms=9, color="tab:orange", ls="none")   # caret left: "below this"
            ax.annotate("limit", (q_up, y[-1]), xytext=(0, 7), textcoords="offset points", fontsize=6,
                        ha="center", color="tab:orange")
    ax.axvline(0, color="0.6", lw=0.6)
    ends = [v for _, q, s in rows for v in (q - s, q + s)] + ([p.combined[2]] if p.combined is not None else []) + [0.0]
    lo, hi = min(ends), max(ends)
    ax.set_xlim(lo - 0.12 * (hi - lo or 1.0), hi + 0.12 * (hi - lo or 1.0))
    ax.set_yticks(y)
    ax.set_yticklabels([r[0] for r in rows], fontsize=6)
    ax.set_ylim(-0.7, len(rows) - 0.3)
    ax.tick_params(axis="x", labelsize=6)
    ax.xaxis.get_offset_text().set_fontsize(6)
    ax.set_xlabel("Q ± 1σ [s$^{-1}$]", fontsize=7)


def plot_stacked_spectra(panels: list[SpectrumPanel]):
    """One row per species: Q-density spectrum, window shaded, model at Q or at the limit; beside it what the
    quoted value rests on (each instrument's Q ± σ and the combination)."""
    n = max(1, len(panels))
    fig, axes = plt.subplots(n, 2, figsize=(9.5, 2.6 * n), squeeze=False, gridspec_kw={"width_ratios": [3.2, 1]})
    for (ax, side), p in zip(axes, panels):
        lim = 6 * max(p.window, 1.0)
        seen = [c[np.abs(p.velocity) <= lim] for c in (p.density, p.model, p.own_model) if c is not None]
        top = max(float(np.nanmax(np.abs(c))) for c in seen) or 1.0
        scale = 10.0 ** np.floor(np.log10(top))
        ax.step(p.velocity, p.density / scale, where="mid", color="0.2", lw=1, label="stack (millimetre lines)")
        ax.axvspan(-p.window, p.window, color="tab:blue", alpha=0.12, label="integration window")
        ax.plot(p.velocity, p.model / scale, color="tab:red" if p.detected else "tab:orange", lw=1.5,
                label=p.label)
        if p.own_model is not None:
            ax.plot(p.velocity, p.own_model / scale, color="tab:orange", lw=1.2, ls="--", label=p.own_label)
        ax.axhline(0, color="0.6", lw=0.6)
        ax.set_ylabel(f"{p.species}\nQ density\n[10$^{{{int(np.log10(scale))}}}$ s$^{{-1}}$/(km/s)]", fontsize=8)
        ax.set_xlim(-lim, lim)
        lo, hi = (min(float(np.nanmin(c)) for c in seen) / scale, max(float(np.nanmax(c)) for c in seen) / scale)
        pad = 0.08 * (hi - lo or 1.0)
        ax.set_ylim(lo - pad, hi + 0.6 * (hi - lo) + pad)           # headroom for the legend
        ax.legend(fontsize=6.5, loc="upper left", frameon=False, ncol=2)
        if p.title:
            ax.set_title(p.title, fontsize=8, loc="left")
        if p.estimates or p.combined is not None:
            _estimates_axis(side, p)
        else:
            side.set_axis_off()
    for side in axes[len(panels):, 1]:
        side.set_axis_off()
    axes[-1, 0].set_xlabel("velocity in the target's rest frame [km/s]")
    fig.tight_layout()
    return fig


def plot_mass_budget(mass: np.ndarray, required: np.ndarray, required_band: tuple[np.ndarray, np.ndarray],
                     allowed: dict[str, float], mass_range: tuple[float, float]):
    """Required mass-loss rate against nucleus mass, with each species' allowed mass-loss rate."""
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    ax.fill_between(mass, required_band[0], required_band[1], color="0.85", label="required (±1σ in a)")
    ax.loglog(mass, required, color="k", lw=2, label="required by the push")
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for i, (name, mdot) in enumerate(sorted(allowed.items())):
        ax.axhline(mdot, color=colours[i % len(colours)], ls="--", lw=1.5, label=f"{name} limit allows")
    ax.axvspan(*mass_range, color="tab:green", alpha=0.07, label="nucleus mass range")
    ax.set_xlabel("nucleus mass [kg]")
    ax.set_ylabel("gas mass-loss rate [kg/s]")
    ax.legend(fontsize=7, loc="upper left", frameon=False)
    ax.grid(True, which="major", alpha=0.3)
    fig.tight_layout()
    return fig


def plot_temperature_sweep(curves: dict[str, tuple[np.ndarray, np.ndarray, int]]):
    """Upper limit against kinetic temperature per species; the conservative point is circled."""
    fig, ax = plt.subplots(figsize=(7.5, 3.6))
    for name, (t, q_up, best) in sorted(curves.items()):
        line, = ax.semilogy(t, q_up, marker="o", ms=4, label=name)
        ax.plot(t[best], q_up[best], "o", ms=11, mfc="none", color=line.get_color())
    ax.set_xlabel("kinetic temperature [K]")
    ax.set_ylabel("Q upper limit [s$^{-1}$]")
    ax.legend(fontsize=8, frameon=False)
    ax.grid(True, alpha=0.3)
    fig.tight_layout()
    return fig


def plot_rotational_diagrams(diagrams: dict[str, dict]):
    """Population diagrams: ln(W / (g_u A_ul)) against E_u per species, with the fitted temperature's line.

    ``diagrams`` maps a species to ``e_up`` [K], ``y``, ``y_err`` (per measured line and cube), ``t_kin`` [K],
    its interval ``t_lo``, ``t_hi`` and ``intercept`` (of the line y = intercept - E_u / T).
    """
    n = max(len(diagrams), 1)
    fig, axes = plt.subplots(1, n, figsize=(4.2 * n, 3.4), squeeze=False)
    for ax, (name, d) in zip(axes[0], sorted(diagrams.items())):
        ax.errorbar(d["e_up"], d["y"], yerr=d["y_err"], fmt="o", ms=4, capsize=2, color="0.2", label="lines")
        e = np.linspace(0.0, max(d["e_up"]) * 1.1, 50)
        ax.plot(e, d["intercept"] - e / d["t_kin"], color="C3",
                label=f"T = {d['t_kin']:.0f} K ({d['t_lo']:.0f}–{d['t_hi']:.0f})")
        ax.set_title(name, fontsize=10)
        ax.set_xlabel("upper-level energy E$_u$ [K]")
        ax.set_ylabel("ln(W / (g$_u$ A$_{ul}$)) + const")
        ax.legend(fontsize=8, frameon=False)
        ax.grid(True, alpha=0.3)
    fig.tight_layout()
    return fig
