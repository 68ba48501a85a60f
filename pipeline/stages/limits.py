"""Stage 'limits': Q, errors, detections and upper limits per species, and the joined limits.ecsv."""

from __future__ import annotations

from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable, Table

from ..atomic import write_table
from ..limits import join_limits, limit_rows, mark_conservative
from ..provenance import provenance_record

__all__ = ["run_species", "run_join"]


def run_species(stack_path: str, config: dict[str, Any], out_path: str) -> None:
    """Limits of one species from its stack file."""
    with fits.open(stack_path) as hdul:
        species = hdul[0].header["GLSPEC"]
        summary = Table.read(hdul["SUMMARY"])
    nsigma = float(config["limits"]["nsigma"])
    tables = []
    if "q" in summary.colnames:
        for group in dict.fromkeys(summary["epoch"]):
            sel = summary[summary["epoch"] == group]
            t = np.unique(np.asarray(sel["t_kin"], dtype=float))
            n_ap = int(np.max(sel["aperture_index"])) + 1
            q = np.full((t.size, n_ap), np.nan)
            s = np.full_like(q, np.nan)
            ap = np.zeros(n_ap)
            for row in sel:
                i = int(np.searchsorted(t, row["t_kin"]))
                q[i, row["aperture_index"]] = row["q"]
                s[i, row["aperture_index"]] = row["sigma_q"]
                ap[row["aperture_index"]] = row["aperture_km"]
            tables.append(limit_rows(species, str(group), t * u.K, ap * u.km, q / u.s, s / u.s, nsigma,
                                     str(sel["lines"][0]).split(","), str(sel["cubes"][0]).split(",")))
    if tables:
        table = join_limits(tables)
    else:  # the species was not covered by any cube: an empty table with the contract's columns
        table = limit_rows(species, "all", [] * u.K, [] * u.km, np.zeros((0, 0)) / u.s,
                           np.ones((0, 0)) / u.s, nsigma, [], [])
    table.meta["provenance"] = provenance_record(config, [stack_path], "limits")
    write_table(table, out_path)


def run_join(species_paths: list[str], config: dict[str, Any], out_path: str) -> None:
    """Join the per-species limits into limits.ecsv, flagging the conservative temperature."""
    tables = [QTable.read(p, format="ascii.ecsv") for p in species_paths]
    for t in tables:
        t.meta.clear()
    tables = [t for t in tables if len(t)] or tables[:1]
    table = mark_conservative(join_limits(tables))
    table.meta["provenance"] = provenance_record(config, species_paths, "limits")
    table.meta["assumptions"] = {
        "excitation": "LTE at T_kin, optically thin, cosmic background 2.725 K",
        "coma": "Haser parent distribution, isotropic uniform outflow",
        "outflow_km_s": config["coma"]["outflow_km_s"],
        "photodestruction": f"{config['coma']['solar_activity']} Sun, lifetimes scaled as r_h^2",
        "q_upper": "Bayesian, flat prior on Q >= 0, one-sided confidence of nsigma",
        "nsigma": config["limits"]["nsigma"],
        "epoch 'all'": "constant Q over the epochs combined",
    }
    write_table(table, out_path)
