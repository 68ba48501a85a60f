"""Shared pieces of the workflow steps: the log, one-sentence errors, and a rule's typed settings."""

from __future__ import annotations

import contextlib
import gc
import json
import logging
import sys
from pathlib import Path
from typing import Any

from pipeline.errors import GasledgerError
from pipeline.offline import future_time_tolerated
from pipeline.settings import Settings

__all__ = ["stage_errors", "setup_logging", "rule_settings", "end_of_job"]


@contextlib.contextmanager
def stage_errors(log: logging.Logger):
    """Turn a gasledger error into one logged sentence and exit status 1 (no traceback)."""
    try:
        with future_time_tolerated():
            yield
    except GasledgerError as exc:
        log.error("%s", exc)
        print(f"gasledger: {exc}", file=sys.stderr)
        raise SystemExit(1) from None


def setup_logging(log_path: str | Path | None) -> logging.Logger:
    """Log INFO and above to ``log_path`` (and warnings to stderr); capture Python warnings."""
    root = logging.getLogger()
    root.setLevel(logging.INFO)
    for h in list(root.handlers):
        root.removeHandler(h)
    fmt = logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s")
    if log_path is not None:
        Path(log_path).parent.mkdir(parents=True, exist_ok=True)
        fh = logging.FileHandler(log_path, mode="w", encoding="utf-8")
        fh.setFormatter(fmt)
        root.addHandler(fh)
    sh = logging.StreamHandler(sys.stderr)
    sh.setLevel(logging.WARNING if log_path is not None else logging.INFO)
    sh.setFormatter(fmt)
    root.addHandler(sh)
    logging.captureWarnings(True)
    return logging.getLogger("gasledger")


def rule_settings(smk: Any) -> Settings:
    """The typed settings of a rule's job: its ``settings`` param (the config sections the rule declares, and the
    entry of its cube for per-cube rules) parsed by :meth:`pipeline.settings.Settings.from_config`."""
    given = json.loads(smk.params.settings)
    return Settings.from_config(given["sections"], cube=given.get("cube"), sections=given["sections"])


def end_of_job() -> None:
    """The last call of a rule's script, after its work: the process's objects are frozen for the garbage collector
    (:func:`gc.freeze`), so that the interpreter's exit, which follows at once, does not traverse them all again
    (0.2-0.4 s less per job, measured on a millimetre cube's job). Nothing is written or flushed differently."""
    gc.freeze()
