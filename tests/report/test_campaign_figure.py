"""The campaign figure's data: epoch times, the quoted points, the demand band (closed forms), and a campaign
without an acceleration (no verdict, the measured values still drawn)."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable
from astropy.time import Time

from pipeline.budget.table import budget_table
from pipeline.catalogue.entries import load_catalogue
from pipeline.report.campaign_figure import (campaign_figures, demand_curve, epoch_times, plot_campaign,
                                             species_series)
from pipeline.report.figures import to_png
from pipeline.report.verdicts import defaulted_html, no_verdict_html
from pipeline.settings import Settings, assumptions_from_config, validate_config

CAT = load_catalogue()
CO_MASS = 28.010 * u.u      # CO molecular mass (standard atomic weights; from memory)


def _geometry(rows):
    """Rows of per-cube geometry tables: (epoch, mid-time, r_h in au)."""
    table = QTable({"cube_id": [f"c{i}" for i in range(len(rows))], "epoch": [r[0] for r in rows],
                    "time_mid": Time([r[1] for r in rows], scale="utc"), "r_h": [r[2] for r in rows] * u.au})
    return list(table)


GEOMETRY = _geometry([("e1", "2031-03-10T04:00:00", 1.0), ("e1", "2031-03-10T06:00:00", 1.0),
                      ("e2", "2031-03-14T04:00:00", 1.44)])


def _limits():
    # (species, epoch, aperture, T, q, q_err, q_upper, detected, adopted)
    rows = [("CO", "e1", 1000.0, 20.0, 1e25, 1e25, 4e25, False, True),
            ("CO", "e1", 3000.0, 20.0, 1e25, 1e25, 5e25, False, True),
            ("CO", "e1", 1000.0, 80.0, 1e25, 1e25, 9e25, False, False),
            ("CO", "e2", 1000.0, 80.0, 3e26, 5e25, 4.5e26, True, True),
            ("CO", "all", 1000.0, 80.0, 2e25, 1e25, 5e25, False, True),
            ("HCN", "e1", 1000.0, 40.0, 2e25, 1e24, 2.3e25, True, True),
            ("HCN", "all", 1000.0, 40.0, 2e25, 1e24, 2.3e25, True, True)]
    names = ["species", "epoch", "aperture_km", "t_kin_K", "q", "q_err", "q_upper", "detected", "adopted"]
    t = QTable(rows=rows, names=names)
    for c in ("q", "q_err", "q_upper"):
        t[c] = t[c] / u.s
    t["aperture_km"] = t["aperture_km"] * u.km
    t["conservative"] = ~t["detected"]
    return t


def test_epoch_times_are_the_means_over_the_cubes():
    times = epoch_times(GEOMETRY)
    assert times.mjd["e1"] == pytest.approx(Time("2031-03-10T05:00:00", scale="utc").mjd, abs=1e-9)
    assert times.r_h == {"e1": 1.0, "e2": 1.44}
    assert times.start.isot.startswith("2031-03-10T05:00")


def test_series_takes_the_quoted_rows_at_the_smallest_aperture():
    s = species_series(_limits(), "CO")
    assert [(p.epoch, p.aperture_km, p.q_upper, p.detected) for p in s.points] == [
        ("e1", 1000.0, 4e25, False), ("e2", 1000.0, 4.5e26, True)]      # the 80 K e1 row is not quoted
    assert s.combined is not None and s.combined.q_upper == 5e25
    assert species_series(_limits(), "CO2").points == []


def test_demand_with_the_outflow_law_is_the_closed_form():
    assume = assumptions_from_config({"acceleration_m_s2": [2e-6, 2e-7], "interval_days": 30,
                                      "nucleus": {"mass_kg": [1e10, 1e12]}, "ejection_speed_km_s": "law",
                                      "momentum_efficiency": 0.5, "drivers": ["CO"]})
    grid, lo, hi = demand_curve(assume, CO_MASS, epoch_times(GEOMETRY))
    # closed form Q = M a / (zeta v m), with the outflow law v = 0.85 km/s (r_h / 1 au)^-1/2 (Biver et al. 1997;
    # from memory): at r_h = 1 au v = 850 m/s, at 1.44 au v = 850 / 1.2 m/s
    q1 = 1e10 * 2e-6 / (0.5 * 850.0 * CO_MASS.to_value(u.kg))
    assert lo[0] == pytest.approx(q1, rel=1e-6)
    assert hi[0] == pytest.approx(100 * q1, rel=1e-6)
    assert lo[-1] == pytest.approx(q1 * 1.2, rel=1e-6)
    assert np.all(np.diff(lo) >= 0)                 # r_h grows between the epochs, the speed falls


def test_demand_follows_g_of_r_with_a1_a3():
    ng = {"A1": 1e-8, "A2": 0.0, "A3": 0.0}
    assume = assumptions_from_config({"nongrav": ng, "interval_days": 30, "nucleus": {"mass_kg": [1e10, 1e12]},
                                      "ejection_speed_km_s": 0.5, "momentum_efficiency": 1.0, "drivers": ["CO"]})
    grid, lo, hi = demand_curve(assume, CO_MASS, epoch_times(GEOMETRY))

    def g(r):   # Marsden, Sekanina & Yeomans 1973, AJ 78, 211 (constants from memory)
        r0, m, n, k = 2.808, 2.15, 5.093, 4.6142
        return (r / r0) ** -m * (1 + (r / r0) ** n) ** -k

    assert lo[-1] / lo[0] == pytest.approx(g(1.44) / g(1.0), rel=1e-6)
    assert hi[0] / lo[0] == pytest.approx(100.0, rel=1e-9)


def _settings(budget=None):
    config = {"target": {"ephemeris": "eph.ecsv"}, "cubes": [{"path": "c1.fits", "epoch": "e1"}],
              "species": ["CO", "HCN"]}
    if budget is not None:
        config["budget"] = budget
    return Settings.from_config(validate_config(config))


def test_a_campaign_without_an_acceleration_draws_the_measurements_and_says_no_verdict():
    settings = _settings()
    assert settings.budget.missing and settings.budget.defaulted
    empty = QTable()
    fig = campaign_figures(_limits(), empty, empty, GEOMETRY, settings, [], [], to_png, with_budget=False,
                           dust=False)
    assert fig.drivers_png.startswith(b"\x89PNG") and fig.tracers_png.startswith(b"\x89PNG")
    assert "No band of demanded production: no verdict was computed" in fig.drivers_caption
    assert "Grey: the production rate the push needs" not in fig.drivers_caption
    assert "HCN" in fig.tracers_alt and "HCN" not in fig.drivers_alt
    missing = ["no verdict will be computed: the campaign gives no measured non-gravitational acceleration; set "
               "budget.acceleration_m_s2"]
    html = no_verdict_html(missing) + defaulted_html(["the nucleus radius is the schema's default range"])
    assert "No verdict was computed." in html and "budget.acceleration_m_s2" in html
    assert "This verdict rests on a default" in html


def test_the_figure_with_a_budget_has_the_band_and_the_joint_test():
    budget = {"acceleration_m_s2": [2e-6, 2e-7], "nucleus": {"mass_kg": [1e10, 1e12]}, "drivers": ["CO"]}
    settings = _settings(budget)
    assume = settings.budget.baseline
    times = epoch_times(GEOMETRY)
    table = budget_table(_limits(), {"e1": 1.0 * u.au, "e2": 1.44 * u.au, "all": 1.2 * u.au}, assume, CAT)
    s = species_series(_limits(), "CO", table, assume.name)
    assert set(s.demand) == {"e1", "e2"}
    # constant acceleration and speed: the band between epochs equals the budget's per-epoch values
    s.curve = demand_curve(assume, CAT.get_species("CO").mass, times)
    assert s.curve[1][0] == pytest.approx(s.demand["e1"][0], rel=1e-9)
    assert s.curve[2][-1] == pytest.approx(s.demand["e2"][1], rel=1e-9)
    exclusion = {"CO": (np.logspace(9, 13, 5), np.array([0.0, 1.0, 4.0, 9.0, 20.0]))}
    png = to_png(plot_campaign([s], times, exclusion, (1e10, 1e12)))
    assert png.startswith(b"\x89PNG")
