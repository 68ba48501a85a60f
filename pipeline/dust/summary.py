"""The dust per epoch: colour over every wavelength measured, Afrho at a reference wavelength, dust production.

The dust production is that of a steady 1/rho coma of identical grains
(:func:`pipeline.dust.afrho.dust_production_rate`); group 'all' is the
inverse-variance mean over epochs (constant activity).
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.table import QTable, Table

from pipeline.dust.afrho import dust_momentum_rate, dust_production_rate, slope_percent_per_100nm, spectral_slope
from pipeline.rates.statistics import inverse_variance_mean

__all__ = ["dust_summary"]


def dust_summary(afrho: Table, grain_radius: u.Quantity, grain_density: u.Quantity, speed: u.Quantity,
                 albedo: float) -> QTable:
    """Per epoch group and aperture: colour, reference Afrho and the dust production estimate.

    Parameters
    ----------
    afrho : Table
        Every Afrho measurement: columns epoch, aperture_km, wavelength [um], afrho and afrho_err [cm].
    grain_radius, grain_density, speed : Quantity [length], [mass density], [speed]
        The single grain size, its bulk density and the grains' outflow speed.
    albedo : float
        The A of Afrho.

    Returns
    -------
    QTable
        One row per epoch group (and 'all', the inverse-variance mean over epochs) and aperture: the colour
        (per cent per 100 nm over every wavelength measured), Afrho at the reference (shortest) wavelength, the
        dust production rate (:func:`pipeline.dust.afrho.dust_production_rate`) and its momentum rate.
    """
    a = u.Quantity(grain_radius, u.um)
    rho_d = u.Quantity(grain_density, u.kg / u.m**3)
    v_d = u.Quantity(speed, u.km / u.s)
    albedo = float(albedo)
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
                slope, slope_err = slope_percent_per_100nm(sl), slope_percent_per_100nm(sl_err)
            ref = np.isclose(lam, lam_ref)
            if np.any(ref):
                a_ref, a_ref_err = (float(x) for x in inverse_variance_mean(val[ref], err[ref]))
            else:
                a_ref = a_ref_err = np.nan
            per_epoch[(group, ap)] = (a_ref, a_ref_err, slope, slope_err)
    for ap in sorted({k[1] for k in per_epoch}):
        vals = [v for (g, a_), v in per_epoch.items() if a_ == ap and np.isfinite(v[0])]
        if vals:
            a_all, a_all_err = inverse_variance_mean([v[0] for v in vals], [v[1] for v in vals])
            s_ok = [v for v in vals if np.isfinite(v[2])]
            s_all, s_all_err = (inverse_variance_mean([v[2] for v in s_ok], [v[3] for v in s_ok]) if s_ok
                                else (np.nan, np.nan))
            per_epoch[("all", ap)] = (float(a_all), float(a_all_err), float(s_all), float(s_all_err))
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
