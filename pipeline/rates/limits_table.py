"""Production rates, detections and upper limits from stacked measurements.

For each species, epoch group ('all' = every epoch combined), kinetic
temperature and aperture: Q ± σ_Q, the signal-to-noise ratio, a detection flag
(snr ≥ n), and three upper limits at the one-sided confidence of n σ: the
classical Q + nσ, the Bayesian limit with a flat prior on Q ≥ 0 (reported as
``q_upper``), and the Feldman–Cousins upper end. The temperature giving the
largest ``q_upper`` per (species, epoch, aperture) is flagged ``conservative``.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.table import QTable, vstack

from pipeline.rates.statistics import (bayesian_upper_limit, classical_upper_limit, feldman_cousins_upper_limit,
                           nsigma_to_confidence)

__all__ = ["LIMIT_COLUMNS", "limit_rows", "mark_conservative", "mark_adopted", "join_limits"]

#: The column contract of limits.ecsv (more columns may follow these).
LIMIT_COLUMNS = ("species", "epoch", "aperture_km", "t_kin_K", "q", "q_err", "q_upper", "snr", "detected")


def limit_rows(species: str, epoch: str, t_kin: u.Quantity, aperture_km: u.Quantity,
               q: u.Quantity, sigma_q: u.Quantity, nsigma: float, lines: list[str],
               cubes: list[str]) -> QTable:
    """Rows of the limits table for one species and epoch group.

    ``q`` and ``sigma_q`` have shape (n_T, n_ap).
    """
    t = np.atleast_1d(u.Quantity(t_kin, u.K))
    ap = np.atleast_1d(u.Quantity(aperture_km, u.km))
    qv = u.Quantity(q, 1 / u.s).value
    sv = u.Quantity(sigma_q, 1 / u.s).value
    cl = float(nsigma_to_confidence(nsigma))
    tt, aa = np.meshgrid(t.value, ap.value, indexing="ij")
    flat = {k: v.ravel() for k, v in {"t": tt, "a": aa, "q": qv, "s": sv}.items()}
    n = flat["q"].size
    snr = flat["q"] / flat["s"]
    table = QTable({
        "species": [species] * n,
        "epoch": [epoch] * n,
        "aperture_km": flat["a"] * u.km,
        "t_kin_K": flat["t"],
        "q": flat["q"] / u.s,
        "q_err": flat["s"] / u.s,
        "q_upper": np.asarray(bayesian_upper_limit(flat["q"], flat["s"], cl)) / u.s,
        "snr": snr,
        "detected": snr >= nsigma,
        "q_upper_classical": np.asarray(classical_upper_limit(flat["q"], flat["s"], nsigma)) / u.s,
        "q_upper_fc": np.asarray(feldman_cousins_upper_limit(flat["q"], flat["s"], cl)) / u.s,
        "confidence": np.full(n, cl),
        "n_lines": np.full(n, len(set(lines))),
        "n_cubes": np.full(n, len(set(cubes))),
        "lines": [",".join(sorted(set(lines)))] * n,
    })
    return table


def mark_conservative(table: QTable) -> QTable:
    """Add the boolean column ``conservative``: the largest q_upper over the sweep's temperatures.

    Rows at a measured or configured temperature (column ``t_origin``) are not part of the sweep.
    """
    flag = np.zeros(len(table), dtype=bool)
    keys = list(zip(table["species"], table["epoch"], np.round(table["aperture_km"].to_value(u.km), 6)))
    qup = table["q_upper"].to_value(1 / u.s)
    sweep = (np.isin(np.asarray(table["t_origin"], dtype=str), ("sweep", "conservative"))
             if "t_origin" in table.colnames else np.ones(len(table), dtype=bool))
    best: dict = {}
    for i, k in enumerate(keys):
        if not sweep[i]:
            continue
        if k not in best or qup[i] > qup[best[k]]:
            best[k] = i
    flag[list(best.values())] = True
    table["conservative"] = flag
    return table


def mark_adopted(table: QTable, lines_measured: bool = True) -> QTable:
    """Where no detection at a measured or configured temperature is quoted, quote the conservative sweep row.

    A species measured only in infrared bands (``lines_measured`` False) has a Q that does not depend on the
    temperature: its quoted row says so (t_origin 'not needed').
    """
    keys = list(zip(table["species"], table["epoch"], np.round(table["aperture_km"].to_value(u.km), 6)))
    quoted = {k for k, a in zip(keys, table["adopted"]) if a}
    qup = table["q_upper"].to_value(1 / u.s)
    best: dict = {}
    for i, k in enumerate(keys):
        if table["t_origin"][i] != "sweep" or k in quoted:
            continue
        if k not in best or qup[i] > qup[best[k]]:
            best[k] = i
    for i in best.values():
        table["adopted"][i] = True
        table["t_origin"][i] = "conservative" if lines_measured else "not needed"
        table["t_source"][i] = ("largest limit over the sweep" if lines_measured
                                else "infrared bands: Q does not depend on T")
    return table


def join_limits(tables: list[QTable]) -> QTable:
    """Concatenate per-species limit tables in a stable order."""
    table = vstack(tables, join_type="exact") if len(tables) > 1 else tables[0]
    order = np.lexsort((table["t_kin_K"], table["aperture_km"].value,
                        [e if e != "all" else "~" for e in table["epoch"]], table["species"]))
    return table[order]
