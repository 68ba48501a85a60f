"""Stage 'report': report.html with figures and tables, and the figures as PNG files."""

from __future__ import annotations

import html
import json
from pathlib import Path

import astropy.units as u
import numpy as np

from pipeline import __version__
from pipeline.io.atomic import atomic_path, write_text
from pipeline.report.figures import (plot_band_spectra, plot_rotational_diagrams, plot_stacked_spectra,
                                     plot_temperature_sweep, to_png)
from pipeline.report.campaign_figure import IMG_ID, campaign_figures, plot_note
from pipeline.report.cubes_section import CubeSection
from pipeline.rates.excitation_water import ExcitationWater, with_water
from pipeline.report.excitation import SECTION_TITLE, excitation_caution, excitation_section, water_per_epoch
from pipeline.report.html import anchored_figure_html, figure_html, page, table_html
from pipeline.report.sections import (afrho_points, band_panels, budget_figure, forecast_section, infrared_section,
                                      injection_section, joint_section, quoted_section, rotational_diagrams,
                                      spectrum_panels, sweep_curves, temperature_section, water_section,
                                      zeta_section, conservative_section, assumptions_section, provenance_section)
from pipeline.report.verdicts import assumption_sets_table, defaulted_html, driver_verdicts, no_verdict_html, verdict_section
from pipeline.coma.response import nonlte_settings, outflow_speed
from pipeline.rates.q_units import nonlte_comparison
from pipeline.settings import Settings
from pipeline.io.tables import read_table, table_cache

__all__ = ["run", "cube_section"]

CAUTION = ("These production rates and limits rest on model assumptions: {excitation}, optically thin lines, "
           "a Haser parent distribution with isotropic uniform outflow, the photodestruction rates of the catalogue, "
           "for infrared bands optically thin solar fluorescence with the catalogue's g-factors scaled as r_h^-2, "
           "for the dust a single grain size, density, speed and albedo, and, for the budget, momentum balance with "
           "the stated efficiency and ejection speed with all mass loss in one species at a time. Change an assumption and "
           "the numbers change. gasledger reports numbers; whether outgassing can or cannot drive the push is a "
           "conclusion that belongs to peer review, not to this tool.")

SHORT_CAUTION = ("Numbers under stated model assumptions ({excitation}), not a conclusion about the push: read the "
                 "caution below the verdict.")


def _write_png(data: bytes, path: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)


def cube_section(inputs, outputs, settings: Settings, line_spectra: list[str]) -> CubeSection:
    """The report's "Cubes" section for these inputs (the limits as :func:`run` reads them), its figure cache
    below the report's folder; :meth:`~pipeline.report.cubes_section.CubeSection.start` it to have its figures
    made while other work goes on."""
    return CubeSection(settings, list(inputs.cube_images), list(line_spectra), list(inputs.bands),
                       read_table(inputs.limits), cache=Path(outputs.html).parent / ".cache" / "cube_spectra")


def run(inputs, outputs, settings: Settings, line_spectra: list[str], workers: int = 1,
        cubes: CubeSection | None = None) -> None:
    """Build the report from the run's tables and stacks. ``line_spectra`` are the lines' spectra files
    (``spectra/<cube>/<line>.fits``, inside the cubes' folders the inputs name). ``cubes``: the "Cubes" section
    (:func:`cube_section`), started by the caller; without it, the section's figures are made on ``workers`` - 1
    processes while this one builds the rest of the report (here, after it, with one worker)."""
    if cubes is None:
        cubes = cube_section(inputs, outputs, settings, line_spectra).start(workers - 1)
    try:
        _build(inputs, outputs, settings, cubes)
    except BaseException:
        cubes.close()
        raise


def _build(inputs, outputs, settings: Settings, cubes: CubeSection) -> None:
    catalogue = settings.catalogue()
    limits = read_table(inputs.limits)
    budget = read_table(inputs.budget_ecsv)
    with open(inputs.budget_json, encoding="utf-8") as fh:
        summary = json.load(fh)
    geometry = [read_table(p, table_cache(settings.outdir))[0] for p in inputs.geometry]

    fig_spec = to_png(plot_stacked_spectra(spectrum_panels(list(inputs.stacks), limits, catalogue)))
    missing = [str(x) for x in summary.get("missing", [])]
    defaulted = [str(x) for x in summary.get("defaulted", [])]
    sets = list(summary.get("assumption_sets", [])) if not missing and len(budget) else []
    verdicts = driver_verdicts(budget, limits, list(settings.budget.baseline.drivers), sets) if sets else []
    campaign = campaign_figures(limits, budget, read_table(inputs.exclusion), geometry, settings, verdicts, sets,
                                to_png, with_budget=bool(sets), dust=bool(summary.get("dust_force_N")))
    _write_png(campaign.drivers_png, outputs.campaign)
    _write_png(campaign.tracers_png or to_png(plot_note("No tracer species in this campaign.")), outputs.tracers)
    fig_budget = to_png(budget_figure(budget, settings.budget.baseline, catalogue) if sets else
                        plot_note("No mass budget: " + " ".join(missing or ["budget.ecsv has no rows."])))
    fig_sweep = to_png(plot_temperature_sweep(sweep_curves(limits)))
    diagrams = rotational_diagrams(inputs.temperature, list(inputs.stacks), catalogue)
    fig_rot = to_png(plot_rotational_diagrams(diagrams)) if diagrams else None
    fig_ir = to_png(plot_band_spectra(band_panels(list(inputs.bands)), *afrho_points(list(inputs.bands))))
    _write_png(fig_ir, outputs.infrared)
    _write_png(fig_spec, outputs.spectra)
    _write_png(fig_budget, outputs.budget)
    _write_png(fig_sweep, outputs.sweep)

    # the non-LTE settings shown: at the median of the epochs' water rates when the run recorded them
    waters = water_per_epoch(limits)
    water = (ExcitationWater(q_h2o=float(np.median([w.q_h2o_per_s for w in waters])) / u.s, origin="epochs",
                             source="the median of the epochs' values") if waters else None)
    nonlte, comparison = nonlte_settings(settings.coma), nonlte_comparison(settings, water)
    if nonlte is not None and water is not None:
        nonlte = with_water(nonlte, water)
    short = SHORT_CAUTION.format(excitation=excitation_caution(nonlte, comparison, short=True, waters=waters))
    sections = [("", f'<p class="caution">{html.escape(short)}</p>'),
                ("", anchored_figure_html(campaign.drivers_png, campaign.drivers_caption, campaign.drivers_alt,
                                          IMG_ID))]
    if sets:
        cost = ""
        if "rocket_mass_fraction_over_interval" in summary:
            cost = (f"<p>Over {summary['assumptions']['interval_days']:g} days the push would cost the nucleus "
                    f"{100 * summary['rocket_mass_fraction_over_interval']:.3g} % of its mass (rocket equation, "
                    "independent of the mass).</p>")
        sections.append(("Verdict (all epochs combined)",
                         verdict_section(verdicts, sets, float(settings.limits.nsigma), defaulted) + cost))
        if len(sets) > 1:
            sections.append(("How the verdict moves with the assumptions", assumption_sets_table(verdicts, sets)))
    else:
        sections.append(("Verdict", no_verdict_html(missing or ["budget.ecsv has no rows"])
                         + defaulted_html(defaulted)))
    caution = CAUTION.format(excitation=excitation_caution(nonlte, comparison, waters=waters))
    sections.append(("", f'<div class="caution" id="caution"><b>Read this first.</b> {html.escape(caution)}</div>'))
    if campaign.tracers_png is not None:
        sections.append(("Tracers", figure_html(campaign.tracers_png, campaign.tracers_caption,
                                                campaign.tracers_alt)))
    if sets:
        sections.append(("Mass budget", figure_html(
            fig_budget, "Mass-loss rate the acceleration requires (black, grey band ±1σ) against the rate each "
                        "species' upper limit allows (dashed). Where the black line lies above a dashed line, that "
                        "species alone cannot pay for the push at that nucleus mass.", "mass budget chart")))
    sections.append(("Stacked spectra", figure_html(
        fig_spec, "All epochs and lines combined in production-rate units, smallest aperture, at the quoted "
                  "temperature (the rows of the next table). Shaded: integration window. Red: model at the quoted Q "
                  "(detection); orange: model at the quoted limit; dashed: at the millimetre lines' own limit where "
                  "infrared bands enter the same limit. Beside each spectrum, what the quoted value rests on: "
                  "each instrument's Q ± 1σ and their combination (the instrument with the smaller σ carries it).",
        "stacked spectra")))
    sections.append(("Quoted production rates and limits", quoted_section(limits)))
    sections.append(("Temperature measured from line ladders", temperature_section(inputs.temperature, fig_rot)))
    sections.append(("What the line shapes say about the push", zeta_section(inputs.zeta)))
    sections.append(("Water inferred from tracers", water_section(inputs.water)))
    sections.append(("Production rates and upper limits (conservative temperature)",
                     conservative_section(limits, catalogue, float(settings.limits.nsigma))))
    sections.append(("Infrared bands and dust", infrared_section(list(inputs.bands), inputs.dust, fig_ir)))
    sections.append(("Cubes", cubes.html()))
    sections.append(("Injection–recovery", injection_section(
        list(inputs.injection), limits, {str(g["cube_id"]): str(g["observer"]) for g in geometry})))
    sections.append(("All epochs in one test", joint_section(inputs.exclusion, inputs.activity)))
    sections.append(("Forecast for planned epochs, beside the measurements", forecast_section(inputs.forecast,
                                                                                              limits)))
    r_h = u.Quantity([g["r_h"] for g in geometry], u.au).mean() if geometry else None
    sections.append((SECTION_TITLE, excitation_section(
        limits, catalogue, settings.t_kin, float(settings.limits.nsigma), nonlte, comparison, r_h,
        outflow_speed(settings.coma, r_h) if r_h is not None else None, to_png)))
    sections.append(("Temperature sweep", figure_html(
        fig_sweep, "Upper limit (all epochs, smallest aperture) against the assumed kinetic temperature; the circled "
                   "point is the most conservative value, the one reported.", "temperature sweep")))
    sections.append(("Geometry per cube", table_html(
        ["cube", "epoch", "observer", "mid-time (UTC)", "mid-time from", "r_h [au]", "Δ [au]", "Δ̇ [km/s]",
         "phase [deg]", "moved [arcsec]", "SPECSYS"],
        [[str(g["cube_id"]), str(g["epoch"]), str(g["observer"]), g["time_mid"].isot, str(g["time_source"]),
          float(g["r_h"].value), float(g["delta"].value), float(g["delta_dot"].value), float(g["phase"].value),
          float(g["motion"].value), str(g["specsys"])]
         for g in geometry], left=5)))
    left_out = limits.meta.get("apertures_left_out", {})
    if left_out:
        sections.append(("Apertures left out of combinations", "<p>Cubes may have their own apertures; each "
                         "combination (an epoch, all epochs) uses only the apertures every one of its cubes has.</p>"
                         + table_html(["species", "epoch group", "left out"],
                                      [[sp, group, text] for sp, groups in left_out.items()
                                       for group, text in groups.items()], left=3)))
    sections.append(("Assumptions", assumptions_section(dict(limits.meta.get("assumptions", {})), summary)))
    sections.append(("Provenance", provenance_section(__version__, limits.meta.get("provenance", {}),
                                                      settings.record)))
    title = f"gasledger report: {settings.campaign}"
    sub = f"Target: {settings.target.name}. Species: {', '.join(settings.species)}."
    write_text(page(title, sections, sub), outputs.html)
