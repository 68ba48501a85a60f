"""Stage 'report': report.html with figures and tables, and the figures as PNG files."""

from __future__ import annotations

import html
import json

import astropy.units as u
import numpy as np
import yaml
from astropy.table import QTable

from pipeline import __version__
from pipeline.io.atomic import atomic_path, write_text
from pipeline.budget.table import acceleration_at, ejection_speed_at
from pipeline.report.figures import BandPanel, SpectrumPanel, plot_band_spectra, plot_mass_budget, plot_stacked_spectra, plot_temperature_sweep, to_png
from pipeline.coma.line_profile import channel_fractions, thermal_dispersion
from pipeline.report.html import figure_html, page, table_html
from pipeline.coma.response import SPECTRAL_RESPONSES
from pipeline.io.products import BandMeasurements, SpeciesStack
from pipeline.settings import Settings

__all__ = ["run"]

CAUTION = ("These production rates and limits rest on model assumptions: LTE excitation at the kinetic "
           "temperatures listed, optically thin lines, a Haser parent distribution with isotropic uniform outflow, "
           "the photodestruction rates of the catalogue, for infrared bands optically thin solar fluorescence with "
           "the catalogue's g-factors scaled as r_h^-2, for the dust a single grain size, density, speed and albedo, "
           "and, for the budget, momentum balance with the stated "
           "efficiency and ejection speed with all mass loss in one species at a time. Change an assumption and "
           "the numbers change. gasledger reports numbers; whether outgassing can or cannot drive the push is a "
           "conclusion that belongs to peer review, not to this tool.")


def _write_png(data: bytes, path: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)


def _spectrum_panels(stack_paths: list[str], limits: QTable, settings: Settings) -> list[SpectrumPanel]:
    catalogue = settings.catalogue()
    panels = []
    for path in stack_paths:
        stack = SpeciesStack.from_fits(path)
        species = stack.species
        if "all" not in stack.spectra:
            continue
        data = stack.spectra["all"].density
        vel = stack.spectra["all"].velocity
        inputs = stack.inputs
        if "kind" in inputs.colnames:
            inputs = inputs[inputs["kind"] == "line"]
        if not len(inputs):
            continue  # infrared bands only: no velocity spectrum (see the infrared section)
        sel = limits[(limits["species"] == species) & (limits["epoch"] == "all") & limits["conservative"]]
        if not len(sel):
            continue
        row = sel[0]  # smallest aperture, conservative temperature
        t_values = sorted(set(np.asarray(inputs["t_kin"], dtype=float)))
        it = t_values.index(float(row["t_kin_K"]))
        density = data[it, 0]
        window = float(np.max(inputs["window"]))
        v_out = float(np.mean(inputs["outflow"]))
        sig = thermal_dispersion(row["t_kin_K"] * u.K, catalogue.get_species(species).mass).to_value(u.km / u.s)
        shape = np.convolve(channel_fractions(vel, v_out, sig), SPECTRAL_RESPONSES["hanning"], mode="same")
        shape = shape / abs(vel[1] - vel[0])
        detected = bool(row["detected"])
        q_model = float(row["q"].value) if detected else float(row["q_upper"].value)
        label = (f"model at Q = {q_model:.2e}/s" if detected else f"model at the limit {q_model:.2e}/s")
        panels.append(SpectrumPanel(species, vel, density, window, shape * q_model,
                                    f"{label} ({row['aperture_km'].value:.0f} km, {row['t_kin_K']:.0f} K)", detected))
    return panels


def _band_panels(bands_paths: list[str]) -> list[BandPanel]:
    panels = []
    for path in bands_paths:
        measured = BandMeasurements.from_fits(path)
        flux = np.asarray(measured.spectra[0], dtype=float)
        sigma = np.asarray(measured.sigma[0], dtype=float)
        continua = [np.asarray(c[0], dtype=float) for c in measured.continuum]
        bands = measured.bands
        rest = np.asarray(measured.wave["rest"], dtype=float)
        dopp = measured.doppler
        windows = []
        if "window_lo" in bands.colnames:
            for b in dict.fromkeys(str(x) for x in bands["band_id"]):
                r = bands[bands["band_id"] == b][0]
                windows.append((b, float(r["window_lo"]) / dopp, float(r["window_hi"]) / dopp))
        panels.append(BandPanel(f"{measured.cube_id} (epoch {measured.epoch}, R = {measured.resolving_power:.0f})",
                                rest, flux, sigma,
                                continua, windows))
    return panels


def _afrho_points(bands_paths: list[str]) -> tuple[dict, str]:
    """Afrho against wavelength per epoch at the largest aperture, from the bands files' DUST tables."""
    rows = []
    for path in bands_paths:
        t = BandMeasurements.from_fits(path).dust
        if "afrho" in t.colnames:
            rows.extend(list(t))
    if not rows:
        return {}, ""
    largest = max(float(r["aperture_km"]) for r in rows)
    out: dict[str, list] = {}
    for r in rows:
        if float(r["aperture_km"]) == largest:
            out.setdefault(str(r["epoch"]), []).append((float(r["wavelength"]), float(r["afrho"]), float(r["afrho_err"])))
    points = {e: tuple(np.array(v).T) for e, v in ((e, sorted(v)) for e, v in out.items())}
    return points, f"({largest:.0f} km aperture)"


def _infrared_section(bands_paths: list[str], dust_path: str, fig: bytes) -> str:
    if not bands_paths:
        return "<p>No infrared cube in this campaign.</p>"
    rows = []
    for path in bands_paths:
        t = BandMeasurements.from_fits(path).bands
        if "covered" not in t.colnames:
            continue
        for r in t:
            if not r["covered"]:
                rows.append([str(r["cube_id"]), str(r["band_id"]), float(r["aperture_km"]), "not covered", "–", "–",
                             "–", "–"])
                continue
            rows.append([str(r["cube_id"]), str(r["band_id"]), float(r["aperture_km"]),
                         f"{r['flux']:.3g} ± {r['sigma']:.2g}", f"{r['sigma_err']:.2g} / {r['sigma_empirical']:.2g} "
                         f"({r['empirical_method']})", f"{r['capture']:.4f}", float(r["g_factor"]),
                         f"{r['q']:.3g} ± {r['sigma_q']:.2g}"])
    out = figure_html(fig, "Infrared aperture spectra (smallest aperture) with the continuum fits and band windows.",
                      "infrared spectra")
    out += table_html(["cube", "band", "aperture [km]", "band flux [W/m²]", "σ from ERR / empirical [W/m²]",
                       "window capture", "g(r_h) [1/s]", "Q [1/s]"], rows, left=2)
    out += ("<p>Band flux: integral of the continuum-subtracted spectrum over the band's extent widened by 1.5 "
            "line-spread FWHM, divided by the fraction of the band template the window holds; the adopted σ is the "
            "larger of the ERR propagation and the empirical estimate. Q: band flux over the fluorescence flux per "
            "molecule (g-factor scaled as r_h⁻², optically thin, no Swings effect) times the Haser coma counted on "
            "the cube's pixel grid with its PSF.</p>")
    dust = QTable.read(dust_path, format="ascii.ecsv")
    if len(dust) and "afrho" in dust.colnames:
        out += table_html(["epoch", "aperture [km]", "λ_ref [µm]", "Afρ [cm]", "slope [%/100 nm] (at mean λ)",
                           "dust production [kg/s]", "momentum rate [N]"],
                          [[str(r["epoch"]), float(r["aperture_km"].value), float(r["wavelength_ref"].value),
                            f"{r['afrho'].value:.3g} ± {r['afrho_err'].value:.2g}",
                            "–" if not np.isfinite(r["slope"]) else f"{r['slope']:.2f} ± {r['slope_err']:.2f}",
                            f"{r['q_dust'].value:.3g} ± {r['q_dust_err'].value:.2g}", float(r["momentum_rate"].value)]
                           for r in dust], left=1)
        a = dust.meta.get("assumptions", {})
        out += (f"<p>Afρ after A'Hearn et al. (1984) with the solar model: {html.escape(str(dust.meta.get('solar_model')))}"
                f". The dust production rests on: {html.escape('; '.join(f'{k}: {v}' for k, v in a.items()))}.</p>")
    return out


def _budget_figure(budget: QTable, settings: Settings, catalogue):
    assume = settings.budget.baseline
    combined = budget[(budget["epoch"] == "all") & (budget["assumption_set"] == assume.name)]
    r_h = float(np.mean(combined["r_h"].to_value(u.au))) * u.au
    a, a_err = acceleration_at(assume, r_h)
    v = ejection_speed_at(assume, r_h, catalogue.get_species("H2O").mass)  # H2O only matters for a thermal speed
    lo, hi = assume.mass_kg
    mass = np.logspace(np.log10(lo) - 1, np.log10(hi) + 1, 200)
    per_kg = (a / (assume.efficiency * v)).to_value(1 / u.s)
    band = (mass * max(per_kg - (a_err / (assume.efficiency * v)).to_value(1 / u.s), 0.0) + 1e-300,
            mass * (per_kg + (a_err / (assume.efficiency * v)).to_value(1 / u.s)))
    allowed = {}
    for row in combined:
        if np.isfinite(row["q_upper"].value):
            mol = catalogue.get_species(str(row["species"])).mass.to_value(u.kg)
            allowed[str(row["species"])] = float(row["q_upper"].value) * mol
    return plot_mass_budget(mass, mass * per_kg, band, allowed, (lo, hi))


def _sweep_curves(limits: QTable) -> dict:
    curves = {}
    sel = limits[limits["epoch"] == "all"]
    for species in sorted(set(sel["species"])):
        s = sel[sel["species"] == species]
        first_ap = np.min(s["aperture_km"].value)
        s = s[s["aperture_km"].value == first_ap]
        order = np.argsort(s["t_kin_K"])
        t = np.asarray(s["t_kin_K"])[order]
        q = s["q_upper"].value[order]
        curves[species] = (t, q, int(np.argmax(q)))
    return curves


def _injection_section(paths: list[str]) -> str:
    rows = []
    for path in paths:
        table = QTable.read(path, format="ascii.ecsv")
        if not len(table) or "q_recovered" not in table.colnames:
            continue
        species = table.meta.get("species", "?")
        for level in dict.fromkeys(table["level"]):
            sel = table[table["level"] == level]
            smallest = np.min(sel["aperture_km"].to_value(u.km))
            sel = sel[sel["aperture_km"].to_value(u.km) == smallest]
            snr = np.asarray(sel["snr"], dtype=float)
            what = ("at its upper limit" if level == "limit" else
                    "at the rate the push needs from it alone (lightest nucleus)")
            rows.append([species, what, float(sel["q_injected"][0].value), float(np.median(snr)),
                         f"{np.min(snr):.1f} – {np.max(snr):.1f}", len(snr), float(sel["t_kin_K"][0]), smallest])
    if not rows:
        return "<p>No injections (no covered lines).</p>"
    return (table_html(["species", "coma injected", "Q [1/s]", "seen at (median σ)", "range over placements",
                        "placements", "T_kin [K]", "aperture [km]"], rows, left=2)
            + "<p>A model coma was added to the real sub-cubes on the nucleus and on a ring around it, at "
              "velocities clear of every catalogue line, and measured exactly like the real line. A coma at the "
              "upper limit should come out near the limit's significance; a driver whose required coma would be "
              "seen at many σ is strongly constrained by these data (under the same model assumptions).</p>")


def _joint_section(exclusion_path: str, activity_path: str) -> str:
    ex = QTable.read(exclusion_path, format="ascii.ecsv")
    crossing = ex.meta.get("mass_at_3sigma_kg", {})
    rows = []
    for species, m3 in crossing.items():
        sel = ex[ex["species"] == species]
        n_ep = int(sel["n_epochs"][0]) if len(sel) else 0
        rows.append([species, "–" if m3 is None else f"{m3:.3g}", n_ep,
                     float(sel["t_kin_K"][0]) if len(sel) else float("nan")])
    html_ = table_html(["species", "nucleus mass where the exclusion reaches 3σ [kg]", "epochs", "T_kin [K]"],
                       rows, left=1)
    html_ += ("<p>One likelihood-ratio test over all epochs of 'the gas this species would need, epoch by epoch, "
              "to carry the push alone is there' against 'less gas than that' (chi-bar-square null distribution). "
              "Below the listed mass the hypothesis survives at 3σ; above it the data exclude it. "
              "'–': no crossing inside a wide mass range.</p>")
    act = QTable.read(activity_path, format="ascii.ecsv")
    if len(act) and "n" in act.colnames:
        html_ += "<h3>Activity law Q(r_h) = Q0 (r_h/1 au)^-n across epochs</h3>" + table_html(
            ["species", "aperture [km]", "slope", "n", "n (1σ)", "Q0 [1/s]", "σ(Q0) [1/s]", "Q0 upper [1/s]",
             "r_h range [au]"],
            [[str(r["species"]), float(r["aperture_km"]), str(r["slope"]), float(r["n"]),
              (f"{r['n_lo']:.2f} – {r['n_hi']:.2f}" if r["n_constrained"] else "not constrained")
              if r["slope"] == "fitted" else "fixed", float(r["q0"].value), float(r["q0_err"].value),
              float(r["q0_upper"].value), f"{r['r_h_min']:.3f} – {r['r_h_max']:.3f}"] for r in act], left=3)
    return html_


def _forecast_section(forecast_path: str, limits: QTable) -> str:
    fc = QTable.read(forecast_path, format="ascii.ecsv")
    if not len(fc) or "sigma_q" not in fc.colnames:
        return "<p>No planned epochs in the config (key <code>planned</code>).</p>"
    rows = []
    for species in dict.fromkeys(str(s) for s in fc["species"]):
        meas = limits[(limits["species"] == species) & (limits["epoch"] == "all") & limits["conservative"]]
        if len(meas):
            m = meas[np.argmin(meas["aperture_km"].to_value(u.km))]
            t, ap = float(m["t_kin_K"]), float(m["aperture_km"].to_value(u.km))
        else:
            t, ap = float(fc["t_kin_K"][0]), float(np.min(fc["aperture_km"]))
        sel = fc[(fc["species"] == species) & (fc["t_kin_K"] == t) & np.isclose(fc["aperture_km"], ap, rtol=0.05)]
        if not len(sel):
            sel = fc[(fc["species"] == species) & (fc["t_kin_K"] == t)]
        for r in sel:
            rows.append([str(r["epoch"]), r["time"], species, float(r["aperture_km"]), t, float(r["sigma_q"].value),
                         float(r["q_upper_forecast"].value), float(r["significance_required"]),
                         float(m["q_err"].value) if len(meas) else float("nan"),
                         float(m["q_upper"].value) if len(meas) else float("nan")])
    return (table_html(["planned epoch", "time (UTC)", "species", "aperture [km]", "T_kin [K]", "forecast σ_Q [1/s]",
                        "forecast limit (Q = 0) [1/s]", "needed gas seen at [σ]", "measured σ_Q, all epochs [1/s]",
                        "measured limit, all epochs [1/s]"], rows, left=3)
            + "<p>Forecasts run the measurement code on noise-only sub-cubes with the planned noise, channel width "
              "and beam at the planned geometry. 'Needed gas' is the rate the push needs from that species alone "
              "for the lightest nucleus.</p>")


def run(inputs, outputs, settings: Settings) -> None:
    """Build the report from the run's tables and stacks."""
    catalogue = settings.catalogue()
    limits = QTable.read(inputs.limits, format="ascii.ecsv")
    budget = QTable.read(inputs.budget_ecsv, format="ascii.ecsv")
    with open(inputs.budget_json, encoding="utf-8") as fh:
        summary = json.load(fh)
    geometry = [QTable.read(p, format="ascii.ecsv")[0] for p in inputs.geometry]

    fig_spec = to_png(plot_stacked_spectra(_spectrum_panels(list(inputs.stacks), limits, settings)))
    fig_budget = to_png(_budget_figure(budget, settings, catalogue))
    fig_sweep = to_png(plot_temperature_sweep(_sweep_curves(limits)))
    fig_ir = to_png(plot_band_spectra(_band_panels(list(inputs.bands)), *_afrho_points(list(inputs.bands))))
    _write_png(fig_ir, outputs.infrared)
    _write_png(fig_spec, outputs.spectra)
    _write_png(fig_budget, outputs.budget)
    _write_png(fig_sweep, outputs.sweep)

    sections = [("", f'<div class="caution"><b>Read this first.</b> {html.escape(CAUTION)}</div>')]
    sets = list(dict.fromkeys(budget["assumption_set"]))
    combined = budget[(budget["epoch"] == "all") & (budget["assumption_set"] == sets[0])]
    classes = ["unobserved" if r["verdict"] == "not observed" else
               ("allowed" if r["verdict"] == "not excluded" else "excluded") for r in combined]
    sections.append(("Verdict (all epochs combined)", table_html(
        ["species", "verdict", "Q limit [1/s]", "Q required [1/s] (lightest – heaviest nucleus)",
         "required / limit", "largest nucleus mass allowed [kg]"],
        [[str(r["species"]), str(r["verdict"]), float(r["q_upper"].value),
          f"{r['q_required_min'].value:.3g} – {r['q_required_max'].value:.3g}",
          "–" if not np.isfinite(r["ratio_min"]) else f"{r['ratio_min']:.3g} – {r['ratio_max']:.3g}",
          float(r["mass_allowed"].value)] for r in combined], left=2, row_class=classes)
        + f"<p>Over {summary['assumptions']['interval_days']:g} days the push would cost the nucleus "
          f"{100 * summary['rocket_mass_fraction_over_interval']:.3g} % of its mass (rocket equation, independent "
          "of the mass). A driver that no cube covered is listed as 'not observed', never as excluded.</p>"))
    if len(sets) > 1:
        every = budget[budget["epoch"] == "all"]
        sections.append(("Verdict under each assumption set", table_html(
            ["assumption set", "species", "verdict", "required / limit"],
            [[str(r["assumption_set"]), str(r["species"]), str(r["verdict"]),
              "–" if not np.isfinite(r["ratio_min"]) else f"{r['ratio_min']:.3g} – {r['ratio_max']:.3g}"]
             for r in every], left=3)))
    sections.append(("Mass budget", figure_html(
        fig_budget, "Mass-loss rate the acceleration requires (black, grey band ±1σ) against the rate each species' "
                    "upper limit allows (dashed). Where the black line lies above a dashed line, that species alone "
                    "cannot pay for the push at that nucleus mass.", "mass budget chart")))
    sections.append(("Stacked spectra", figure_html(
        fig_spec, "All epochs and lines combined in production-rate units, smallest aperture, conservative "
                  "temperature. Shaded: integration window. Red: model at the measured Q (detection); orange: model at "
                  "the upper limit.", "stacked spectra")))
    cons = limits[limits["conservative"]]
    band_ids = {b.band_id for b in catalogue.bands}
    sections.append(("Production rates and upper limits (conservative temperature)", table_html(
        ["species", "epoch", "aperture [km]", "T_kin [K]", "Q [1/s]", "σ_Q [1/s]", "SNR", "detected",
         "Q upper [1/s]", "profile-fit Q [1/s]", "line centre [km/s]", "lines [MHz] / IR bands"],
        [[str(r["species"]), str(r["epoch"]), float(r["aperture_km"].value),
          "–" if all(x in band_ids for x in str(r["lines"]).split(",")) else float(r["t_kin_K"]),
          float(r["q"].value), float(r["q_err"].value), float(r["snr"]), "yes" if r["detected"] else "no",
          float(r["q_upper"].value),
          "–" if not np.isfinite(r["q_fit"].value) else f"{r['q_fit'].value:.3g} ± {r['q_fit_err'].value:.2g}",
          "–" if not np.isfinite(r["v_offset"].value)
          else f"{r['v_offset'].value:+.3f} ± {r['v_offset_err'].value:.3f}",
          ", ".join(f"{x.split('_', 1)[-1]} band" if x in band_ids else x.split("_", 1)[-1]
                    for x in str(r["lines"]).split(","))] for r in cons], left=2)
        + "<p>Q upper: Bayesian limit with a flat prior on Q ≥ 0 at the one-sided confidence of "
          f"{settings.limits.nsigma}σ; limits.ecsv also holds the classical Q + nσ and the Feldman–Cousins "
          "limits, every temperature and every aperture. For detections, a fit of the outflow line profile gives Q "
          "again and the line centre; a centre far from 0 km/s points at an error in the ephemeris' range rate. "
          "Infrared band rates do not depend on T_kin (shown as –)."
          "</p>"))
    sections.append(("Infrared bands and dust", _infrared_section(list(inputs.bands), inputs.dust, fig_ir)))
    sections.append(("Injection–recovery", _injection_section(list(inputs.injection))))
    sections.append(("All epochs in one test", _joint_section(inputs.exclusion, inputs.activity)))
    sections.append(("Forecast for planned epochs, beside the measurements", _forecast_section(inputs.forecast,
                                                                                              limits)))
    sections.append(("Temperature sweep", figure_html(
        fig_sweep, "Upper limit (all epochs, smallest aperture) against the assumed kinetic temperature; the circled "
                   "point is the most conservative value, the one reported.", "temperature sweep")))
    sections.append(("Geometry per cube", table_html(
        ["cube", "epoch", "mid-time (UTC)", "r_h [au]", "Δ [au]", "Δ̇ [km/s]", "phase [deg]",
         "moved [arcsec]", "SPECSYS"],
        [[str(g["cube_id"]), str(g["epoch"]), g["time_mid"].isot, float(g["r_h"].value), float(g["delta"].value),
          float(g["delta_dot"].value), float(g["phase"].value), float(g["motion"].value), str(g["specsys"])]
         for g in geometry], left=3)))
    assumptions = dict(limits.meta.get("assumptions", {}))
    assumptions.update({f"budget: {k}": v for k, v in summary["assumptions"].items()})
    sections.append(("Assumptions", table_html(["assumption", "value"],
                                               [[k, json.dumps(v) if not isinstance(v, str) else v]
                                                for k, v in assumptions.items()], left=2)))
    prov = limits.meta.get("provenance", {})
    sections.append(("Provenance", f"<p>gasledger {html.escape(__version__)}. Inputs of the limits table:</p>"
                     + table_html(["file", "checksum"], [[k, v] for k, v in prov.get("inputs", {}).items()], left=2)
                     + "<p>Configuration of this run:</p><pre>"
                     + html.escape(yaml.safe_dump(settings.record, sort_keys=False)) + "</pre>"))
    title = f"gasledger report: {settings.campaign}"
    sub = f"Target: {settings.target.name}. Species: {', '.join(settings.species)}."
    write_text(page(title, sections, sub), outputs.html)
