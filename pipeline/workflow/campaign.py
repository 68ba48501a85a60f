"""Stage 'campaign': every combination over all epochs, in one job.

In turn: every species' stack over its epochs' kept inputs (:func:`pipeline.workflow.stack.run`), the rotational
temperatures (:func:`pipeline.workflow.temperature.run`), every species' limits (:func:`pipeline.workflow.limits.
run_species`) and the joined tables (:func:`~pipeline.workflow.limits.run_join`); the dust
(:func:`pipeline.workflow.dust.run`); the mass budget (:func:`pipeline.workflow.budget.run`); every species'
injection-recovery from its epochs' kept measurements (:func:`pipeline.workflow.injection.run`); the forecast
(:func:`pipeline.workflow.forecast.run`); the report (:func:`pipeline.workflow.report.run`).

Each of these reads what the steps before it wrote and combines what every epoch contributed, so a new epoch
reruns them all; as one job they pay one interpreter start and one set of imports instead of one per step and
species. Each step is the stage's own run() on the files it writes (every file atomically), given the settings of
only the config keys it reads (:data:`STEP_KEYS`, as a rule of its own would declare them), so every table's
provenance records what it depends on, and reading another key raises as it does in a rule of its own.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass
from types import SimpleNamespace

from pipeline.processes import in_processes
from pipeline.settings import Settings, sections_record
from pipeline.workflow import budget, dust, forecast, injection, limits, report, stack, temperature

__all__ = ["CampaignFiles", "STEP_KEYS", "run"]

log = logging.getLogger(__name__)

#: The config keys each step reads (a dotted key: one entry of a section); the report reads them all.
STEP_KEYS: dict[str, tuple[str, ...]] = {
    "stack": ("catalogue", "coma", "excitation", "comoving", "interferometer"),
    "temperature": ("catalogue",),
    "limits": ("catalogue", "limits.nsigma", "limits.activity_slope", "coma", "excitation"),
    "dust": ("dust",),
    "budget": ("budget", "campaign", "catalogue", "target"),
    "injection": ("excitation",),
    "forecast": ("catalogue", "planned", "comoving", "limits.nsigma", "limits.window_factor", "excitation", "coma",
                 "target", "observatory", "apertures_km", "apertures_arcsec", "interferometer",
                 "quality.max_masked_share"),
}


@dataclass(frozen=True)
class CampaignFiles:
    """What the campaign job reads and writes.

    Read: ``stack_epochs`` and ``injection_epochs`` (each species' per-epoch stack inputs and injection
    measurements, in the campaign's epoch order), ``geometry`` (every cube's), ``bands`` (every infrared cube's),
    ``cube_images`` (every cube's image), ``line_spectra`` (every line's spectra). Written: ``stacks``,
    ``species_limits`` and ``injections`` (per species), and the campaign's tables and figures (``outputs``, by
    the names :func:`pipeline.workflow.report.run` and the steps use).
    """

    stack_epochs: dict[str, list[str]]
    injection_epochs: dict[str, list[str]]
    geometry: list[str]
    bands: list[str]
    cube_images: list[str]
    line_spectra: list[str]
    stacks: dict[str, str]
    species_limits: dict[str, str]
    injections: dict[str, str]
    outputs: SimpleNamespace


def step_settings(settings: Settings, step: str) -> Settings:
    """The settings of one step: only the config keys :data:`STEP_KEYS` lists for it (all for the report)."""
    if step == "report":
        return settings
    sections = sections_record(settings.record, STEP_KEYS[step])
    return Settings.from_config(sections, sections=tuple(sections))


def run(files: CampaignFiles, settings: Settings, workers: int = 1) -> None:
    """Run every combination over all epochs, in order; each step's species (stacks, limits) on ``workers``
    processes (each species' files are its own, so the tables are the same either way), and, from the limits on,
    the report's cube figures on ``workers`` - 1 processes while this one runs the other steps (with one worker,
    everything here, in turn)."""
    out = files.outputs
    species = list(files.stack_epochs)
    given = {step: step_settings(settings, step) for step in STEP_KEYS}      # each step's settings, built once
    inputs = SimpleNamespace(limits=out.limits, budget_ecsv=out.budget_ecsv, budget_json=out.budget_json,
                             geometry=files.geometry, stacks=[files.stacks[s] for s in species],
                             temperature=out.temperature, injection=[files.injections[s] for s in species],
                             exclusion=out.exclusion, water=out.water, zeta=out.zeta, activity=out.activity,
                             forecast=out.forecast, bands=files.bands, dust=out.dust, cube_images=files.cube_images)
    steps = 0

    def done(what: str, started: float) -> None:
        nonlocal steps
        steps += 1
        log.info("%s done in %.1f s (step %d of 7)", what, time.perf_counter() - started, steps)

    t0 = time.perf_counter()
    in_processes(lambda name: stack.run(files.stack_epochs[name], name, given["stack"], files.stacks[name]),
                 species, workers)
    done(f"stacks of {len(species)} species", t0)
    t0 = time.perf_counter()
    temperature.run([files.stacks[s] for s in species], given["temperature"], out.temperature)
    done("temperatures", t0)
    t0 = time.perf_counter()
    in_processes(lambda name: limits.run_species(files.stacks[name], given["limits"], files.species_limits[name],
                                                 out.temperature), species, workers)
    limits.run_join([files.species_limits[s] for s in species], given["limits"], out.limits,
                    out.limits_json, files.geometry, out.activity)
    done("limits", t0)
    # the report's cube figures need only the limits: made on workers - 1 processes while this one runs the steps
    # below (the job's threads: one busy process each)
    cubes = report.cube_section(inputs, out, settings, files.line_spectra).start(workers - 1)
    try:
        t0 = time.perf_counter()
        dust.run(files.bands, given["dust"], out.afrho, out.dust)
        done("dust", t0)
        t0 = time.perf_counter()
        budget.run(out.limits, files.geometry, given["budget"], out.budget_ecsv, out.budget_json,
                   out.exclusion, dust_path=out.dust, out_water=out.water, out_zeta=out.zeta)
        done("budget", t0)
        t0 = time.perf_counter()
        for name in species:
            injection.run(files.injection_epochs[name], name, out.limits, out.budget_ecsv, given["injection"],
                          files.injections[name])
        forecast.run(out.budget_ecsv, given["forecast"], out.forecast)
        done("injection-recovery and forecast", t0)
        t0 = time.perf_counter()
        report.run(inputs, out, settings, files.line_spectra, cubes=cubes)
        done("report", t0)
    except BaseException:
        cubes.close()
        raise
