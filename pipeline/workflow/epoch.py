"""Stage 'epoch': everything one epoch contributes to the campaign's combinations, in one job.

For every species the epoch's cubes cover (H2O first: its measured water production rate excites the other
species' lines under non-LTE), the epoch's spectra and band measurements in Q units, the stack's inputs
(:func:`pipeline.workflow.stack.run_epoch`, ``<stack folder>/<species>.fits``), then every injection placement
measured (:func:`pipeline.workflow.injection.run_epoch`, ``<injection folder>/<species>.ecsv``). Nothing here
depends on another epoch, so a new epoch runs only its own job; the campaign's combinations read these files.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path

from pipeline.settings import Settings
from pipeline.workflow import injection, stack

__all__ = ["SpeciesPlan", "run"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class SpeciesPlan:
    """What the epoch's job does for one species: the files it reads and writes.

    ``spectra``: the lines' spectra files; ``bands``: the infrared cubes' bands files; ``subcubes``: the lines'
    sub-cubes; ``stack`` and ``injection``: the files written; ``water`` (``water_injection``): the epoch's H2O
    stack inputs whose measured water excites the stack's (the injection's model comae's) lines, or None.
    """

    species: str
    spectra: list[str]
    bands: list[str]
    subcubes: list[str]
    stack: str
    injection: str
    water: str | None = None
    water_injection: str | None = None


def run(plan: list[SpeciesPlan], epoch: str, settings: Settings, stack_dir: str, injection_dir: str) -> None:
    """Write each planned species' stack inputs and injection measurements of ``epoch`` (in the plan's order,
    which puts H2O before the species whose excitation reads its water)."""
    Path(stack_dir).mkdir(parents=True, exist_ok=True)
    Path(injection_dir).mkdir(parents=True, exist_ok=True)
    for k, p in enumerate(plan, 1):
        stack.run_epoch(list(p.spectra) + list(p.bands), p.species, epoch, settings, p.stack, water_path=p.water)
        injection.run_epoch(list(p.subcubes), p.species, epoch, settings, p.injection, list(p.bands), p.stack,
                            water_path=p.water_injection)
        log.info("epoch %s: %s done (%d of %d species)", epoch, p.species, k, len(plan))
