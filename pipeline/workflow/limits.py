"""Stage 'limits': Q, errors, detections and upper limits per species, and the joined limits.ecsv."""

from __future__ import annotations

import logging
import warnings
from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable, Table

from pipeline.io.atomic import write_json, write_table
from pipeline.rates.limits_table import join_limits, limit_rows, mark_conservative
from pipeline.coma.excitation import OpacityWarning, line_optical_depth
from pipeline.coma.haser import parent_aperture_count, scale_length
from pipeline.rates.activity import fit_fixed_slope, fit_free_slope
from pipeline.rates.line_fit import fit_line
from pipeline.coma.line_profile import thermal_dispersion
from pipeline.io.provenance import provenance_record
from pipeline.workflow.common import catalogue_from_config

__all__ = ["run_species", "run_join"]

log = logging.getLogger(__name__)


def _add_fit_columns(table: QTable) -> None:
    n = len(table)
    table["q_fit"] = np.full(n, np.nan) / u.s
    table["q_fit_err"] = np.full(n, np.nan) / u.s
    table["v_offset"] = np.full(n, np.nan) * u.km / u.s
    table["v_offset_err"] = np.full(n, np.nan) * u.km / u.s


def _fit_detections(table: QTable, group: str, hdul: fits.HDUList, inputs: Table, t_grid: np.ndarray,
                    mass) -> None:
    """Fill q_fit, q_fit_err, v_offset, v_offset_err for the detected rows of one epoch group."""
    members = inputs[(inputs["epoch"] == group)] if group != "all" else inputs
    if "kind" in members.colnames:  # infrared bands have no velocity spectrum to fit
        members = members[members["kind"] == "line"]
    if len(members) == 0:
        return
    hdu = hdul[f"STACK_{group}"]
    n = hdu.data.shape[-1]
    vel = hdu.header["CRVAL1"] + (np.arange(n) + 1 - hdu.header["CRPIX1"]) * hdu.header["CDELT1"]
    v_out = float(np.mean(members["outflow"]))
    window = float(np.max(members["window"]))
    responses = set(members["spectral_response"]) if "spectral_response" in members.colnames else {"hanning"}
    response = responses.pop() if len(responses) == 1 else "hanning"
    aps = np.unique(np.asarray(members["aperture_km"], dtype=float))
    for k, row in enumerate(table):
        if not row["detected"]:
            continue
        it = int(np.argmin(np.abs(t_grid - row["t_kin_K"])))
        ja = int(np.argmin(np.abs(aps - row["aperture_km"].to_value(u.km))))
        sig_th = thermal_dispersion(row["t_kin_K"] * u.K, mass).to_value(u.km / u.s)
        fit = fit_line(vel, hdu.data[it, ja], v_out, sig_th, window, response, q_guess=row["q"].to_value(1 / u.s))
        table["q_fit"][k] = fit.q / u.s
        table["q_fit_err"][k] = fit.q_err / u.s
        table["v_offset"][k] = fit.v_offset * u.km / u.s
        table["v_offset_err"][k] = fit.v_offset_err * u.km / u.s


def _opacity(table: QTable, inputs: Table, catalogue, species_name: str) -> None:
    """Peak optical depth, in the aperture-mean column, of the strongest line of each detected row."""
    species = catalogue.get_species(species_name)
    table["tau_peak"] = np.full(len(table), np.nan)
    for k, row in enumerate(table):
        if not row["detected"] or not np.isfinite(row["q"].value) or row["q"].value <= 0:
            continue
        sel = inputs[(inputs["epoch"] == row["epoch"]) | (row["epoch"] == "all")]
        rho = row["aperture_km"].to(u.km)
        v = float(np.mean(sel["outflow"])) * u.km / u.s
        r_h = float(np.mean(sel["r_h"])) * u.au
        length = scale_length(v, species.photo_rate("quiet"), r_h)
        column = parent_aperture_count(rho, row["q"], v, length) / (np.pi * rho**2)
        taus = []
        for line_id in str(row["lines"]).split(","):
            if line_id not in {ln.line_id for ln in catalogue.lines}:
                continue  # an infrared band: optically thin fluorescence is assumed (see the README)
            line = catalogue.get_line(line_id)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", OpacityWarning)
                taus.append(float(line_optical_depth(line, species, row["t_kin_K"] * u.K, column, 2 * v)))
        table["tau_peak"][k] = max(taus) if taus else np.nan
    strong = table[np.nan_to_num(table["tau_peak"]) > 0.1]
    if len(strong):
        worst = strong[np.argmax(strong["tau_peak"])]
        log.warning("%s: the peak optical depth reaches %.2g (epoch %s, %.0f km, %g K): the optically thin Q is a "
                    "lower bound there", species_name, worst["tau_peak"], worst["epoch"],
                    worst["aperture_km"].to_value(u.km), worst["t_kin_K"])


def _filtering(table: QTable, inputs: Table) -> None:
    """Mean fraction of the model flux that survives interferometric filtering, per row (1 = not configured)."""
    frac = np.ones(len(table))
    if "surviving_fraction" in inputs.colnames:
        for k, row in enumerate(table):
            sel = inputs[((inputs["epoch"] == row["epoch"]) | (row["epoch"] == "all"))
                         & np.isclose(np.asarray(inputs["aperture_km"], dtype=float), row["aperture_km"].to_value(u.km))]
            if len(sel):
                frac[k] = float(np.mean(sel["surviving_fraction"]))
    table["surviving_fraction"] = frac


def run_species(stack_path: str, config: dict[str, Any], out_path: str) -> None:
    """Limits of one species from its stack file; detections also get a line-profile fit."""
    catalogue = catalogue_from_config(config)
    with fits.open(stack_path) as hdul:
        species = hdul[0].header["GLSPEC"]
        summary = Table.read(hdul["SUMMARY"])
        inputs = Table.read(hdul["INPUTS"])
        hdul.readall()
        stack_hdul = fits.HDUList([h.copy() for h in hdul])
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
            rows = limit_rows(species, str(group), t * u.K, ap * u.km, q / u.s, s / u.s, nsigma,
                              str(sel["lines"][0]).split(","), str(sel["cubes"][0]).split(","))
            _add_fit_columns(rows)
            _fit_detections(rows, str(group), stack_hdul, inputs, t, catalogue.get_species(species).mass)
            _opacity(rows, inputs, catalogue, species)
            _filtering(rows, inputs)
            tables.append(rows)
    if tables:
        table = join_limits(tables)
    else:  # the species was not covered by any cube: an empty table with the contract's columns
        table = limit_rows(species, "all", [] * u.K, [] * u.km, np.zeros((0, 0)) / u.s,
                           np.ones((0, 0)) / u.s, nsigma, [], [])
        _add_fit_columns(table)
        table["tau_peak"] = np.zeros(0)
        table["surviving_fraction"] = np.zeros(0)
    table.meta["provenance"] = provenance_record(config, [stack_path], "limits")
    write_table(table, out_path)


def table_as_json(table: QTable) -> dict[str, Any]:
    """Rows of a table as plain JSON values, with the unit of each column."""
    units = {c: str(table[c].unit) for c in table.colnames if getattr(table[c], "unit", None) is not None}
    rows = []
    for row in table:
        rec = {}
        for c in table.colnames:
            v = row[c]
            v = v.value if hasattr(v, "unit") else v
            v = v.item() if hasattr(v, "item") else v
            rec[c] = None if isinstance(v, float) and not np.isfinite(v) else v
        rows.append(rec)
    return {"units": units, "rows": rows, "meta": dict(table.meta)}


def activity_table(limits: QTable, epoch_rh: dict[str, float], slope: float, confidence: float) -> QTable:
    """Activity-law fits per species and aperture at the temperature conservative for 'all'."""
    rows = []
    for species in dict.fromkeys(str(s) for s in limits["species"]):
        sel = limits[limits["species"] == species]
        for row in sel[(sel["epoch"] == "all") & sel["conservative"]]:
            ap, t = row["aperture_km"].to_value(u.km), row["t_kin_K"]
            ep = sel[(sel["epoch"] != "all") & np.isclose(sel["aperture_km"].to_value(u.km), ap)
                     & (sel["t_kin_K"] == t)]
            ep = ep[[str(e) in epoch_rh for e in ep["epoch"]]]
            if len(ep) < 2:
                continue
            q, s_ = ep["q"].to_value(1 / u.s), ep["q_err"].to_value(1 / u.s)
            r = np.array([epoch_rh[str(e)] for e in ep["epoch"]])
            fits_ = [fit_fixed_slope(q, s_, r, slope, confidence)]
            try:
                fits_.append(fit_free_slope(q, s_, r, confidence))
            except ValueError:
                pass
            for f in fits_:
                rows.append({"species": species, "aperture_km": ap, "t_kin_K": t, "slope": "fitted" if
                             f.fitted_slope else "fixed", "n": f.n, "n_lo": f.n_lo, "n_hi": f.n_hi,
                             "n_constrained": bool(np.isfinite(f.n_lo) and np.isfinite(f.n_hi)), "q0": f.q0,
                             "q0_err": f.q0_err, "q0_upper": f.q0_upper, "chi2": f.chi2, "dof": f.dof,
                             "n_epochs": len(q), "r_h_min": float(r.min()), "r_h_max": float(r.max())})
    table = QTable(rows=rows) if rows else QTable(names=["species", "q0"], dtype=[str, float])
    for name in ("q0", "q0_err", "q0_upper"):
        if name in table.colnames:
            table[name] = np.asarray(table[name], dtype=float) / u.s
    table.meta["model"] = "Q(r_h) = Q0 (r_h / 1 au)^-n; n fixed (config limits.activity_slope) and fitted"
    return table


def run_join(species_paths: list[str], config: dict[str, Any], out_path: str, json_path: str | None = None,
             geometry_paths: list[str] | None = None, activity_path: str | None = None) -> None:
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
        "infrared bands": "optically thin solar-pumped fluorescence, g-factor scaled as r_h^-2 (no Swings effect); "
                          "band flux = continuum-subtracted integral over the band extent widened by the line-spread "
                          "function; Q does not depend on T_kin",
        "q_upper": "Bayesian, flat prior on Q >= 0, one-sided confidence of nsigma",
        "nsigma": config["limits"]["nsigma"],
        "epoch 'all'": "constant Q over the epochs combined",
    }
    write_table(table, out_path)
    if json_path is not None:
        write_json(table_as_json(table), json_path)
    if activity_path is not None:
        rh: dict[str, list[float]] = {}
        for path in geometry_paths or []:
            g = QTable.read(path, format="ascii.ecsv")[0]
            rh.setdefault(str(g["epoch"]), []).append(float(g["r_h"].to_value(u.au)))
        act = activity_table(table, {k: float(np.mean(v)) for k, v in rh.items()},
                             float(config["limits"]["activity_slope"]), float(table["confidence"][0])
                             if len(table) else 0.99865)
        act.meta["provenance"] = provenance_record(config, [*species_paths, *(geometry_paths or [])], "limits")
        write_table(act, activity_path)
