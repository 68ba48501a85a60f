"""Stage 'dust': Afrho of every infrared cube, the dust colour and a dust production estimate per epoch.

afrho.ecsv lists every Afrho measurement (cube, aperture, wavelength). dust.ecsv
has one row per epoch group and aperture: the normalised reflectivity gradient
over all wavelengths measured at that epoch, Afrho at the reference wavelength
(the shortest measured), and the dust mass production and momentum rate of a
steady 1/rho coma of identical grains (:func:`pipeline.dust.afrho.dust_production_rate`)
under the assumptions of the config's ``dust`` section, written to the meta.
Group 'all' is the inverse-variance mean over epochs (constant activity).
"""

from __future__ import annotations

import logging
from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable, Table, vstack

from pipeline.io.atomic import write_table
from pipeline.dust.afrho import dust_momentum_rate, dust_production_rate, spectral_slope
from pipeline.io.provenance import provenance_record
from pipeline.dust.solar import SOLAR_MODEL

__all__ = ["run", "dust_summary"]

log = logging.getLogger(__name__)


def _slope_percent(value) -> float:
    q = u.Quantity(value)
    if q.unit.is_equivalent(1 / u.um):
        return float(q.to_value(1 / u.nm) * 1e4)   # per nm -> per cent per 100 nm
    return float(q.to_value(u.percent))


def dust_summary(afrho: Table, config: dict[str, Any]) -> QTable:
    """Per epoch group and aperture: colour, reference Afrho and the dust production estimate."""
    dust = config.get("dust", {})
    a = float(dust.get("grain_radius_um", 1.0)) * u.um
    rho_d = float(dust.get("grain_density_kg_m3", 1000.0)) * u.kg / u.m**3
    v_d = float(dust.get("speed_km_s", 0.1)) * u.km / u.s
    albedo = float(dust.get("albedo", 0.16))
    rows = []
    if not len(afrho):
        return QTable(names=["epoch", "aperture_km"], dtype=[str, float])
    lam_ref = float(np.min(afrho["wavelength"]))
    per_epoch = {}
    for group in sorted(set(str(e) for e in afrho["epoch"])):
        sel = afrho[afrho["epoch"] == group]
        for ap in sorted(set(float(x) for x in sel["aperture_km"])):
            s = sel[np.isclose(np.asarray(sel["aperture_km"], dtype=float), ap)]
            lam = np.asarray(s["wavelength"], dtype=float)
            val = np.asarray(s["afrho"], dtype=float)
            err = np.asarray(s["afrho_err"], dtype=float)
            slope = slope_err = np.nan
            if np.unique(lam).size >= 2:
                sl, sl_err = spectral_slope(lam * u.um, val * u.cm, err * u.cm)
                slope, slope_err = _slope_percent(sl), _slope_percent(sl_err)
            ref = np.isclose(lam, lam_ref)
            if np.any(ref):
                w = 1 / err[ref] ** 2
                a_ref, a_ref_err = float(np.sum(w * val[ref]) / np.sum(w)), float(1 / np.sqrt(np.sum(w)))
            else:
                a_ref = a_ref_err = np.nan
            per_epoch[(group, ap)] = (a_ref, a_ref_err, slope, slope_err)
    for ap in sorted({k[1] for k in per_epoch}):
        vals = [v for (g, a_), v in per_epoch.items() if a_ == ap and np.isfinite(v[0])]
        if vals:
            w = np.array([1 / v[1] ** 2 for v in vals])
            a_all = float(np.sum(w * np.array([v[0] for v in vals])) / np.sum(w))
            s_ok = [v for v in vals if np.isfinite(v[2])]
            ws = np.array([1 / v[3] ** 2 for v in s_ok]) if s_ok else np.array([])
            s_all = float(np.sum(ws * np.array([v[2] for v in s_ok])) / np.sum(ws)) if s_ok else np.nan
            per_epoch[("all", ap)] = (a_all, float(1 / np.sqrt(np.sum(w))), s_all,
                                      float(1 / np.sqrt(np.sum(ws))) if s_ok else np.nan)
    for (group, ap), (a_ref, a_err, slope, slope_err) in sorted(per_epoch.items()):
        q = dust_production_rate(a_ref * u.cm, a, rho_d, v_d, albedo) if np.isfinite(a_ref) else np.nan * u.kg / u.s
        q_err = dust_production_rate(a_err * u.cm, a, rho_d, v_d, albedo) if np.isfinite(a_err) \
            else np.nan * u.kg / u.s
        rows.append({"epoch": group, "aperture_km": ap, "wavelength_ref": lam_ref, "afrho": a_ref, "afrho_err": a_err,
                     "slope": slope, "slope_err": slope_err, "q_dust": q.to_value(u.kg / u.s),
                     "q_dust_err": abs(q_err.to_value(u.kg / u.s)),
                     "momentum_rate": dust_momentum_rate(q, v_d).to_value(u.N) if np.isfinite(q.value) else np.nan})
    table = QTable(rows=rows)
    for name, unit in (("aperture_km", u.km), ("wavelength_ref", u.um), ("afrho", u.cm), ("afrho_err", u.cm),
                       ("q_dust", u.kg / u.s), ("q_dust_err", u.kg / u.s), ("momentum_rate", u.N)):
        table[name] = np.asarray(table[name], dtype=float) * unit
    table.meta["slope_unit"] = "per cent per 100 nm (normalised reflectivity gradient, relative to the solar model)"
    return table


def run(bands_paths: list[str], config: dict[str, Any], out_afrho: str, out_dust: str) -> None:
    """Collect the Afrho measurements of every infrared cube and write afrho.ecsv and dust.ecsv."""
    tables = []
    for path in bands_paths:
        with fits.open(path) as hdul:
            t = Table.read(hdul["DUST"])
        if "afrho" in t.colnames and len(t):
            tables.append(t)
    afrho = vstack(tables) if tables else Table(names=["cube_id", "epoch", "aperture_km", "wavelength", "afrho",
                                                       "afrho_err"], dtype=[str, str, float, float, float, float])
    summary = dust_summary(afrho, config)
    record = provenance_record(config, bands_paths, "dust")
    out = QTable(afrho)
    for name, unit in (("aperture_km", u.km), ("wavelength", u.um), ("afrho", u.cm), ("afrho_err", u.cm)):
        if name in out.colnames:
            out[name] = np.asarray(out[name], dtype=float) * unit
    for t in (out, summary):
        t.meta["provenance"] = record
        t.meta["solar_model"] = SOLAR_MODEL
        t.meta["afrho"] = ("A'Hearn et al. 1984 (AJ 89, 579): Afrho = (2 Delta r_h)^2 F_comet / (rho F_sun), r_h in "
                           "au; at the observed phase angle (no phase correction)")
    dust = config.get("dust", {})
    summary.meta["assumptions"] = {
        "grains": f"single size, radius {dust.get('grain_radius_um', 1.0)} um, density "
                  f"{dust.get('grain_density_kg_m3', 1000.0)} kg/m^3, spheres",
        "speed_km_s": dust.get("speed_km_s", 0.1), "albedo_A": dust.get("albedo", 0.16),
        "coma": "steady 1/rho coma, constant speed, no fragmentation or sublimating grains",
        "q_dust": "Q = (8/3) rho_d a v Afrho / A", "momentum_rate": "Q_dust v (all grains leaving one way: an upper "
                                                                      "bound on the push)",
        "caution": "an order-of-magnitude estimate: the grain size distribution dominates its uncertainty",
    }
    write_table(out, out_afrho)
    write_table(summary, out_dust)
    if len(summary):
        log.info("dust: %d epoch/aperture rows; Afrho(all, first aperture) = %.3g cm", len(summary),
                 summary["afrho"][summary["epoch"] == "all"][0].value if np.any(summary["epoch"] == "all") else np.nan)
