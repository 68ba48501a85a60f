"""Stage 'campaign': the combinations over all epochs, in one job each.

``run_limits``: every species' stack over its epochs' kept inputs (:func:`pipeline.workflow.stack.run`), the
rotational temperatures from those stacks (:func:`pipeline.workflow.temperature.run`), every species' limits at
them (:func:`pipeline.workflow.limits.run_species`) and the joined tables (:func:`pipeline.workflow.limits.run_join`).
``run_injections``: every species' injection-recovery from its epochs' kept measurements
(:func:`pipeline.workflow.injection.run`).

These steps read one another's files and each combines what every epoch contributed, so a new epoch reruns all of
them; run as one job, they pay one interpreter start and one set of imports instead of one per step and species.
Each file is written as the step run apart writes it (the same functions, every file atomically).
"""

from __future__ import annotations

import logging

from pipeline.settings import Settings

__all__ = ["run_limits", "run_injections"]

log = logging.getLogger(__name__)


def run_limits(epoch_paths: dict[str, list[str]], settings: Settings, stack_paths: dict[str, str],
               temperature_path: str, species_paths: dict[str, str], limits_path: str, json_path: str,
               geometry_paths: list[str], activity_path: str) -> None:
    """Stack each species of ``epoch_paths`` (its per-epoch stack inputs) into ``stack_paths[species]``, measure
    the temperatures, write each species' limits to ``species_paths[species]`` and join them."""
    from pipeline.workflow import limits, stack, temperature     # here: the injection job need not import them

    for k, (species, paths) in enumerate(epoch_paths.items(), 1):
        stack.run(paths, species, settings, stack_paths[species])
        log.info("stack of %s done (%d of %d species)", species, k, len(epoch_paths))
    temperature.run([stack_paths[s] for s in epoch_paths], settings, temperature_path)
    for k, species in enumerate(epoch_paths, 1):
        limits.run_species(stack_paths[species], settings, species_paths[species], temperature_path)
        log.info("limits of %s done (%d of %d species)", species, k, len(epoch_paths))
    limits.run_join([species_paths[s] for s in epoch_paths], settings, limits_path, json_path, geometry_paths,
                    activity_path)


def run_injections(epoch_paths: dict[str, list[str]], limits_path: str, budget_path: str, settings: Settings,
                   out_paths: dict[str, str]) -> None:
    """The injection-recovery of each species of ``epoch_paths`` (its per-epoch measurements), written to
    ``out_paths[species]``."""
    from pipeline.workflow import injection                      # here: the limits job need not import it

    for k, (species, paths) in enumerate(epoch_paths.items(), 1):
        injection.run(paths, species, limits_path, budget_path, settings, out_paths[species])
        log.info("injection-recovery of %s done (%d of %d species)", species, k, len(epoch_paths))
