"""A tiny, self-consistent one-cube campaign for the bad-input tests, and the workflow's steps run in-process.

:func:`tiny_campaign` writes one small noise cube holding the HCN 265.886 GHz line's band (TOPOCENT, Jy/beam,
0.3 arcsec pixels), an ephemeris table that keeps the target at the cube's centre with a known range rate, and
returns a validated campaign config pointing at them. Each bad-input test then spoils one thing (a header card,
a column, a config key) and runs :func:`run_workflow`: the checks rules/common.smk makes while Snakemake builds
the job graph, then every stage in workflow order inside ``stage_errors``, as the rule scripts run them.
Everything is invented (no real object or site).
"""

from __future__ import annotations

import copy
import logging
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable
from astropy.time import Time

from pipeline.catalogue.entries import load_catalogue
from pipeline.io.cube_index import cube_spans
from pipeline.settings import Settings, check_inputs_exist, graph_settings, validate_config
from pipeline.errors import GasledgerError
from pipeline.geometry.orbit import write_ephemeris
from pipeline.workflow import comoving, extract, geometry, limits, stack
from pipeline.workflow.common import stage_errors
from pipeline.catalogue.coverage import lines_for_cube

__all__ = ["TinyCampaign", "tiny_campaign", "cube_hdu", "write_hdu", "ephemeris_table", "outputs_below",
           "LINE_ID", "CUBE_ID", "N_CHAN", "Failed", "dag_checks", "run_workflow", "assert_one_sentence"]

log = logging.getLogger("gasledger.test")

LINE_ID = "HCN_265886"
CUBE_ID = "c1"
N_CHAN, N_PIX = 240, 48
DELTA_DOT = 12.0                    # km/s, receding (topocentric range rate of the invented target)
RA0, DEC0 = 150.0, -20.0            # cube centre and target position [deg]
MID = "2030-06-01T02:30:00"         # mid-time of the exposure (UTC)


@dataclass(frozen=True)
class TinyCampaign:
    """Paths and config of the tiny campaign (all below ``root``)."""

    root: Path
    cube: Path
    ephemeris: Path
    outdir: Path
    config: dict[str, Any]

    def fresh_config(self, **changes) -> dict[str, Any]:
        """A deep copy of the validated config with top-level ``changes`` applied."""
        config = copy.deepcopy(self.config)
        config.update(copy.deepcopy(changes))
        return config


def cube_hdu(seed: int = 3, data: np.ndarray | None = None, **cards) -> fits.PrimaryHDU:
    """The tiny cube as an HDU: N(0, 0.01) Jy/beam noise; ``cards`` override (None removes) header cards."""
    f0 = load_catalogue().get_line(LINE_ID).freq.to_value(u.Hz)
    f_obs = f0 * (1 - DELTA_DOT / const.c.to_value(u.km / u.s))    # radio-convention shift, ample for the test
    df = 244140.625
    if data is None:
        data = 0.01 * np.random.default_rng(seed).standard_normal((N_CHAN, N_PIX, N_PIX))
    h = fits.Header()
    values = {
        "CTYPE1": "RA---SIN", "CRVAL1": RA0, "CDELT1": -0.3 / 3600, "CRPIX1": N_PIX / 2 + 0.5, "CUNIT1": "deg",
        "CTYPE2": "DEC--SIN", "CRVAL2": DEC0, "CDELT2": 0.3 / 3600, "CRPIX2": N_PIX / 2 + 0.5, "CUNIT2": "deg",
        "CTYPE3": "FREQ", "CRVAL3": f_obs - (N_CHAN / 2) * df, "CDELT3": df, "CRPIX3": 1.0, "CUNIT3": "Hz",
        "SPECSYS": "TOPOCENT", "RADESYS": "ICRS", "RESTFRQ": f0,
        "BUNIT": "Jy/beam", "BMAJ": 1.0 / 3600, "BMIN": 0.8 / 3600, "BPA": 20.0,
        "DATE-OBS": "2030-06-01T02:00:00", "DATE-END": "2030-06-01T03:00:00",
    }
    values.update(cards)
    for key, value in values.items():
        if value is not None:
            h[key] = value
    return fits.PrimaryHDU(np.asarray(data, dtype=np.float32), header=h)


def write_hdu(hdu: fits.PrimaryHDU, path: str | Path) -> Path:
    """Write ``hdu`` to ``path`` (overwriting) and return the path."""
    path = Path(path)
    hdu.writeto(path, overwrite=True)
    return path


def ephemeris_table(start: str = "2030-05-31T00:00:00", hours: float = 72.0, step_h: float = 2.0) -> QTable:
    """A table keeping the target at the cube centre with a constant range rate."""
    times = Time(start, scale="utc") + np.arange(0.0, hours + step_h / 2, step_h) * u.hour
    n = len(times)
    return QTable({"time": times, "ra": np.full(n, RA0) * u.deg, "dec": np.full(n, DEC0) * u.deg,
                   "r_h": np.full(n, 1.2) * u.au, "delta": np.full(n, 0.8) * u.au,
                   "delta_dot": np.full(n, DELTA_DOT) * u.km / u.s})


def tiny_campaign(root: str | Path, **cube_cards) -> TinyCampaign:
    """Write the tiny cube (with ``cube_cards`` applied) and ephemeris below ``root``; return paths and config."""
    root = Path(root)
    (root / "data").mkdir(parents=True, exist_ok=True)
    cube = write_hdu(cube_hdu(**cube_cards), root / "data" / f"{CUBE_ID}.fits")
    eph = root / "data" / "eph.ecsv"
    write_ephemeris(ephemeris_table(), eph)
    outdir = root / "results"
    config = validate_config({
        "outdir": str(outdir),
        "target": {"ephemeris": str(eph)},
        "cubes": [{"path": str(cube), "id": CUBE_ID, "epoch": "e1"}],
        "species": ["HCN"],
        "apertures_km": [1000.0],
        "comoving": {"half_width_km_s": 25.0},
        "excitation": {"t_kin_K": [40.0]},
    })
    return TinyCampaign(root=root, cube=cube, ephemeris=eph, outdir=outdir, config=config)


def outputs_below(folder: str | Path) -> list[str]:
    """Every file below ``folder`` (relative names, sorted); [] when the folder does not exist."""
    folder = Path(folder)
    if not folder.exists():
        return []
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*") if p.is_file())


class Failed(Exception):
    """A step of the run stopped: which step, the output it did not write, its exit code and its message."""

    def __init__(self, step: str, output: Path | None, code, message: str):
        super().__init__(f"{step}: {message}")
        self.step, self.output, self.code, self.message = step, output, code, message


def dag_checks(config: dict) -> tuple[dict, dict, Any]:
    """The calls rules/common.smk makes while Snakemake builds the job graph: (cubes, lines per cube, catalogue).

    On a GasledgerError rules/common.smk calls ``sys.exit(f"gasledger: {exc}")``, which prints that line to
    stderr and exits with status 1 (Python's SystemExit semantics; test_cli_bad_inputs.py sees it for real);
    here that is a :class:`Failed` of step ``'dag'`` carrying the sentence.
    """
    try:
        validate_config(config, source="config")
        check_inputs_exist(config, source="config")
        settings = graph_settings(config)
        catalogue = settings.catalogue()
        for name in config["species"]:
            catalogue.get_species(name)
        cubes = {c.cube_id: c for c in settings.cubes}
        spans = cube_spans({cid: (c.path, c.beam_arcsec) for cid, c in cubes.items()})   # no index: always read
        lines = {cid: lines_for_cube(spans[cid], catalogue, config["species"]) for cid in cubes}
    except GasledgerError as exc:
        raise Failed("dag", None, 1, str(exc)) from None
    return cubes, lines, catalogue


def _stage(step: str, output: Path, func: Callable, *args) -> None:
    """Run one stage as its rule script does (inside stage_errors); raise Failed on its exit."""
    try:
        with stage_errors(log):
            func(*args)
    except SystemExit as stop:
        raise Failed(step, output, stop.code, "") from None


def run_workflow(config: dict) -> Path:
    """The job graph's checks, then every stage in workflow order; returns the outdir."""
    cubes, lines, catalogue = dag_checks(config)
    settings = Settings.from_config(config)
    out = Path(config["outdir"])
    spectra = {}
    for cid, c in cubes.items():
        geo = out / "geometry" / f"{cid}.ecsv"
        _stage("geometry", geo, geometry.run, settings.with_cube(cid), str(geo))
        for line in lines[cid]:
            sub = out / "comoving" / cid / f"{line}.fits"
            _stage("comoving", sub, comoving.run, str(geo), line, settings.with_cube(cid), str(sub))
            spec = out / "spectra" / cid / f"{line}.fits"
            _stage("extract", spec, extract.run, str(sub), settings.with_cube(cid), str(spec))
            spectra.setdefault(catalogue.get_line(line).species, {}).setdefault(c.epoch, []).append(str(spec))
    for species in config["species"]:
        parts = []
        for epoch, paths in spectra.get(species, {}).items():
            part = out / "stack_epoch" / species / f"{epoch}.fits"
            _stage("stack_epoch", part, stack.run_epoch, paths, species, epoch, settings, str(part))
            parts.append(str(part))
        stk = out / "stack" / f"{species}.fits"
        _stage("stack", stk, stack.run, parts, species, settings, str(stk))
        lim = out / "limits" / f"{species}.ecsv"
        _stage("limits", lim, limits.run_species, str(stk), settings, str(lim))
    return out


def assert_one_sentence(text: str) -> None:
    """One line, no traceback, no second sentence (a full stop followed by a capital letter)."""
    assert text and "\n" not in text.strip(), text
    assert "Traceback" not in text, text
    assert not re.search(r"[.!?]\s+[A-Z]", text), text
