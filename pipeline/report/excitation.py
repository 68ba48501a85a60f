"""The report's excitation section: Q under non-LTE excitation beside the LTE sweep, and the rotational temperature
along the outflow.

Under ``excitation.model: lte`` the limits are those of LTE at each swept kinetic temperature; with
``excitation.q_h2o_per_s`` given the limits table also holds Q under the non-LTE model at the same gas kinetic
temperature (``q_nonlte``, :func:`pipeline.workflow.limits.run_species`), and this section sets the two side by
side. Under ``model: nonlte`` the table's Q are the non-LTE ones. The figure shows what the non-LTE model does:
the rotational temperature of two levels of each linear-rotor species along the outflow
(:meth:`pipeline.coma.nonlte.PopulationProfile.rotational_temperature` of the populations the responses use,
:func:`pipeline.coma.departure.molecule_of` and :func:`pipeline.coma.departure.excitation_model_of`).
"""

from __future__ import annotations

import html
from dataclasses import dataclass

import astropy.units as u
import matplotlib
import numpy as np
from astropy.table import QTable

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from pipeline.catalogue import Catalogue  # noqa: E402
from pipeline.coma.departure import NonLteSettings, excitation_model_of, line_levels, molecule_of  # noqa: E402
from pipeline.coma.excitation import T_CMB  # noqa: E402
from pipeline.errors import CatalogueError  # noqa: E402
from pipeline.io.tables import cell_float  # noqa: E402
from pipeline.report.html import figure_html, table_html  # noqa: E402

__all__ = ["RotationalProfile", "EpochWater", "water_per_epoch", "water_text", "excitation_caution", "main_lines", "rotational_profiles", "off_axis",
           "plot_rotational_temperature", "excitation_section", "SECTION_TITLE"]

#: The heading of the section (the caution box points to it).
SECTION_TITLE = "Excitation: LTE sweep and non-LTE"

#: Cometocentric distances of the figure [km].
R_RANGE_KM = (10.0, 1e6)
#: The figure's temperature axis: from below the background to this many times the highest T_kin.
T_AXIS = (1.5, 3.0)


@dataclass(frozen=True)
class RotationalProfile:
    """T_rot(r) of two levels of one species at one gas kinetic temperature."""

    species: str
    levels: tuple[str, str]          # (lower, upper) level names, e.g. ('J=2', 'J=3')
    line_id: str | None              # the observed line whose levels these are (None: the lowest two levels)
    t_kin: float                     # K
    r_km: np.ndarray
    t_rot: np.ndarray                # K


@dataclass(frozen=True)
class EpochWater:
    """The water production rate the non-LTE excitation used at one epoch, and where it comes from."""

    epoch: str
    q_h2o_per_s: float
    source: str

    @property
    def measured(self) -> bool:
        return self.source.startswith("H2O measured")


def water_per_epoch(limits: QTable) -> list[EpochWater]:
    """Each epoch's Q(H2O) of the non-LTE excitation, as the limits table records it (``q_h2o_excitation``,
    ``q_h2o_from`` of the epoch's line rows); empty without non-LTE."""
    if not len(limits) or "q_h2o_excitation" not in limits.colnames:
        return []
    found: dict[str, EpochWater] = {}
    for r in limits:
        q = cell_float(r["q_h2o_excitation"], 1 / u.s)
        if str(r["epoch"]) != "all" and np.isfinite(q) and str(r["epoch"]) not in found:
            found[str(r["epoch"])] = EpochWater(epoch=str(r["epoch"]), q_h2o_per_s=q, source=str(r["q_h2o_from"]))
    return list(found.values())


def water_text(waters: list[EpochWater], fallback: float | None = None) -> str:
    """Q(H2O) in words: which epochs took the campaign's own water measurement, which the config key."""
    measured = [w for w in waters if w.measured]
    configured = [w for w in waters if not w.measured]
    parts = []
    if measured:
        parts.append("Q(H2O) measured by the campaign at " + ", ".join(f"{w.epoch} ({w.q_h2o_per_s:.3g} /s)"
                                                                      for w in measured))
    if configured:
        parts.append(f"excitation.q_h2o_per_s ({configured[0].q_h2o_per_s:.3g} /s) at "
                     + ", ".join(w.epoch for w in configured))
    if not parts and fallback is not None:
        parts.append(f"Q(H2O) = {fallback:.3g} /s (excitation.q_h2o_per_s)")
    return "; ".join(parts)


def excitation_caution(nonlte: NonLteSettings | None, comparison: NonLteSettings | None, short: bool = False,
                       waters: list[EpochWater] | None = None) -> str:
    """The excitation clause of the report's caution: what the quoted numbers assume and where the other model is
    (``short``: a few words for the line at the top); ``waters`` the epochs' Q(H2O) (:func:`water_per_epoch`)."""
    waters = waters or []
    if short:
        if nonlte is not None:
            return "non-LTE line excitation at " + water_text(waters, nonlte.q_h2o_per_s)
        return "LTE line excitation" + (f"; non-LTE beside it in '{SECTION_TITLE}'" if comparison is not None else "")
    if nonlte is not None:
        return (f"non-LTE excitation of the millimetre lines (level populations along the outflow at "
                f"{water_text(waters, nonlte.q_h2o_per_s)}; x_ne = {nonlte.x_ne:g}, water cross-section "
                f"{nonlte.sigma_cm2:.3g} cm^2), the kinetic temperatures listed being the gas temperature")
    if comparison is not None:
        return ("LTE excitation at the kinetic temperatures listed (the section '" + SECTION_TITLE + "' gives Q "
                f"under non-LTE excitation at {water_text(waters, comparison.q_h2o_per_s)} beside them)")
    return ("LTE excitation at the kinetic temperatures listed (no non-LTE comparison: the campaign measured no "
            "water and excitation.q_h2o_per_s is not set)")


def main_lines(limits: QTable, catalogue: Catalogue) -> dict[str, str | None]:
    """Species with millimetre lines in the campaign -> its main observed line (the first catalogue line of its
    all-epochs rows; None when no row names one)."""
    line_ids = {ln.line_id for ln in catalogue.lines}
    out: dict[str, str | None] = {}
    for name in dict.fromkeys(str(s) for s in limits["species"]):
        if not catalogue.lines_of(name):
            continue
        rows = limits[(np.asarray(limits["species"], dtype=str) == name)]
        ids = [x for r in rows if str(r["epoch"]) == "all" for x in str(r["lines"]).split(",") if x in line_ids]
        ids = ids or [x for r in rows for x in str(r["lines"]).split(",") if x in line_ids]
        out[name] = ids[0] if ids else None
    return out


def _level_name(molecule, index: int) -> str:
    return f"J={int(molecule.j[index])}" if molecule.j is not None else f"level {index + 1}"


def rotational_profiles(species_lines: dict[str, str | None], catalogue: Catalogue, settings: NonLteSettings,
                        t_kin: u.Quantity, r_h: u.Quantity,
                        speed: u.Quantity) -> tuple[list[RotationalProfile], list[str]]:
    """T_rot(r) of each species at each gas kinetic temperature, and one note per species left out.

    The levels are those of the species' observed line (``species_lines``), else its two lowest levels; the
    populations are those the non-LTE responses use (:func:`pipeline.coma.nonlte.population_profile` of
    :func:`pipeline.coma.departure.molecule_of` under :func:`pipeline.coma.departure.excitation_model_of`), on
    the model's radii from 10 to 1e6 km. A species the non-LTE model cannot describe (not a linear rotor and no
    ``excitation.molecular_data`` file) is left out with its reason.
    """
    from pipeline.coma.nonlte import population_profile

    profiles, notes = [], []
    for name, line_id in species_lines.items():
        species = catalogue.get_species(name)
        line = catalogue.get_line(line_id) if line_id else None
        try:
            for t in np.atleast_1d(u.Quantity(t_kin, u.K)):
                molecules = molecule_of(species, settings, t, line.e_up.to_value(u.K) if line else 0.0)
                if line is not None:
                    k, upper, lower = line_levels(molecules, line)
                else:
                    k, upper, lower = 0, 1, 0
                mol = molecules[k]
                profile = population_profile(mol, excitation_model_of(settings, species, mol, t, speed, r_h))
                names = [int(mol.j[i]) if mol.j is not None else i for i in (lower, upper)]
                t_rot = profile.rotational_temperature(names[0], names[1]).to_value(u.K)
                profiles.append(RotationalProfile(species=name, levels=(_level_name(mol, lower),
                                                                        _level_name(mol, upper)),
                                                  line_id=line_id, t_kin=float(t.to_value(u.K)),
                                                  r_km=profile.r.to_value(u.km), t_rot=t_rot))
        except CatalogueError as err:
            profiles = [p for p in profiles if p.species != name]
            notes.append(f"{name}: {str(err).split('; set ')[0]}.")
    return profiles, notes


def off_axis(profiles: list[RotationalProfile]) -> bool:
    """Whether a profile leaves the figure's temperature axis (T_rot above it, infinite or negative: the two levels
    near equal or inverted populations)."""
    top = T_AXIS[1] * max(p.t_kin for p in profiles)
    return any(np.any(~np.isfinite(p.t_rot) | (p.t_rot <= 0) | (p.t_rot > top)) for p in profiles)


def plot_rotational_temperature(profiles: list[RotationalProfile]):
    """One panel per species: T_rot against cometocentric distance (log axes) at each T_kin; T_kin dashed."""
    top = T_AXIS[1] * max(p.t_kin for p in profiles)
    names = list(dict.fromkeys(p.species for p in profiles))
    fig, axes = plt.subplots(1, max(len(names), 1), figsize=(4.4 * max(len(names), 1), 3.5), squeeze=False)
    for ax, name in zip(axes[0], names):
        mine = [p for p in profiles if p.species == name]
        for k, p in enumerate(mine):
            ok = np.isfinite(p.t_rot) & (p.t_rot > 0)
            colour = f"C{k % 10}"
            ax.plot(p.r_km[ok], p.t_rot[ok], color=colour, lw=1.4, label=f"T_kin = {p.t_kin:g} K")
            ax.axhline(p.t_kin, color=colour, lw=0.9, ls="--")
        ax.axhline(T_CMB.to_value(u.K), color="0.4", lw=0.8, ls=":", label="2.725 K background")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlim(*R_RANGE_KM)
        ax.set_ylim(T_AXIS[0], top)
        ax.set_xlabel("distance from the nucleus [km]")
        ax.set_ylabel(f"T_rot ({mine[0].levels[1]}/{mine[0].levels[0]}) [K]")
        ax.set_title(name, fontsize=10)
        ax.grid(True, which="both", alpha=0.25)
        ax.legend(fontsize=7, frameon=False)
    fig.tight_layout()
    return fig


def _value_text(q: float, err: float, upper: float, nsigma: float) -> str:
    """Q ± σ for a detection (Q at least nsigma σ), else the upper limit; – when not computed."""
    if not (np.isfinite(q) and np.isfinite(err)):
        return "–"
    return f"{q:.3g} ± {err:.2g}" if err > 0 and q / err >= nsigma else f"< {upper:.3g}"


def _sweep_rows(limits: QTable, name: str) -> QTable:
    """The species' rows of the sweep, and at the measured or configured temperature, for all epochs combined at
    its smallest aperture, by temperature."""
    sel = limits[(np.asarray(limits["species"], dtype=str) == name) & (np.asarray(limits["epoch"], dtype=str) == "all")
                 & np.isin(np.asarray(limits["t_origin"], dtype=str), ("sweep", "conservative", "measured",
                                                                        "configured"))]
    if not len(sel):
        return sel
    ap = u.Quantity(sel["aperture_km"], u.km).value
    sel = sel[ap == np.min(ap)]
    return sel[np.argsort(u.Quantity(sel["t_kin_K"], u.K).value)]


def _comparison_table(limits: QTable, names: list[str], nsigma: float, nonlte_model: bool) -> tuple[str, list[str]]:
    rows, missing = [], []
    if not nonlte_model and "q_nonlte" not in limits.colnames:      # a limits table written without the comparison
        limits = limits.copy()
        for name in ("q_nonlte", "q_nonlte_err", "q_nonlte_upper"):
            limits[name] = np.full(len(limits), np.nan) / u.s
    for name in names:
        sel = _sweep_rows(limits, name)
        if not len(sel):
            continue
        for r in sel:
            q, err, up = (cell_float(r[c], 1 / u.s) for c in ("q", "q_err", "q_upper"))
            t = cell_float(r["t_kin_K"], u.K)
            origin = str(r["t_origin"])
            if origin in ("measured", "configured"):       # T_kin from the measured rotational temperature
                t = f"{t:.3g} ({origin}" + (f", {r['t_source']})" if origin == "measured" else ")")
            ap = cell_float(r["aperture_km"], u.km)
            if nonlte_model:
                rows.append([name, ap, t, _value_text(q, err, up, nsigma)])
                continue
            qn, en, un = (cell_float(r[c], 1 / u.s) for c in ("q_nonlte", "q_nonlte_err", "q_nonlte_upper"))
            lte_detected = err > 0 and q / err >= nsigma
            nonlte_detected = np.isfinite(qn) and en > 0 and qn / en >= nsigma
            ratio = qn / q if lte_detected and nonlte_detected else un / up
            rows.append([name, ap, t, _value_text(q, err, up, nsigma), _value_text(qn, en, un, nsigma),
                         float(ratio) if np.isfinite(ratio) else float("nan")])
        if not nonlte_model and not np.any(np.isfinite(u.Quantity(sel["q_nonlte"], 1 / u.s).value)):
            missing.append(name)
    if nonlte_model:
        return table_html(["species", "aperture [km]", "T_kin [K]", "Q under non-LTE [1/s]"], rows, left=1), missing
    return table_html(["species", "aperture [km]", "T_kin [K]", "Q under LTE [1/s]", "Q under non-LTE [1/s]",
                       "non-LTE / LTE"], rows, left=1), missing


def _water_table(waters: list[EpochWater]) -> str:
    return ("<p>The water production rate whose collisions (and electrons) excite the lines, per epoch "
            "(excitation.q_h2o_from: the campaign's own H2O band measurement where it is a detection, else "
            "excitation.q_h2o_per_s):</p>"
            + table_html(["epoch", "Q(H2O) [1/s]", "from"], [[w.epoch, w.q_h2o_per_s, w.source] for w in waters],
                         left=1))


def excitation_section(limits: QTable, catalogue: Catalogue, t_kin: u.Quantity, nsigma: float,
                       nonlte: NonLteSettings | None, comparison: NonLteSettings | None, r_h: u.Quantity | None,
                       speed: u.Quantity | None, to_png) -> str:
    """The section's HTML: the table of Q under LTE beside Q under non-LTE (or the non-LTE Q alone under model
    nonlte) and the figure of T_rot along the outflow.

    ``nonlte`` is the campaign's model (None under LTE), ``comparison`` the settings of the comparison beside the LTE
    sweep (:func:`pipeline.rates.q_units.nonlte_comparison`; None without one); ``r_h`` the campaign's mean
    heliocentric distance and ``speed`` the outflow speed there; ``to_png`` renders a figure.
    """
    shown = nonlte if nonlte is not None else comparison
    lines = main_lines(limits, catalogue) if len(limits) else {}
    if shown is None:
        return ("<p>The limits assume LTE at each swept kinetic temperature. No non-LTE comparison was made: the "
                "campaign measured no water and excitation.q_h2o_per_s is not set (the water production rate whose "
                "collisions excite the lines); set it to see Q under non-LTE excitation beside the LTE sweep, or "
                "excitation.model: nonlte to quote it.</p>")
    waters = water_per_epoch(limits)
    figure_water = (f"{shown.q_h2o_per_s:.3g} /s (the median over the epochs above)" if waters
                    else f"{shown.q_h2o_per_s:.3g} /s (excitation.q_h2o_per_s)")
    parts = []
    if nonlte is not None:
        parts.append("<p>The quoted Q are those of the non-LTE model (" + html.escape(nonlte.describe()) + "), each "
                     "swept temperature being the gas kinetic temperature. All epochs combined, smallest "
                     "aperture:</p>")
        if waters:
            parts.append(_water_table(waters))
    else:
        parts.append("<p>The limits assume LTE at each swept kinetic temperature. Beside them, Q under the non-LTE "
                     "model (" + html.escape(comparison.describe()) + ") with that temperature as the gas kinetic "
                     "temperature; the same spectra, only each line's response changes (the quoted results stay "
                     "the LTE ones). All epochs combined, smallest aperture; the ratio is of Q where both are "
                     "detections, else of the upper limits. A row at a measured temperature takes the rotational "
                     "temperature measured from a species' lines as the gas kinetic temperature (common practice, "
                     "exact only where collisions thermalise the levels).</p>")
    if waters:
        parts.append(_water_table(waters))
    if lines:
        table, missing = _comparison_table(limits, list(lines), nsigma, nonlte is not None)
        parts.append(table)
        if missing:
            parts.append("<p>No non-LTE Q for " + html.escape(", ".join(missing)) + ": its stack inputs carry no "
                         "non-LTE response. The non-LTE model needs a linear rotor with constants in the catalogue "
                         "or a LAMDA-format file (excitation.molecular_data); the epoch's log "
                         "(logs/epoch/<epoch>.log) names the reason "
                         "for each species left out.</p>")
    else:
        parts.append("<p>No species with millimetre lines in this campaign.</p>")
    if lines and r_h is not None and speed is not None:
        profiles, notes = rotational_profiles(lines, catalogue, shown, t_kin, r_h, speed)
        if profiles:
            used = list(dict.fromkeys((p.species, p.levels, p.line_id) for p in profiles))
            which = "; ".join(f"{s}: {b}/{a}" + (f" (the levels of {lid})" if lid else " (its lowest two levels)")
                              for s, (a, b), lid in used)
            pumped = ", ".join(f"{s} {shown.pump_rate(s):.3g} /s" for s in dict.fromkeys(p.species for p in profiles)
                               if shown.pump_rate(s) > 0) or "none"
            caption = (f"Rotational temperature along the outflow under the non-LTE model ({which}) at each swept "
                       f"gas kinetic temperature (solid) and that temperature, LTE (dashed); dotted: the 2.725 K "
                       f"cosmic background. At the campaign's mean r_h = {r_h.to_value(u.au):.3g} au, outflow "
                       f"{speed.to_value(u.km / u.s):.3g} km/s, Q(H2O) = {figure_water}, x_ne = {shown.x_ne:g}, "
                       "water cross-section "
                       f"{shown.sigma_cm2:.3g} cm², infrared pumping at 1 au (scaled as r_h^-2): {pumped}; "
                       f"{'steady-state' if shown.steady_state else 'time-dependent'} populations, LTE inside "
                       "10 km. Near the nucleus collisions hold T_rot at T_kin; far out the levels relax toward the "
                       "equilibrium of the background and the pumping.")
            if off_axis(profiles):
                caption += (f" Above {T_AXIS[1]:g} times the highest T_kin the curves leave the axis: where the "
                            "two levels come near equal populations per statistical weight, T_rot grows without "
                            "bound (negative for an inversion). From a warm start this is mostly the cascade: once "
                            "collisions stop, molecules falling from the higher levels feed the upper level faster "
                            "than it decays (hot electrons and pumping add to it).")
            parts.append(figure_html(to_png(plot_rotational_temperature(profiles)), caption,
                                     "rotational temperature against distance from the nucleus"))
        if notes:
            parts.append("<p>Not in the figure: " + html.escape(" ".join(notes)) + "</p>")
    return "".join(parts)
