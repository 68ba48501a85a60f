"""The campaign figure: each driver's production rate per epoch against the rate the push demands, and the tracers'.

Left, one panel per species: the quoted Q per epoch (limits.ecsv's ``adopted`` rows, smallest aperture)
against time -- detections as points with 1σ bars, upper limits as downward arrows, the all-epochs value as a
dotted line -- with the epochs' heliocentric distances on the top axis and, for drivers, the band of Q the push
demands between the lightest and the heaviest nucleus: the budget's per-epoch values (budget.ecsv) as bars and,
where the demand can be followed between epochs (no dust term), a band evaluated along the observed r_h(t).
Right (drivers): the joint test's exclusion significance against nucleus mass (exclusion.ecsv).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import astropy.units as u
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import matplotlib.ticker  # noqa: E402
import numpy as np  # noqa: E402
from astropy.table import QTable  # noqa: E402
from astropy.time import Time  # noqa: E402

from pipeline.budget.momentum import required_mass_loss_rate, required_production_rate  # noqa: E402
from pipeline.budget.table import BudgetAssumptions, acceleration_at, ejection_speed_at  # noqa: E402
from pipeline.offline import future_time_tolerated  # noqa: E402
from pipeline.report.verdicts import COLOURS, conditions_text, short_label  # noqa: E402

if TYPE_CHECKING:
    from pipeline.settings import Settings

__all__ = ["EpochTimes", "EpochPoint", "SpeciesSeries", "epoch_times", "species_series", "demand_curve",
           "exclusion_curves", "driver_series", "plot_campaign", "plot_note", "CampaignFigures", "campaign_figures", "campaign_caption", "campaign_alt", "IMG_ID"]

#: the id of the campaign figure's <img> (tools/check_report.py looks for it)
IMG_ID = "campaign-figure"

#: exclusion significances above this are drawn along the panel's top edge
SIGNIFICANCE_CAP = 8.0

_SPECIES_COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:purple", "tab:brown", "tab:pink", "tab:olive")


@dataclass(frozen=True)
class EpochTimes:
    """Mid-time and heliocentric distance of every epoch (the mean over its cubes) and of every cube."""

    mjd: dict[str, float]               # epoch -> mean mid-time (MJD, UTC)
    r_h: dict[str, float]               # epoch -> mean r_h (au), as the budget computes it
    cube_mjd: np.ndarray                # every cube's mid-time, sorted
    cube_r_h: np.ndarray                # its r_h (au)
    start: Time                         # the first epoch's mid-time (the time axis' zero)


@dataclass(frozen=True)
class EpochPoint:
    """One quoted value: an epoch's Q (detection) or upper limit."""

    epoch: str
    q: float                            # 1/s
    q_err: float
    q_upper: float
    detected: bool
    t_kin: float                        # K, NaN for infrared bands
    aperture_km: float


@dataclass
class SpeciesSeries:
    """What one panel draws."""

    species: str
    points: list[EpochPoint]
    combined: EpochPoint | None = None  # all epochs
    demand: dict[str, tuple[float, float]] = field(default_factory=dict)   # epoch -> (Q lightest, Q heaviest)
    curve: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None           # MJD, Q lightest, Q heaviest
    kind: str | None = None             # verdict class (drivers)
    label: str = ""                     # verdict words (drivers)


def epoch_times(geometry: list) -> EpochTimes:
    """Epoch mid-times and distances from the geometry tables' rows (one row per cube)."""
    if not geometry:
        msg = "report: no geometry table among the inputs; expected one geometry/<cube>.ecsv per cube"
        raise ValueError(msg)
    with future_time_tolerated():
        mjd = np.array([float(g["time_mid"].utc.mjd) for g in geometry])
    r_h = np.array([float(u.Quantity(g["r_h"], u.au).value) for g in geometry])
    epochs = [str(g["epoch"]) for g in geometry]
    order = np.argsort(mjd)
    groups = list(dict.fromkeys(epochs))
    e_mjd = {e: float(np.mean(mjd[[i for i, x in enumerate(epochs) if x == e]])) for e in groups}
    e_rh = {e: float(np.mean(r_h[[i for i, x in enumerate(epochs) if x == e]])) for e in groups}
    first = min(e_mjd.values())
    with future_time_tolerated():
        start = Time(first, format="mjd", scale="utc")
    return EpochTimes(mjd=e_mjd, r_h=e_rh, cube_mjd=mjd[order], cube_r_h=r_h[order], start=start)


def _point(r) -> EpochPoint:
    t = float(u.Quantity(r["t_kin_K"], u.K).value)
    if "t_origin" in r.colnames and str(r["t_origin"]) == "not needed":
        t = float("nan")
    return EpochPoint(epoch=str(r["epoch"]), q=float(u.Quantity(r["q"], 1 / u.s).value),
                      q_err=float(u.Quantity(r["q_err"], 1 / u.s).value),
                      q_upper=float(u.Quantity(r["q_upper"], 1 / u.s).value), detected=bool(r["detected"]),
                      t_kin=t, aperture_km=float(u.Quantity(r["aperture_km"], u.km).value))


def species_series(limits: QTable, species: str, budget: QTable | None = None,
                   assumption_set: str | None = None) -> SpeciesSeries:
    """The quoted per-epoch values of ``species`` at its smallest quoted aperture, and the budget's demand.

    ``budget`` (budget.ecsv) and ``assumption_set`` add the Q the push demands at each epoch (drivers only).
    """
    quoted = limits[(limits["species"] == species) & np.asarray(limits["adopted"], bool)] \
        if "adopted" in limits.colnames else limits[:0]
    series = SpeciesSeries(species=species, points=[])
    if len(quoted):
        ap = float(np.min(quoted["aperture_km"].to_value(u.km)))
        quoted = quoted[np.isclose(quoted["aperture_km"].to_value(u.km), ap)]
        series.points = [_point(r) for r in quoted if str(r["epoch"]) != "all"]
        comb = [r for r in quoted if str(r["epoch"]) == "all"]
        series.combined = _point(comb[0]) if comb else None
    if budget is not None and len(budget) and assumption_set is not None:
        rows = budget[(budget["species"] == species) & (budget["assumption_set"] == assumption_set)
                      & (budget["epoch"] != "all")]
        series.demand = {str(r["epoch"]): (float(u.Quantity(r["q_required_min"], 1 / u.s).value),
                                           float(u.Quantity(r["q_required_max"], 1 / u.s).value)) for r in rows}
    return series


def demand_curve(assume: BudgetAssumptions, molecular_mass: u.Quantity, times: EpochTimes,
                 n: int = 120) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """The Q the push demands from the first to the last epoch, lightest and heaviest nucleus.

    The acceleration (constant, or A1–A3 with g(r)) and the ejection speed (constant, or the outflow law) are
    evaluated along r_h(t) interpolated linearly between the cubes' mid-times: Q = M a / (ζ v_ej m), the same
    momentum balance as the budget's (pipeline.budget.momentum). Returns (MJD, Q lightest, Q heaviest) in 1/s,
    or None with fewer than two distinct times.
    """
    t = times.cube_mjd
    if len(np.unique(t)) < 2:
        return None
    grid = np.linspace(t[0], t[-1], n)
    r_h = np.interp(grid, *_unique(t, times.cube_r_h)) * u.au
    masses = u.Quantity(assume.mass_kg, u.kg)
    lo, hi = np.empty(n), np.empty(n)
    for i, r in enumerate(r_h):
        a, _ = acceleration_at(assume, r)
        v = ejection_speed_at(assume, r, molecular_mass)
        q = required_production_rate(required_mass_loss_rate(masses, a, v, assume.efficiency),
                                     molecular_mass).to_value(1 / u.s)
        lo[i], hi[i] = q[0], q[1]
    return grid, lo, hi


def _unique(t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    ut = np.unique(t)
    return ut, np.array([np.mean(y[t == x]) for x in ut])


def exclusion_curves(exclusion: QTable) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Species -> (nucleus mass [kg], exclusion significance [σ]) of the joint test."""
    out = {}
    if not len(exclusion) or "significance" not in exclusion.colnames:
        return out
    for name in dict.fromkeys(str(s) for s in exclusion["species"]):
        sel = exclusion[exclusion["species"] == name]
        order = np.argsort(sel["mass"].to_value(u.kg))
        out[name] = (sel["mass"].to_value(u.kg)[order], np.asarray(sel["significance"], float)[order])
    return out


def driver_series(limits: QTable, budget: QTable, drivers: list[str], times: EpochTimes,
                  assume: BudgetAssumptions | None, catalogue, verdicts: list, follow: bool) -> list[SpeciesSeries]:
    """One series per driver with the first assumption set's demand and verdict.

    ``assume`` None (no acceleration: no verdict) leaves the demand out; ``follow`` adds the demand band along
    r_h(t) (only when the budget has no dust term, which is known at the epochs alone).
    """
    first = {v.species: v for v in verdicts if v.assumption_set == (assume.name if assume else None)}
    out = []
    for name in drivers:
        s = species_series(limits, name, budget if assume is not None else None,
                           assume.name if assume is not None else None)
        if assume is not None and follow:
            s.curve = demand_curve(assume, catalogue.get_species(name).mass, times)
        if name in first:
            s.kind, s.label = first[name].kind, short_label(first[name])
        out.append(s)
    return out


def _days(times: EpochTimes, mjd):
    return np.asarray(mjd, dtype=float) - times.start.mjd


def _panel(ax, s: SpeciesSeries, times: EpochTimes, colour: str, show_demand: bool) -> None:
    if show_demand and s.curve is not None:
        grid, lo, hi = s.curve
        ax.fill_between(_days(times, grid), lo, hi, color="0.86", lw=0, zorder=1,
                        label="Q the push needs (lightest – heaviest nucleus)")
    if show_demand:
        for k, (epoch, (lo, hi)) in enumerate(sorted(s.demand.items())):
            if epoch in times.mjd:
                x = _days(times, times.mjd[epoch])
                ax.plot([x, x], [lo, hi], color="0.25", lw=5, solid_capstyle="butt", alpha=0.55, zorder=2,
                        label=None if k or s.curve is not None else "Q the push needs (lightest – heaviest nucleus)")
    if s.combined is not None:
        c = s.combined
        y = c.q if c.detected else c.q_upper
        ax.axhline(y, color=colour, ls=":", lw=1.2, zorder=2,
                   label="all epochs: " + ("Q" if c.detected else "upper limit"))
    det = [p for p in s.points if p.detected and p.epoch in times.mjd]
    lim = [p for p in s.points if not p.detected and p.epoch in times.mjd]
    if det:
        ax.errorbar(_days(times, [times.mjd[p.epoch] for p in det]), [p.q for p in det],
                    yerr=[p.q_err for p in det], fmt="o", ms=5, color=colour, capsize=3, zorder=4,
                    label="detection (Q ± 1σ)")
    for k, p in enumerate(lim):
        x = float(_days(times, times.mjd[p.epoch]))
        ax.plot([x], [p.q_upper], marker="_", ms=12, mew=2, color=colour, zorder=4,
                label="upper limit" if k == 0 else None)
        ax.annotate("", xy=(x, p.q_upper / 5), xytext=(x, p.q_upper), zorder=4,
                    arrowprops={"arrowstyle": "-|>", "color": colour, "lw": 1.6, "shrinkA": 0, "shrinkB": 0})
    seen = {p.epoch for p in s.points}
    for epoch, mjd in times.mjd.items():
        if s.points and epoch not in seen:
            ax.text(float(_days(times, mjd)), 0.04, "no data", transform=ax.get_xaxis_transform(), ha="center",
                    va="bottom", fontsize=6.5, color=COLOURS["unobserved"], style="italic", zorder=5)
    if not s.points:
        ax.text(0.5, 0.5, "not observed: no cube covered this species", transform=ax.transAxes, ha="center",
                va="center", fontsize=8, color=COLOURS["unobserved"], style="italic")
    ax.set_yscale("log")
    values = [v for p in s.points for v in ((p.q - p.q_err, p.q + p.q_err) if p.detected else (p.q_upper / 6,
                                                                                                 p.q_upper))]
    if show_demand:
        values += [v for pair in s.demand.values() for v in pair]
        if s.curve is not None:
            values += [float(np.min(s.curve[1])), float(np.max(s.curve[2]))]
    values = [v for v in values if np.isfinite(v) and v > 0]
    if values:
        lo, hi = min(values) / 2.5, max(values) * 2.5
        widen = np.sqrt(max(30.0 / (hi / lo), 1.0))     # at least 1.5 decades, so that decade ticks show
        ax.set_ylim(lo / widen, hi * widen)
    ax.yaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    ax.grid(True, which="major", axis="y", alpha=0.3)
    ax.tick_params(labelsize=7)
    ax.set_ylabel("Q [s$^{-1}$]", fontsize=8)
    title = s.species + (f": {s.label}" if s.label else "")
    ax.text(0.01, 0.96, title, transform=ax.transAxes, ha="left", va="top", fontsize=9, fontweight="bold",
            color=COLOURS.get(s.kind, "0.1") if s.kind else "0.1",
            bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.85}, zorder=6)


def plot_campaign(series: list[SpeciesSeries], times: EpochTimes,
                  exclusion: dict[str, tuple[np.ndarray, np.ndarray]] | None = None,
                  mass_range: tuple[float, float] | None = None, width_in: float = 10.0):
    """The figure: one time panel per species (with the demand when given), and the joint test beside them.

    ``exclusion`` (species -> mass [kg], significance) and ``mass_range`` (kg) add the right-hand panel; without
    them (tracers, or no acceleration) the time panels take the whole width.
    """
    n = max(1, len(series))
    with_test = exclusion is not None
    panel = max(0.9, min(1.5, 4.5 / n))         # up to five species fit in a 1400x900 window's first screen
    height = panel * n + 1.2
    fig = plt.figure(figsize=(width_in, height))
    grid = fig.add_gridspec(n, 2 if with_test else 1, width_ratios=[2.1, 1] if with_test else None,
                            hspace=0.08, wspace=0.22, left=0.07, right=0.985, top=1 - 0.5 / height,
                            bottom=0.78 / height)
    axes = [fig.add_subplot(grid[i, 0]) for i in range(n)]
    for ax in axes[1:]:
        ax.sharex(axes[0])
    colours = {s.species: _SPECIES_COLOURS[i % len(_SPECIES_COLOURS)] for i, s in enumerate(series)}
    for ax, s in zip(axes, series):
        _panel(ax, s, times, colours[s.species], show_demand=with_test or bool(s.demand))
    epochs = sorted(times.mjd, key=times.mjd.get)
    x = _days(times, [times.mjd[e] for e in epochs])
    pad = max(0.12 * (x.max() - x.min()), 0.6)
    axes[0].set_xlim(x.min() - pad, x.max() + pad)
    for ax in axes[:-1]:
        ax.tick_params(labelbottom=False)
    with future_time_tolerated():
        start = times.start.utc.strftime("%Y-%m-%d %H:%M")
    axes[-1].set_xlabel(f"days from {start} UTC (first epoch)", fontsize=8, labelpad=2)
    top = axes[0].secondary_xaxis("top")
    top.set_ticks(x)
    top.set_xticklabels([f"{e}\nr$_h$ {times.r_h[e]:.3f} au" for e in epochs], fontsize=7, linespacing=1.1)
    top.tick_params(length=3)
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    demand = any(s.demand or s.curve is not None for s in series) and (with_test or any(s.demand for s in series))
    legend = ([(Patch(color="0.86"), "Q the push needs (lightest – heaviest nucleus)"),
               (Line2D([], [], color="0.25", lw=5, alpha=0.55), "the same at each epoch (budget.ecsv)")]
              if demand else [])
    legend += [(Line2D([], [], color="0.3", marker="o", ms=5, ls="none"), "detection, Q ± 1σ"),
               (Line2D([], [], color="0.3", marker=r"$\downarrow$", ms=10, ls="none"), "upper limit"),
               (Line2D([], [], color="0.3", ls=":", lw=1.2), "all epochs combined")]
    fig.legend([h for h, _ in legend], [t for _, t in legend], fontsize=7, loc="lower left", frameon=False,
               ncol=len(legend), bbox_to_anchor=(0.05, 0.0), handlelength=1.6, columnspacing=1.2)
    if with_test:
        ax = fig.add_subplot(grid[:, 1])
        if mass_range is not None:
            ax.axvspan(*mass_range, color="0.9", lw=0, label="nucleus-mass range")
        ax.axhline(3.0, color="0.3", ls="--", lw=1, label="3σ")
        for name, (mass, sig) in exclusion.items():
            if name in colours:
                ax.semilogx(mass, np.minimum(sig, SIGNIFICANCE_CAP), color=colours[name], lw=1.8, label=name,
                            clip_on=False)
        if not any(name in colours for name in exclusion):
            ax.text(0.5, 0.5, "no joint test\n(no measured driver)", transform=ax.transAxes, ha="center",
                    va="center", fontsize=8, color=COLOURS["unobserved"])
            ax.set_xscale("log")
        ax.set_xlabel("nucleus mass [kg]", fontsize=8)
        ax.set_ylabel("exclusion significance, all epochs [σ]", fontsize=8)
        ax.set_title("joint test: the species alone carries the push", fontsize=8)
        ax.set_ylim(0, SIGNIFICANCE_CAP + 0.3)
        ax.tick_params(labelsize=7)
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize=6.5, loc="lower right", framealpha=0.9)
    return fig


def campaign_caption(series: list[SpeciesSeries], assume_text: str, demand: bool, nsigma: float) -> str:
    """What the figure draws, at which temperature and aperture."""
    parts = []
    for s in series:
        if not s.points:
            parts.append(f"{s.species}: not observed")
            continue
        aps = sorted({p.aperture_km for p in s.points})
        temps = ", ".join(f"{p.epoch} {p.t_kin:.0f} K" for p in s.points if np.isfinite(p.t_kin))
        parts.append(f"{s.species}: {'/'.join(f'{a:g}' for a in aps)} km aperture, "
                     + (temps if temps else "infrared bands (no temperature needed)"))
    text = ("Quoted production rate per epoch (limits.ecsv, adopted rows; smallest quoted aperture, each epoch at "
            f"its quoted temperature — {'; '.join(parts)}). Points with bars: detections, Q ± 1σ; arrows: "
            f"{nsigma:g}σ upper limits; dotted line: all epochs combined. Top axis: each epoch and its heliocentric "
            "distance.")
    if demand:
        text += (" Grey: the production rate the push needs if this species alone carries it, from the lightest to "
                 f"the heaviest nucleus, for {assume_text}; dark bars: the budget's value at each epoch, shaded band: "
                 "the same along r_h(t) between epochs. A point or arrow below the band means the gas is not "
                 "there for any nucleus mass. Right: the joint test over all epochs, exclusion significance "
                 "against nucleus mass (grey: the nucleus-mass range; dashed: 3σ; values above "
                 f"{SIGNIFICANCE_CAP:g}σ drawn at {SIGNIFICANCE_CAP:g}σ).")
    return text


def campaign_alt(series: list[SpeciesSeries], demand: bool) -> str:
    """Alternative text of the figure: what it shows and each species' verdict."""
    names = ", ".join(s.species + (f" ({s.label})" if s.label else "") for s in series)
    if demand:
        return (f"Campaign figure: production rate per epoch against time for {names}, each with the band of "
                "production rate the push demands; beside it the joint test's exclusion significance against "
                "nucleus mass.")
    return f"Production rate per epoch against time for {names}."


@dataclass(frozen=True)
class CampaignFigures:
    """The drivers' and the tracers' figures as PNG bytes, with captions and alternative texts."""

    drivers_png: bytes
    drivers_caption: str
    drivers_alt: str
    tracers_png: bytes | None
    tracers_caption: str
    tracers_alt: str


def plot_note(text: str, width_in: float = 7.5):
    """A small figure that only says ``text`` (a product the workflow must write when it has nothing to draw)."""
    fig, ax = plt.subplots(figsize=(width_in, 1.2))
    ax.text(0.5, 0.5, text, ha="center", va="center", fontsize=10, wrap=True)
    ax.set_axis_off()
    return fig


def campaign_figures(limits: QTable, budget: QTable, exclusion: QTable, geometry: list, settings: "Settings",
                     verdicts: list, sets: list[dict], to_png, with_budget: bool, dust: bool) -> CampaignFigures:
    """Both figures of the campaign: the drivers with the push's demand and the joint test, then the tracers.

    ``with_budget`` False (no acceleration: no verdict) draws the measured values only. ``dust`` True (the budget
    subtracts the dust's push, known at the epochs only) leaves out the band between epochs.
    """
    catalogue = settings.catalogue()
    times = epoch_times(geometry)
    assume = settings.budget.baseline if with_budget and sets else None
    drivers = list(settings.budget.baseline.drivers)
    tracers = [s for s in settings.species if s not in drivers]
    nsigma = float(settings.limits.nsigma)
    series = driver_series(limits, budget, drivers, times, assume, catalogue, verdicts, follow=not dust)
    fig = plot_campaign(series, times, exclusion_curves(exclusion) if assume is not None else None,
                        tuple(assume.mass_kg) if assume is not None else None)
    mean_v = None
    if assume is not None:
        rows = budget[(budget["assumption_set"] == assume.name) & (budget["epoch"] == "all")]
        mean_v = u.Quantity(rows["ejection_speed"][0], u.km / u.s) if len(rows) else None
    assume_text = conditions_text(sets[0], mean_v) if assume is not None else ""
    caption = campaign_caption(series, assume_text, assume is not None, nsigma)
    if assume is None:
        caption += " No band of demanded production: no verdict was computed (the verdict section says why)."
    out = {"drivers_png": to_png(fig), "drivers_caption": caption,
           "drivers_alt": campaign_alt(series, assume is not None)}
    if tracers:
        t_series = [species_series(limits, name) for name in tracers]
        out.update(tracers_png=to_png(plot_campaign(t_series, times)),
                   tracers_caption=campaign_caption(t_series, "", False, nsigma)
                   + " Tracers are not budget drivers: no demand band and no verdict.",
                   tracers_alt=campaign_alt(t_series, False))
    else:
        out.update(tracers_png=None, tracers_caption="", tracers_alt="")
    return CampaignFigures(**out)
