"""Water inferred from tracers: a tracer's quoted Q or limit divided by a configured abundance range.

Where H2O itself is not observed (or as a cross-check where it is), a trace species' production rate and an
abundance range relative to water from the literature bound the water production:
Q(H2O) = Q(tracer) / x with x in [x_min, x_max]. The result is an inference resting on the assumed abundances
(cometary abundance ranges span an order of magnitude), shown apart from the measurements and never used for a
budget verdict.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.table import QTable

__all__ = ["TracerAbundance", "inferred_water"]


@dataclass(frozen=True)
class TracerAbundance:
    """An abundance range of a tracer relative to water (fractions) and its published source."""

    species: str
    low: float
    high: float
    ref: str


def inferred_water(limits: QTable, budget: QTable, tracers: tuple[TracerAbundance, ...]) -> QTable:
    """One row per tracer, epoch group and aperture: the water production its quoted value implies.

    For a detection Q +- sigma (the temperature's systematic added in quadrature): Q(H2O) from Q / x_max to
    Q / x_min, widened by 2 sigma (``q_h2o_low`` from (Q - 2 sigma) / x_max, floored at 0, ``q_h2o_high`` from
    (Q + 2 sigma) / x_min). For an upper limit: ``q_h2o_high`` = q_upper / x_min and ``q_h2o_low`` = 0. Beside it,
    the water rate the push requires at that epoch (budget, first assumption set, lightest to heaviest nucleus)
    and what the comparison says, phrased as an inference.
    """
    rows = []
    base = budget[budget["assumption_set"] == budget["assumption_set"][0]] if len(budget) else budget
    for tracer in tracers:
        sel = limits[(limits["species"] == tracer.species) & np.asarray(limits["adopted"], bool)]
        for r in sel:
            q = float(r["q"].to_value(1 / u.s))
            err = float(np.hypot(r["q_err"].to_value(1 / u.s), np.nan_to_num(r["q_sys"].to_value(1 / u.s))))
            if bool(r["detected"]):
                low, high = max(q - 2 * err, 0.0) / tracer.high, (q + 2 * err) / tracer.low
                kind = "detection"
            else:
                low, high = 0.0, float(r["q_upper"].to_value(1 / u.s)) / tracer.low
                kind = "upper limit"
            need = base[(base["species"] == "H2O") & (base["epoch"] == r["epoch"])] if len(base) else base
            req = (float(need["q_required_min"][0].to_value(1 / u.s)), float(need["q_required_max"][0].to_value(1 / u.s))
                   ) if len(need) else (np.nan, np.nan)
            if not np.isfinite(req[0]):
                reading = "no water requirement computed for this epoch"
            elif high < req[0]:
                reading = (f"if the abundance range holds, water falls short of the push by at least "
                           f"{req[0] / high:.3g}x (inference)")
            elif low > req[1]:
                reading = "if the abundance range holds, water exceeds what the push needs (inference)"
            else:
                reading = "the inferred range overlaps what the push needs: no conclusion (inference)"
            rows.append({"tracer": tracer.species, "epoch": str(r["epoch"]),
                         "aperture_km": float(r["aperture_km"].to_value(u.km)), "kind": kind, "q_tracer": q,
                         "q_tracer_err": err, "abundance_low": tracer.low, "abundance_high": tracer.high,
                         "q_h2o_low": low, "q_h2o_high": high, "q_h2o_required_min": req[0],
                         "q_h2o_required_max": req[1], "reading": reading, "abundance_ref": tracer.ref})
    names = ["tracer", "epoch", "aperture_km", "kind", "q_tracer", "q_tracer_err", "abundance_low", "abundance_high",
             "q_h2o_low", "q_h2o_high", "q_h2o_required_min", "q_h2o_required_max", "reading", "abundance_ref"]
    table = QTable(rows=[[r[n] for n in names] for r in rows], names=names) if rows else QTable(
        names=names, dtype=[str, str, float, str, float, float, float, float, float, float, float, float, str, str])
    for name in ("q_tracer", "q_tracer_err", "q_h2o_low", "q_h2o_high", "q_h2o_required_min", "q_h2o_required_max"):
        table[name] = u.Quantity(np.asarray(table[name], dtype=float), 1 / u.s)
    table["aperture_km"] = u.Quantity(np.asarray(table["aperture_km"], dtype=float), u.km)
    table.meta["caution"] = ("an inference resting on the assumed abundance ranges (budget.water_from_tracers); not a "
                             "measurement of water and never used for a verdict")
    return table
