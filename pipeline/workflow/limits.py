"""Stage 'limits': Q, errors, detections and upper limits per species, and the joined limits.ecsv."""

from __future__ import annotations

import logging
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

from pipeline.coma.response import nonlte_settings
from pipeline.io.atomic import write_json, write_table
from pipeline.io.columns import described
from pipeline.io.memo import Memo, memo_path
from pipeline.io.products import SpeciesStack
from pipeline.io.provenance import provenance_record
from pipeline.io.tables import cell_float, table_as_json, read_table, table_cache
from pipeline.rates.activity import activity_table
from pipeline.rates.detections import add_fit_columns, filtering_columns, fit_detections, mark_opacity, opacity_columns
from pipeline.rates.limits_table import join_limits, limit_rows, mark_adopted, mark_conservative
from pipeline.rates.statistics import bayesian_upper_limit, inverse_variance_mean
from pipeline.rates.temperature import adopted_temperature, q_at_temperature, temperature_systematic, window_measures
from pipeline.settings import Settings

__all__ = ["run_species", "run_join", "epoch_geometry"]

log = logging.getLogger(__name__)
ALL_GROUP = "all"


#: Columns that say which row the report quotes and at which temperature (filled for sweep rows too).
ADOPTION_COLUMNS = {"t_origin": "sweep", "t_source": "sweep", "t_kin_lo_K": np.nan, "t_kin_hi_K": np.nan,
                    "q_sys": np.nan, "adopted": False}


def _with_adoption_columns(table: QTable) -> QTable:
    for name, value in ADOPTION_COLUMNS.items():
        if name not in table.colnames:
            kind = "U16" if isinstance(value, str) else type(value)
            table[name] = np.full(len(table), value, dtype=kind)
    table["q_sys"] = u.Quantity(np.asarray(u.Quantity(table["q_sys"]).value, dtype=float), 1 / u.s)
    for name in ("t_kin_lo_K", "t_kin_hi_K"):
        table[name] = np.asarray(table[name], dtype=float)
    table["t_origin"] = np.asarray(table["t_origin"], dtype="U16")
    table["t_source"] = np.asarray(table["t_source"], dtype="U64")
    return table


def _adopted_rows(species: str, group: str, sel, measures, fits, settings: Settings, nsigma: float,
                  inputs, catalogue) -> list[QTable]:
    """Rows at the measured or configured temperature, one per aperture of the group (none without either)."""
    configured = settings.t_adopted.to_value(u.K) if settings.t_adopted is not None else None
    out = []
    for label in dict.fromkeys(str(a) for a in sel["aperture"]):
        choice = adopted_temperature(fits, str(group), label, configured)
        members = [m for m in measures if str(group) in (ALL_GROUP, m.epoch) and m.aperture == label]
        if choice is None or not any(m.kind == "line" for m in members):
            continue                    # nothing measured, or only bands (their Q does not depend on T)
        t = choice["t"]
        q, s, _, _ = q_at_temperature(members, t)
        ap = float(np.asarray(sel["aperture_km"], dtype=float)[np.asarray(sel["aperture"]) == label][0])
        rows = limit_rows(species, str(group), [t] * u.K, [ap] * u.km, np.array([[q]]) / u.s, np.array([[s]]) / u.s,
                          nsigma, str(sel["lines"][0]).split(","), str(sel["cubes"][0]).split(","))
        add_fit_columns(rows)
        opacity_columns(rows, inputs, catalogue, species, settings.coma.solar_activity)
        rows["surviving_fraction"] = np.full(1, np.nan)
        lo, hi = ((choice["lo"], choice["hi"]) if choice["origin"] == "measured"
                  else (float(np.min(settings.t_kin.to_value(u.K))), float(np.max(settings.t_kin.to_value(u.K)))))
        rows["t_origin"] = np.array([choice["origin"]], dtype="U16")
        rows["t_source"] = np.array([choice["source"]], dtype="U64")
        rows["t_kin_lo_K"] = [choice["lo"]]
        rows["t_kin_hi_K"] = [choice["hi"]]
        rows["q_sys"] = [temperature_systematic(members, t, lo, hi)] / u.s
        q_d, s_d, _, _ = q_at_temperature(members, t, distributed=True)
        rows["q_distributed"] = [q_d] / u.s
        rows["q_distributed_err"] = [s_d] / u.s
        rows["adopted"] = [bool(rows["detected"][0])]
        # under non-LTE at T_kin = the adopted temperature (the measured rotational temperature taken as the gas
        # kinetic temperature), from each line's non-LTE S(T); NaN without the comparison
        q_n, s_n, _, _ = q_at_temperature(members, t, nonlte=True)
        rows["q_nonlte"] = [q_n] / u.s
        rows["q_nonlte_err"] = [s_n] / u.s
        rows["q_nonlte_upper"] = _nonlte_upper(np.array([q_n]), np.array([s_n]), rows)
        _water_columns(rows, inputs, str(group))
        out.append(rows)
    return out


def _distributed_columns(rows: QTable, sel, t: np.ndarray) -> None:
    """Q and its error under a distributed source, in the order limit_rows gives (T outer, aperture inner)."""
    q_d = np.full(len(rows), np.nan)
    s_d = np.full(len(rows), np.nan)
    if "q_distributed" in sel.colnames:
        n_ap = len(rows) // max(len(t), 1)
        for row in sel:
            k = int(np.searchsorted(t, row["t_kin"])) * n_ap + int(row["aperture_index"])
            q_d[k], s_d[k] = cell_float(row["q_distributed"]), cell_float(row["sigma_q_distributed"])
    rows["q_distributed"] = q_d / u.s
    rows["q_distributed_err"] = s_d / u.s


def _nonlte_columns(rows: QTable, sel, t: np.ndarray, inputs, group: str) -> None:
    """Q, its error and upper limit under non-LTE excitation beside the LTE sweep (``q_nonlte``, ...), in the order
    limit_rows gives (T outer, aperture inner); NaN without the comparison (no ``nonlte_ratio`` in the inputs).

    At each sweep T_kin and aperture: the inverse-variance mean of the group's inputs' q / r and sigma_q / r, r the
    input's ``nonlte_ratio`` (:func:`pipeline.rates.q_units.stack_input`; bands 1), the combination the stack makes
    of q and sigma_q (:func:`pipeline.rates.stacking.combine`); NaN if any line of the group has no ratio.
    """
    q_n = np.full(len(rows), np.nan)
    s_n = np.full(len(rows), np.nan)
    if len(inputs) and "nonlte_ratio" in inputs.colnames:
        n_ap = len(rows) // max(len(t), 1)
        epoch = np.asarray(inputs["epoch"], dtype=str)
        t_in = np.asarray(inputs["t_kin"], dtype=float)
        label = np.asarray(inputs["aperture"], dtype=str)
        band = np.asarray(inputs["kind"], dtype=str) == "band"
        ratio = np.where(band, 1.0, np.asarray(inputs["nonlte_ratio"], dtype=float))
        q_in = np.asarray(inputs["q"], dtype=float)
        s_in = np.asarray(inputs["sigma_q"], dtype=float)
        if not np.all(band):                      # a comparison was made for at least one line
            for row in sel:
                k = int(np.searchsorted(t, row["t_kin"])) * n_ap + int(row["aperture_index"])
                pick = (((epoch == group) | (group == ALL_GROUP)) & (label == str(row["aperture"]))
                        & np.isclose(t_in, float(row["t_kin"]), rtol=1e-12, atol=0.0))
                if np.any(pick):
                    q_n[k], s_n[k] = inverse_variance_mean(q_in[pick] / ratio[pick], s_in[pick] / ratio[pick])
    rows["q_nonlte"] = q_n / u.s
    rows["q_nonlte_err"] = s_n / u.s
    rows["q_nonlte_upper"] = _nonlte_upper(q_n, s_n, rows)


def _water_columns(rows: QTable, inputs, group: str) -> None:
    """The water production rate of the non-LTE excitation behind the group's inputs, and where it comes from
    (``q_h2o_excitation``, ``q_h2o_from``, as each epoch's stack inputs recorded them): one epoch's value, or for
    'all' the value its epochs share (NaN and the epochs' values in words when they differ)."""
    value, source = np.nan, ""
    if len(inputs) and "q_h2o_excitation" in inputs.colnames:
        epoch = np.asarray(inputs["epoch"], dtype=str)
        q = np.asarray(inputs["q_h2o_excitation"], dtype=float)
        text = np.asarray(inputs["q_h2o_from"], dtype=str)
        pick = ((epoch == group) | (group == ALL_GROUP)) & np.isfinite(q)
        found = dict.fromkeys(zip(epoch[pick], q[pick], text[pick]))
        if len({(v, t) for _, v, t in found}) == 1:
            _, value, source = next(iter(found))
        elif found:
            source = "per epoch: " + "; ".join(f"{e}: {v:.3g} /s ({'measured' if t.startswith('H2O') else 'config'})"
                                               for e, v, t in found)
    rows["q_h2o_excitation"] = np.full(len(rows), value) / u.s
    rows["q_h2o_from"] = np.array([source] * len(rows), dtype=str)


def _nonlte_upper(q_n: np.ndarray, s_n: np.ndarray, rows: QTable) -> u.Quantity:
    """The Bayesian upper limit of q_nonlte at the rows' confidence (NaN where q_nonlte is)."""
    out = np.full(len(rows), np.nan)
    ok = np.isfinite(q_n) & np.isfinite(s_n) & (s_n > 0)
    if np.any(ok):
        cl = float(np.asarray(rows["confidence"], dtype=float)[0])
        out[ok] = np.asarray(bayesian_upper_limit(q_n[ok], s_n[ok], cl), dtype=float)
    return out / u.s


def run_species(stack_path: str, settings: Settings, out_path: str, temperature_path: str | None = None) -> None:
    """Limits of one species from its stack file; detections also get a line-profile fit.

    With the temperature table (:mod:`pipeline.workflow.temperature`), each epoch group and aperture also gets a
    row at the adopted temperature (configured, or measured from a species' lines); where the species is
    detected there, that row is the one the report quotes (``adopted``), with ``q_sys`` the change of Q over
    the temperature's interval (measured) or over the sweep (configured). Otherwise the conservative row of the
    sweep is quoted.

    The line-profile fits are kept in a memo below the output folder (``.cache/memo/line-fits-<species>.json``,
    :class:`pipeline.io.memo.Memo`): a fit whose inputs did not change (an earlier epoch's, at a temperature of
    the sweep) is read back, with the numbers fitting again gives.
    """
    catalogue = settings.catalogue()
    stack = SpeciesStack.from_fits(stack_path)
    species, summary, inputs = stack.species, stack.summary, stack.inputs
    nsigma = float(settings.limits.nsigma)
    fits = read_table(temperature_path) if temperature_path else None
    measures = window_measures(inputs, stack.curves)
    memo = Memo(memo_path(settings.outdir, f"line-fits-{species}"))
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
            rows = limit_rows(species, str(group), t * u.K, ap * u.km, q / u.s, s / u.s, nsigma,
                              str(sel["lines"][0]).split(","), str(sel["cubes"][0]).split(","))
            _distributed_columns(rows, sel, t)
            _nonlte_columns(rows, sel, t, inputs, str(group))
            _water_columns(rows, inputs, str(group))
            add_fit_columns(rows)
            fit_detections(rows, str(group), stack, inputs, t, catalogue.get_species(species).mass, memo)
            opacity_columns(rows, inputs, catalogue, species, settings.coma.solar_activity)
            filtering_columns(rows, inputs)
            tables.append(_with_adoption_columns(rows))
            tables.extend(_with_adoption_columns(r) for r in _adopted_rows(species, group, sel, measures, fits,
                                                                            settings, nsigma, inputs, catalogue))
    if tables:
        table = join_limits(tables)
    else:  # the species was not covered by any cube: an empty table with the contract's columns
        table = limit_rows(species, "all", [] * u.K, [] * u.km, np.zeros((0, 0)) / u.s,
                           np.ones((0, 0)) / u.s, nsigma, [], [])
        add_fit_columns(table)
        table["tau_peak"] = np.zeros(0)
        table["surviving_fraction"] = np.zeros(0)
        table["q_distributed"] = np.zeros(0) / u.s
        table["q_distributed_err"] = np.zeros(0) / u.s
        for name in ("q_nonlte", "q_nonlte_err", "q_nonlte_upper", "q_h2o_excitation"):
            table[name] = np.zeros(0) / u.s
        table["q_h2o_from"] = np.zeros(0, dtype=str)
        table = _with_adoption_columns(table)
    if len(table):
        table = mark_adopted(table, any(m.kind == "line" for m in measures))
    mark_opacity(table, settings.opacity_correction)
    if "apertures_left_out" in summary.colnames:
        left_out = {str(r["epoch"]): str(r["apertures_left_out"]) for r in summary if str(r["apertures_left_out"])}
        if left_out:
            table.meta["apertures_left_out"] = {species: left_out}
    table.meta["provenance"] = provenance_record(settings, [stack_path] + ([temperature_path] if temperature_path
                                                                          else []), "limits")
    write_table(table, out_path)
    memo.save()


def run_join(species_paths: list[str], settings: Settings, out_path: str, json_path: str | None = None,
             geometry_paths: list[str] | None = None, activity_path: str | None = None) -> None:
    """Join the per-species limits into limits.ecsv, flagging the conservative temperature."""
    tables = [read_table(p) for p in species_paths]
    left_out: dict[str, dict[str, str]] = {}
    for t in tables:
        left_out.update(t.meta.get("apertures_left_out", {}))
        t.meta.clear()
    tables = [t for t in tables if len(t)] or tables[:1]
    table = mark_conservative(join_limits(tables))
    table.meta["provenance"] = provenance_record(settings, species_paths, "limits")
    if left_out:   # species -> epoch group -> the apertures of which cubes a combination left out
        table.meta["apertures_left_out"] = left_out
    table.meta["assumptions"] = {
        "excitation": ("LTE at T_kin, optically thin, cosmic background 2.725 K" if nonlte_settings(settings.coma)
                       is None else nonlte_settings(settings.coma).describe() + "; T_kin is the gas kinetic temperature"
                       "; Q(H2O) of each epoch in q_h2o_excitation, its source in q_h2o_from"),
        "coma": "Haser parent distribution, isotropic uniform outflow",
        "outflow_km_s": settings.coma.outflow,
        "photodestruction": f"{settings.coma.solar_activity} Sun, lifetimes scaled as r_h^2",
        "infrared bands": "optically thin solar-pumped fluorescence, g-factor scaled as r_h^-2 (no Swings effect); "
                          "band flux = continuum-subtracted integral over the band extent widened by the line-spread "
                          "function; Q does not depend on T_kin",
        "q_upper": "Bayesian, flat prior on Q >= 0, one-sided confidence of nsigma",
        "quoted temperature": "detections at the temperature measured from a species' lines (or "
                              "excitation.t_adopted_K), with Q's spread over its interval as q_sys; upper limits at "
                              "the sweep's conservative temperature",
        "distributed sources": "species with a catalogue distributed_scale_km also given as a Haser daughter of "
                               "that source (q_distributed); the main result assumes release at the nucleus",
        "opacity": "rows with peak optical depth > 0.1 marked (opacity_factor = tau / (1 - exp(-tau))); quoted "
                   "detections multiplied by it only with excitation.opacity_correction = escape_probability",
        "nsigma": settings.limits.nsigma,
        "epoch 'all'": "constant Q over the epochs combined",
    }
    epochs = epoch_geometry(geometry_paths or [], table_cache(settings.outdir))
    if epochs:
        _with_epoch_geometry(table, epochs)
    table = described(table, "limits")
    write_table(table, out_path)
    if json_path is not None:
        write_json(table_as_json(table), json_path)
    if activity_path is not None:
        act = activity_table(table, {k: v[1] for k, v in epochs.items()},
                             float(settings.limits.activity_slope), float(table["confidence"][0])
                             if len(table) else 0.99865)
        act.meta["provenance"] = provenance_record(settings, [*species_paths, *(geometry_paths or [])], "limits")
        write_table(act, activity_path)


def epoch_geometry(geometry_paths: list[str], cache: str | Path | None = None) -> dict[str, tuple[float, float, float]]:
    """Per epoch group: the mean mid-exposure time (MJD, UTC), r_h [au] and Delta [au] of its cubes.

    The mean over the epoch's cubes, whatever their species: the cubes of one epoch lie hours apart, over which
    r_h and Delta change little and nearly linearly; two observers (a site and a spacecraft) differ in Delta
    by their separation, which the mean splits.
    """
    groups: dict[str, list] = {}
    for path in geometry_paths:
        g = read_table(path, cache)[0]
        groups.setdefault(str(g["epoch"]), []).append((g["time_mid"].utc.mjd, g["r_h"].to_value(u.au),
                                                       g["delta"].to_value(u.au)))
    return {e: tuple(float(np.mean([v[i] for v in vals])) for i in range(3)) for e, vals in sorted(groups.items())}


def _with_epoch_geometry(table: QTable, epochs: dict[str, tuple[float, float, float]]) -> None:
    """Columns time_mid, r_h and delta of each row's epoch; masked (time) and NaN for 'all', which is no one time."""
    known = np.array([str(e) in epochs for e in table["epoch"]], dtype=bool)
    values = np.array([epochs.get(str(e), (np.nan,) * 3) for e in table["epoch"]], dtype=float).reshape(-1, 3)
    mid = Time(np.where(known, values[:, 0], 0.0), format="mjd", scale="utc")
    mid.format = "isot"
    if not np.all(known):
        mid[~known] = np.ma.masked
    table["time_mid"] = mid
    table["r_h"] = values[:, 1] * u.au
    table["delta"] = values[:, 2] * u.au
