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

import astropy.units as u
import numpy as np
from astropy.table import QTable, Table, vstack

from pipeline.io.atomic import write_table
from pipeline.dust.summary import dust_summary
from pipeline.io.products import BandMeasurements
from pipeline.io.provenance import provenance_record
from pipeline.settings import Settings
from pipeline.dust.solar import SOLAR_MODEL

__all__ = ["run"]

log = logging.getLogger(__name__)


def run(bands_paths: list[str], settings: Settings, out_afrho: str, out_dust: str) -> None:
    """Collect the Afrho measurements of every infrared cube and write afrho.ecsv and dust.ecsv."""
    tables = []
    for path in bands_paths:
        t = BandMeasurements.from_fits(path).dust
        if "afrho" in t.colnames and len(t):
            tables.append(t)
    afrho = vstack(tables) if tables else Table(names=["cube_id", "epoch", "aperture_km", "wavelength", "afrho",
                                                       "afrho_err"], dtype=[str, str, float, float, float, float])
    dust = settings.dust
    summary = dust_summary(afrho, dust.grain_radius, dust.grain_density, dust.speed, dust.albedo)
    record = provenance_record(settings, bands_paths, "dust")
    out = QTable(afrho)
    for name, unit in (("aperture_km", u.km), ("wavelength", u.um), ("afrho", u.cm), ("afrho_err", u.cm)):
        if name in out.colnames:
            out[name] = np.asarray(out[name], dtype=float) * unit
    for t in (out, summary):
        t.meta["provenance"] = record
        t.meta["solar_model"] = SOLAR_MODEL
        t.meta["afrho"] = ("A'Hearn et al. 1984 (AJ 89, 579): Afrho = (2 Delta r_h)^2 F_comet / (rho F_sun), r_h in "
                           "au; at the observed phase angle (no phase correction)")
    given = dust.as_record()
    summary.meta["assumptions"] = {
        "grains": f"single size, radius {given['grain_radius_um']} um, density "
                  f"{given['grain_density_kg_m3']} kg/m^3, spheres",
        "speed_km_s": given["speed_km_s"], "albedo_A": given["albedo"],
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
