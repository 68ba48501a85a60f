"""The report's sections: panels for the figures and the HTML of each section, built from the run's products.

Each function reads finished products (tables, stack and bands files) and returns either the data of a figure
(:mod:`pipeline.report.figures` draws it) or an HTML fragment (:mod:`pipeline.report.html` assembles the page).
"""

from __future__ import annotations

import html

import astropy.units as u
import numpy as np
from astropy.table import QTable

from pipeline.budget.table import BudgetAssumptions, acceleration_at, ejection_speed_at
from pipeline.catalogue import Catalogue
from pipeline.coma.response import SPECTRAL_RESPONSES
from pipeline.coma.thermal import thermal_dispersion
from pipeline.coma.line_profile import channel_fractions
from pipeline.io.products import BandMeasurements, SpeciesStack
from pipeline.rates.detections import OPACITY_THRESHOLD
from pipeline.rates.temperature import window_measures
from pipeline.report.figures import BandPanel, SpectrumPanel, plot_mass_budget
from pipeline.report.html import figure_html, table_html
from pipeline.io.tables import read_table

__all__ = ["spectrum_panels", "band_panels", "afrho_points", "infrared_section", "budget_figure", "sweep_curves",
           "injection_section", "joint_section", "forecast_section", "rotational_diagrams", "temperature_section",
           "quoted_section", "water_section", "zeta_section"]


def spectrum_panels(stack_paths: list[str], limits: QTable, catalogue: Catalogue) -> list[SpectrumPanel]:
    """One panel per species with a millimetre stack: the combined spectrum at the quoted row, and the model line."""
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


def band_panels(bands_paths: list[str]) -> list[BandPanel]:
    """One panel per infrared cube: the first aperture's spectrum, its sigma, fitted continua and band windows."""
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


def afrho_points(bands_paths: list[str]) -> tuple[dict, str]:
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


def infrared_section(bands_paths: list[str], dust_path: str, fig: bytes) -> str:
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
    dust = read_table(dust_path)
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


def budget_figure(budget: QTable, assume: BudgetAssumptions, catalogue: Catalogue):
    """The mass-loss rate the push needs against nucleus mass, with each driver's allowed rate (baseline set)."""
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


def sweep_curves(limits: QTable) -> dict:
    """Upper limit against T_kin per species (all epochs, smallest aperture)."""
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


def injection_section(paths: list[str]) -> str:
    """The injection-recovery section: would the needed gas (or gas at the limit) have been seen."""
    rows = []
    for path in paths:
        table = read_table(path)
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


def joint_section(exclusion_path: str, activity_path: str) -> str:
    """The joint test over all epochs and the activity-law fits."""
    ex = read_table(exclusion_path)
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
    act = read_table(activity_path)
    if len(act) and "n" in act.colnames:
        html_ += "<h3>Activity law Q(r_h) = Q0 (r_h/1 au)^-n across epochs</h3>" + table_html(
            ["species", "aperture [km]", "slope", "n", "n (1σ)", "Q0 [1/s]", "σ(Q0) [1/s]", "Q0 upper [1/s]",
             "r_h range [au]"],
            [[str(r["species"]), float(r["aperture_km"]), str(r["slope"]), float(r["n"]),
              (f"{r['n_lo']:.2f} – {r['n_hi']:.2f}" if r["n_constrained"] else "not constrained")
              if r["slope"] == "fitted" else "fixed", float(r["q0"].value), float(r["q0_err"].value),
              float(r["q0_upper"].value), f"{r['r_h_min']:.3f} – {r['r_h_max']:.3f}"] for r in act], left=3)
    return html_


def forecast_section(forecast_path: str, limits: QTable) -> str:
    """The planned epochs' forecasts beside the measured limits."""
    fc = read_table(forecast_path)
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


def rotational_diagrams(temperature_path: str, stack_paths: list[str], catalogue: Catalogue) -> dict[str, dict]:
    """Population-diagram data of every species with a closed temperature interval (all epochs, first aperture)."""
    fits = read_table(temperature_path)
    out: dict[str, dict] = {}
    if not len(fits):
        return out
    stacks = {SpeciesStack.from_fits(p).species: p for p in stack_paths}
    for row in fits[(fits["epoch"] == "all") & np.asarray(fits["bounded"], bool)]:
        name = str(row["species"])
        if name in out or name not in stacks:
            continue
        stack = SpeciesStack.from_fits(stacks[name])
        ms = [m for m in window_measures(stack.inputs, stack.curves) if m.kind == "line" and m.aperture == row["aperture"]]
        t = float(row["t_kin_K"].to_value(u.K))
        lines = [catalogue.get_line(m.line_id) for m in ms]
        e_up = np.array([ln.e_up.to_value(u.K) for ln in lines])
        ga = np.array([ln.g_up * ln.a_ul.to_value(1 / u.s) for ln in lines])
        flux = np.array([m.flux for m in ms])
        y = np.log(np.clip(flux, 1e-300, None) / ga)
        y_err = np.array([m.sigma for m in ms]) / np.abs(flux)
        model = np.log(np.array([float(row["q"].to_value(1 / u.s)) * m.scale(np.array([t]))[0] for m in ms]) / ga)
        keep = flux > 0
        out[name] = {"e_up": e_up[keep], "y": y[keep], "y_err": np.minimum(y_err[keep], 3.0), "t_kin": t,
                     "t_lo": float(row["t_lo_K"].to_value(u.K)), "t_hi": float(row["t_hi_K"].to_value(u.K)),
                     "intercept": float(np.median(model + e_up / t))}
    return out


def temperature_section(temperature_path: str, fig: bytes | None) -> str:
    """The measured temperatures (every species, epoch group and aperture with a fit) and the population diagrams."""
    fits = read_table(temperature_path)
    if not len(fits):
        return ("<p>No species has lines of different upper energy in these data: no temperature is measured; "
                "detections are quoted at the configured temperature (excitation.t_adopted_K) or at the sweep's "
                "conservative one.</p>")
    rows = [[str(r["species"]), str(r["epoch"]), str(r["aperture"]),
             f"{r['t_kin_K'].value:.1f}", f"{r['t_lo_K'].value:.1f} – {r['t_hi_K'].value:.1f}"
             + ("" if r["bounded"] else " (open)"), f"{r['q'].value:.3g} ± {r['sigma_q'].value:.2g}",
             f"{r['chi2']:.1f} / {int(r['dof'])}", int(r["n_lines"]),
             f"{r['e_up_min_K'].value:.0f} – {r['e_up_max_K'].value:.0f}"] for r in fits]
    text = ("<p>T and Q fitted jointly to each species' lines (LTE, blended lines modelled, the cosmic background "
            "included); the interval is where χ² rises by 1, or by χ²/dof when the lines scatter more than their "
            "errors allow (the Particle Data Group's scale factor; σ_Q scaled alike). A closed interval makes the "
            "temperature the one detections are quoted at (this epoch and aperture first, then all epochs, then "
            "another aperture).</p>")
    table = table_html(["species", "epoch", "aperture", "T [K]", "68 % interval [K]", "Q [1/s]", "χ² / dof",
                        "lines", "E_u range [K]"], rows, left=3)
    figure = figure_html(fig, "Population diagrams (all epochs, smallest aperture): the measured window flux of "
                              "each line and cube (where positive) over g_u A_ul against its upper-level energy, "
                              "with the fitted temperature's slope −1/T. The fit itself uses every line, on the full "
                              "model (blends, background, window capture).", "population diagrams") if fig else ""
    return text + table + figure


def quoted_section(limits: QTable) -> str:
    """The value the report quotes for each species, epoch and aperture, and the temperature it rests on."""
    sel = limits[np.asarray(limits["adopted"], bool)] if "adopted" in limits.colnames else limits[:0]
    rows = []
    for r in sel:
        origin = str(r["t_origin"])
        source = f" ({r['t_source']})" if str(r["t_source"]) not in ("", "--", "sweep") else ""
        if origin == "not needed":
            origin, source = "not needed", " (infrared bands)"
        if bool(r["detected"]):
            sys_ = r["q_sys"].to_value(1 / u.s)
            value = f"{r['q'].value:.3g} ± {r['q_err'].value:.2g}" + (f" ± {sys_:.2g} (T)" if np.isfinite(sys_) else "")
        else:
            value = f"< {r['q_upper'].value:.3g}"
        q_d = float(r["q_distributed"].to_value(1 / u.s)) if "q_distributed" in r.colnames else np.nan
        if np.isfinite(q_d) and abs(q_d - r["q"].value) > r["q_err"].value:
            value += (f"; from a distributed source {q_d:.3g} ± {r['q_distributed_err'].to_value(1 / u.s):.2g}"
                      if bool(r["detected"]) else "; a distributed source needs more (see limits.ecsv)")
        tau = float(r["tau_peak"]) if "tau_peak" in r.colnames and np.isfinite(r["tau_peak"]) else np.nan
        thick = np.isfinite(tau) and tau > OPACITY_THRESHOLD
        corrected = "opacity_corrected" in r.colnames and bool(r["opacity_corrected"])
        opacity = "–" if not np.isfinite(tau) else (f"{tau:.2g}" + (" (corrected ×{:.3g})".format(
            float(r["opacity_factor"])) if corrected else (" (thin Q is a lower bound)" if thick else "")))
        rows.append([str(r["species"]), str(r["epoch"]), f"{r['aperture_km'].to_value(u.km):.0f}",
                     "–" if origin == "not needed" else f"{r['t_kin_K']:.1f}", origin + source, value, opacity])
    return ("<p>Detections at the measured (or configured) temperature, with the spread of Q over that "
            "temperature's interval as a second, systematic error; upper limits at the sweep's conservative "
            "temperature. τ is the peak optical depth of the strongest line in the aperture-mean column; above "
            f"{OPACITY_THRESHOLD:g} the optically thin Q is a lower bound, corrected by τ/(1−e^−τ) only with "
            "excitation.opacity_correction: escape_probability. The table of every temperature follows.</p>"
            + table_html(["species", "epoch", "aperture [km]", "T [K]", "temperature from", "Q [1/s]", "peak τ"],
                         rows, left=2))


def water_section(water_path: str) -> str:
    """The water production inferred from tracers, labelled as an inference (empty when none is configured)."""
    water = read_table(water_path)
    if not len(water):
        return ("<p>No tracer abundances configured (budget.water_from_tracers): no water production is inferred "
                "from other species.</p>")
    rows = [[str(r["tracer"]), str(r["epoch"]), f"{r['aperture_km'].to_value(u.km):.0f}", str(r["kind"]),
             f"{r['abundance_low'] * 100:.3g}–{r['abundance_high'] * 100:.3g} %",
             f"{r['q_h2o_low'].value:.3g} – {r['q_h2o_high'].value:.3g}",
             f"{r['q_h2o_required_min'].value:.3g} – {r['q_h2o_required_max'].value:.3g}", str(r["reading"]),
             str(r["abundance_ref"])] for r in water]
    return ('<div class="caution"><b>An inference, not a measurement.</b> Each row divides a tracer\'s quoted Q '
            "(±2σ, the temperature's systematic included) or its limit by an abundance range relative to water "
            "taken from the literature; the result is only as good as that range, and no verdict uses it.</div>"
            + table_html(["tracer", "epoch", "aperture [km]", "quoted", "abundance / H2O", "inferred Q(H2O) [1/s]",
                          "Q(H2O) the push needs [1/s]", "reading", "abundance source"], rows, left=4))


def zeta_section(zeta_path: str) -> str:
    """The momentum efficiency each detected line's centre allows (empty note when no line was fitted)."""
    zeta = read_table(zeta_path)
    model = ("<p>If escaping gas drives the push, it leaves against it, and a detected line's centre moves by "
             "ζ v_ej cos θ (θ between the line of sight and the direction opposite to the push; the first moment of "
             "an optically thin line is the emitters' mean line-of-sight velocity). Each detected line's first moment "
             "gives "
             "the efficiency ζ it allows; the budget is also computed at the combined 95 % bound when that is below "
             "the configured efficiency (the assumption set 'line-shift zeta'). The push's direction: "
             + (html.escape(str(zeta["push_direction"][0])) if len(zeta) else "–") + ".</p>")
    if not len(zeta):
        return "<p>No detected line has a fitted centre: the line shapes say nothing about the push here.</p>"

    def fmt(x, spec):
        return "–" if not np.isfinite(x) else format(x, spec)

    rows = [[str(r["species"]), str(r["epoch"]), fmt(float(r["v_moment"].value), "+.3f") + " ± "
             + fmt(float(r["v_moment_err"].value), ".3f"), fmt(float(r["cos_theta"]), "+.2f"),
             fmt(float(r["zeta"]), ".2g") + " ± " + fmt(float(r["zeta_err"]), ".2g"), fmt(float(r["zeta_upper"]), ".2g"),
             str(r["reading"])] for r in zeta]
    return model + table_html(["species", "epoch", "line first moment [km/s]", "cos θ", "ζ", "ζ (95 % upper)", "reading"],
                              rows, left=2)
