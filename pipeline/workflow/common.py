"""Shared pieces of the stages: logging, catalogue, coma model, apertures and site from the config."""

from __future__ import annotations

import contextlib
import logging
import sys
from pathlib import Path
from typing import Any

import astropy.units as u

from pipeline.catalogue.entries import Catalogue, load_catalogue
from pipeline.errors import GasledgerError
from pipeline.offline import future_time_tolerated
from pipeline.geometry.observing import observer_location
from pipeline.coma.response import ComaModel

__all__ = ["stage_errors", "setup_logging", "catalogue_from_config", "coma_model", "aperture_radii", "location_from_config",
           "temperatures"]


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


def catalogue_from_config(config: dict[str, Any]) -> Catalogue:
    """The user catalogue named in the config, or the built-in one."""
    if "catalogue" in config:
        cat = config["catalogue"]
        return load_catalogue(cat["species_file"], cat["lines_file"], cat.get("bands_file"))
    return load_catalogue()


def coma_model(config: dict[str, Any]) -> ComaModel:
    """Outflow and photodestruction assumptions from the ``coma`` section."""
    coma = config.get("coma", {})
    return ComaModel(outflow=coma.get("outflow_km_s", "law"), solar_activity=coma.get("solar_activity", "quiet"))


def aperture_radii(config: dict[str, Any]) -> list[u.Quantity]:
    """Aperture radii: lengths at the target first, then sky angles."""
    radii = [r * u.km for r in config.get("apertures_km", [])]
    radii += [r * u.arcsec for r in config.get("apertures_arcsec", [])]
    return radii


def location_from_config(config: dict[str, Any]):
    """EarthLocation of the observatory, or None for the geocentre."""
    return observer_location(config.get("observatory", "geocentre"))


def temperatures(config: dict[str, Any]) -> u.Quantity:
    """The kinetic temperatures of the sweep."""
    return u.Quantity(config["excitation"]["t_kin_K"], u.K)
