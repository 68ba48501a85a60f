"""The report's sections: panels for the figures and the HTML of each section, built from the run's products.

Each function reads finished products (tables, stack and bands files) and returns either the data of a figure
(:mod:`pipeline.report.figures` draws it) or an HTML fragment (:mod:`pipeline.report.html` assembles the page).
"""

from __future__ import annotations

import html

import astropy.units as u
import numpy as np
import yaml
from astropy.table import QTable
from scipy.stats import chi2 as chi2_distribution

from pipeline.budget.table import BudgetAssumptions, acceleration_at, ejection_speed_at
from pipeline.catalogue import Catalogue
from pipeline.coma.response import SPECTRAL_RESPONSES
from pipeline.coma.thermal import thermal_dispersion
from pipeline.coma.line_profile import channel_fractions
from pipeline.io.products import BandMeasurements, SpeciesStack
from pipeline.rates.detections import OPACITY_THRESHOLD
from pipeline.rates.activity import SLOPE_RANGE, slope_bound
from pipeline.rates.line_injection import PLACEMENT_KINDS
from pipeline.rates.statistics import bayesian_upper_limit
from pipeline.rates.temperature import q_at_temperature, window_measures
from pipeline.report.figures import BandPanel, SpectrumPanel, plot_mass_budget
from pipeline.report.html import Cell, details, figure_html, table_html
from pipeline.io.tables import cell_float, read_table

__all__ = ["INSTRUMENT_NAMES", "kelvin", "t_kin_text", "instrument_estimates", "spectrum_panels", "band_panels",
           "afrho_points", "infrared_section", "budget_figure", "sweep_curves", "number_text", "assumption_text",
           "injection_section", "joint_section", "forecast_section", "rotational_diagrams", "temperature_section",
           "quoted_section", "water_section", "zeta_section", "conservative_section", "activity_table_html",
           "assumptions_section", "provenance_section"]


#: How the report names an instrument kind (stack inputs' ``kind``, injection tables' ``instrument``).
INSTRUMENT_NAMES = {"line": "millimetre lines", "band": "infrared bands", "millimetre": "millimetre lines",
                    "infrared": "infrared bands"}


def kelvin(value) -> float:
    """A temperature cell as a float in K, with or without a unit, masked as NaN."""
    return cell_float(value, u.K)


def t_kin_text(value) -> str:
    """A kinetic temperature as every table of the report prints it: 3 significant figures, '–' when none."""
    t = kelvin(value)
    return "–" if not np.isfinite(t) else f"{t:.3g}"


def _quoted_row(limits: QTable, species: str, conservative: bool = False):
    """The row the report quotes for ``species`` over all epochs (adopted, else conservative), smallest aperture.

    With ``conservative``, the row at the conservative temperature (the one the injections and joint test use).
    """
    sel = limits[(limits["species"] == species) & (limits["epoch"] == "all")]
    if not conservative and "adopted" in sel.colnames and np.any(np.asarray(sel["adopted"], bool)):
        sel = sel[np.asarray(sel["adopted"], bool)]
    else:
        sel = sel[np.asarray(sel["conservative"], bool)]
    if not len(sel):
        return None
    return sel[int(np.argmin(sel["aperture_km"].to_value(u.km)))]


def instrument_estimates(stack: SpeciesStack, t: float, aperture_km: float) -> list[tuple[str, float, float, int]]:
    """Q ± σ of each instrument kind (millimetre lines, infrared bands) of a stack's epoch 'all', at ``t`` [K].

    Returns (kind, Q, σ_Q, number of inputs) per kind, from the stack's window measures in the aperture of
    ``aperture_km`` (their inverse-variance mean, :func:`pipeline.rates.temperature.q_at_temperature`).
    """
    measures = [m for m in window_measures(stack.inputs, stack.curves)
                if np.isclose(m.aperture_km, aperture_km, rtol=0.05)]
    out = []
    for kind in ("line", "band"):
        mine = [m for m in measures if m.kind == kind]
        if mine:
            q, sigma, _, _ = q_at_temperature(mine, t)
            out.append((kind, q, sigma, len(mine)))
    return out


def spectrum_panels(stack_paths: list[str], limits: QTable, catalogue: Catalogue) -> list[SpectrumPanel]:
    """One panel per species with a millimetre stack: the combined spectrum at the quoted row, and the model line.

    The quoted row is the 'adopted' row of epoch 'all' in the smallest aperture (the temperature the report
    quotes; the conservative row where no row is adopted). The stack is stored at the sweep's temperatures: the
    nearest one is shown, rescaled to the quoted temperature by the lines' response ratio (the ratio of their
    combined σ_Q, exact for one line). Where infrared bands enter the same limit, the panel says which
    instrument carries the weight of the combination and draws the millimetre lines' own limit too.
    """
    panels = []
    for path in stack_paths:
        stack = SpeciesStack.from_fits(path)
        species = stack.species
        if "all" not in stack.spectra:
            continue
        vel = stack.spectra["all"].velocity
        inputs = stack.inputs
        if "kind" in inputs.colnames:
            inputs = inputs[inputs["kind"] == "line"]
        if not len(inputs):
            continue  # infrared bands only: no velocity spectrum (see the infrared section)
        row = _quoted_row(limits, species)
        if row is None:
            continue
        t = kelvin(row["t_kin_K"])
        ap_km = float(row["aperture_km"].to_value(u.km))
        t_values = np.array(sorted(set(kelvin(x) for x in inputs["t_kin"])))
        it = int(np.argmin(np.abs(np.log(t_values) - np.log(t))))
        summary = stack.summary[stack.summary["epoch"] == "all"] if "aperture_km" in stack.summary.colnames else []
        ja = 0
        if len(summary):
            ja = int(summary["aperture_index"][int(np.argmin(np.abs(np.asarray(summary["aperture_km"], float)
                                                                    - ap_km)))])
        estimates = instrument_estimates(stack, t, ap_km)
        lines_now = [e for e in estimates if e[0] == "line"]
        rescale = 1.0
        if lines_now and not np.isclose(t_values[it], t, rtol=1e-3):
            at_grid = instrument_estimates(stack, float(t_values[it]), ap_km)
            grid_sigma = [e[2] for e in at_grid if e[0] == "line"]
            rescale = lines_now[0][2] / grid_sigma[0] if grid_sigma and grid_sigma[0] > 0 else 1.0
        cube = stack.spectra["all"].density
        density = cube[it, min(ja, cube.shape[1] - 1)] * rescale
        window = float(np.max(inputs["window"]))
        v_out = float(np.mean(inputs["outflow"]))
        sig = thermal_dispersion(t * u.K, catalogue.get_species(species).mass).to_value(u.km / u.s)
        shape = np.convolve(channel_fractions(vel, v_out, sig), SPECTRAL_RESPONSES["hanning"], mode="same")
        shape = shape / abs(vel[1] - vel[0])
        detected = bool(row["detected"])
        q_model = float(row["q"].value) if detected else float(row["q_upper"].value)
        label = (f"model at the quoted Q = {q_model:.2e}/s" if detected else f"model at the limit {q_model:.2e}/s")
        origin = str(row["t_origin"]) if "t_origin" in row.colnames else "conservative"
        title = f"{species}: all epochs, {ap_km:.0f} km aperture, T_kin = {t_kin_text(t)} K ({origin})"
        if not np.isclose(t_values[it], t, rtol=1e-3):
            title += f"; stack of the sweep's {t_values[it]:.3g} K rescaled"
        panel = SpectrumPanel(species, vel, density, window, shape * q_model, label, detected)
        panel.title = title
        if len(estimates) > 1:
            w = {k: 1.0 / s**2 for k, _, s, _ in estimates}
            lead = max(w, key=w.get)
            share = 100 * w[lead] / sum(w.values())
            panel.title += (f"\nthe combined {'Q' if detected else 'limit'} rests on the {INSTRUMENT_NAMES[lead]} ("
                            + ("> 99.9" if share > 99.9 else f"{share:.3g}") + " % of the weight)")
            if not detected and lines_now:
                own = float(bayesian_upper_limit(lines_now[0][1], lines_now[0][2], cell_float(row["confidence"])))
                panel.own_model = shape * own
                panel.own_label = f"model at the millimetre lines' own limit {own:.2e}/s"
        panel.estimates = [(f"{INSTRUMENT_NAMES[k]} ({n} inputs)", q, s) for k, q, s, n in estimates]
        panel.combined = (float(row["q"].value), float(row["q_err"].value), float(row["q_upper"].value), detected)
        panels.append(panel)
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
                            "–" if not np.isfinite(r["slope"])
                            else f"{getattr(r['slope'], 'value', r['slope']):.2f} ± "
                                 f"{getattr(r['slope_err'], 'value', r['slope_err']):.2f}",
                            f"{r['q_dust'].value:.3g} ± {r['q_dust_err'].value:.2g}", float(r["momentum_rate"].value)]
                           for r in dust], left=1)
        a = dust.meta.get("assumptions", {})
        out += (f"<p>Afρ after A'Hearn et al. (1984) with the solar model: {html.escape(str(dust.meta.get('solar_model')))}"
                f". The dust production rests on: {html.escape('; '.join(' '.join(assumption_text(k, v)) for k, v in a.items()))}"
                ".</p>")
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


def _observer_names(cubes: list[str], observers: dict[str, str]) -> str:
    """The observers (site or spacecraft) of some cubes, without the 'site: ' kind prefix."""
    names = dict.fromkeys(observers[c].split(": ", 1)[-1] for c in cubes if c in observers)
    return ", ".join(names)


def injection_section(paths: list[str], limits: QTable | None = None,
                      observers: dict[str, str] | None = None) -> str:
    """The injection-recovery section, one row per species, level, instrument and placement kind.

    Millimetre lines and infrared bands are different tests (a line moved in velocity, a band differenced on the
    sky) with noise that may differ by orders of magnitude, so they are never summarised together; nor are the
    nucleus and the ring, whose noise differs. Tables written before the injections named their instrument
    and placement kind are summarised per level only, and say so.
    """
    observers = observers or {}
    rows, old, seen_by = [], [], {}
    for path in paths:
        table = read_table(path)
        if not len(table) or "q_recovered" not in table.colnames:
            continue
        species = table.meta.get("species", "?")
        quoted = _quoted_row(limits, species, conservative=True) if limits is not None else None
        detected = bool(quoted["detected"]) if quoted is not None else False
        split = "instrument" in table.colnames and "placement_kind" in table.colnames
        if not split:
            old.append(species)
        cubes = table.meta.get("instrument_cubes", {})
        keys = (dict.fromkeys(zip(*(np.asarray(table[c], dtype=str) for c in ("level", "instrument",
                                                                              "placement_kind"))))
                if split else dict.fromkeys((str(x), "", "") for x in table["level"]))
        for level, instrument, kind in keys:
            sel = table[np.asarray(table["level"], dtype=str) == level]
            if split:
                sel = sel[(np.asarray(sel["instrument"], dtype=str) == instrument)
                          & (np.asarray(sel["placement_kind"], dtype=str) == kind)]
            ap = sel["aperture_km"].to_value(u.km) if hasattr(sel["aperture_km"], "unit") else np.asarray(
                sel["aperture_km"], dtype=float)
            smallest = float(np.min(ap))
            sel = sel[ap == smallest]
            snr = np.asarray(sel["snr"], dtype=float)
            q_inj = float(u.Quantity(sel["q_injected"][0], 1 / u.s).value)
            sigma = np.asarray(u.Quantity(sel["q_err"], 1 / u.s).value, dtype=float)
            ratio = np.asarray(u.Quantity(sel["q_recovered"], 1 / u.s).value, dtype=float) / q_inj
            what = ("upper end of the detection" if detected else "upper limit") if level == "limit" else "needed"
            who = INSTRUMENT_NAMES.get(instrument, "all instruments together")
            names = _observer_names(list(cubes.get(instrument, [])), observers)
            if names:
                seen_by.setdefault(who, names)
            expected = float(np.median(q_inj / sigma))
            rows.append([species, what, who, kind if split else "all", q_inj, len(snr), f"{expected:.3g}",
                         f"{np.median(snr):.3g}", f"{np.min(snr):.1f} – {np.max(snr):.1f}" if len(snr) > 1 else "–",
                         f"{np.median(ratio):.3g}" if expected >= 3 else "– (below 3σ)",
                         t_kin_text(sel["t_kin_K"][0]), smallest])
    if not rows:
        return "<p>No injections (no covered lines).</p>"
    note = ("" if not old else "<p>Injection tables written before instruments were told apart (" + ", ".join(
        html.escape(s) for s in old) + "): their rows summarise every instrument and placement together; "
        "rerun the injection step for the split.</p>")
    observed = "".join(f" {html.escape(k.capitalize())}: {html.escape(v)}." for k, v in seen_by.items())
    kinds = "; ".join(f"{k}: {v}" for k, v in PLACEMENT_KINDS.items())
    return (table_html(["species", "coma injected at", "instrument", "placed", "Q [1/s]", "placements",
                        "expected (Q / median σ)", "seen at (median σ)", "range over placements [σ]",
                        "recovered / injected (median)", "T_kin [K]", "aperture [km]"], rows, left=4)
            + note
            + f"<p>Injected at: the species' upper limit, the upper end of its detection (Q upper) or the rate the "
              f"push needs from it alone for the lightest nucleus ('needed'). Placed: {html.escape(kinds)}."
              f"{observed}</p>"
            + "<p>Each row: a model coma of the listed Q added to the real data and measured exactly like the real "
              "line or band, at every placement of that kind, in the smallest aperture, at the conservative "
              "T_kin. Millimetre lines are placed at velocities clear of every catalogue line (so the injected "
              "line never falls on a real one); infrared bands at their own wavelength, and recovered as the "
              "measurement with minus without the injection, so whatever real gas and dust are there cancel. "
              "'Expected' is the injected Q over the noise measured at the placements; 'seen at' is what came "
              "out. For an upper limit, the coma at the limit should come out near the limit's significance, and "
              "a needed coma seen at many σ means these data constrain that driver strongly (under the same "
              "model assumptions). For a detected species the first level is the upper end of the detection (Q "
              "upper), and the rows test that a signal of that size added to the data is recovered in full "
              "(recovered / injected near 1), not whether the species is there. Instruments are shown apart: "
              "the quoted rate combines them, and the one with the smaller noise carries it (see the stacked "
              "spectra).</p>")


def joint_section(exclusion_path: str, activity_path: str) -> str:
    """The joint test over all epochs and the activity-law fits."""
    ex = read_table(exclusion_path)
    crossing = ex.meta.get("mass_at_3sigma_kg", {})
    rows = []
    for species, m3 in crossing.items():
        sel = ex[ex["species"] == species]
        n_ep = int(sel["n_epochs"][0]) if len(sel) else 0
        rows.append([species, "–" if m3 is None else f"{m3:.3g}", n_ep,
                     t_kin_text(sel["t_kin_K"][0]) if len(sel) else "–"])
    html_ = table_html(["species", "nucleus mass where the exclusion reaches 3σ [kg]", "epochs", "T_kin [K]"],
                       rows, left=1)
    html_ += ("<p>One likelihood-ratio test over all epochs of 'the gas this species would need, epoch by epoch, "
              "to carry the push alone is there' against 'less gas than that' (chi-bar-square null distribution). "
              "Below the listed mass the hypothesis survives at 3σ; above it the data exclude it. "
              "'–': no crossing inside a wide mass range.</p>")
    act = read_table(activity_path)
    if len(act) and "n" in act.colnames:
        html_ += "<h3>Activity law Q(r_h) = Q0 (r_h/1 au)^-n across epochs</h3>" + activity_table_html(act)
    return html_


def _slope_text(r, n_range: tuple[float, float]) -> str:
    """The slope cell of an activity fit: fixed, fitted with its interval, or unconstrained at a search edge."""
    n = cell_float(r["n"])
    if str(r["slope"]) != "fitted":
        return f"{n:g} (fixed)"
    edge = cell_float(r["n_at_bound"]) if "n_at_bound" in r.colnames else slope_bound(n, n_range)
    if np.isfinite(edge):
        return f"unconstrained (at bound {edge:+g})"
    lo, hi = cell_float(r["n_lo"]), cell_float(r["n_hi"])
    if np.isfinite(lo) and np.isfinite(hi):
        return f"{n:.2f} ({lo:.2f} – {hi:.2f}, 1σ)"
    if np.isfinite(hi):
        return f"{n:.2f} (≤ {hi:.2f} at 1σ; open below)"
    if np.isfinite(lo):
        return f"{n:.2f} (≥ {lo:.2f} at 1σ; open above)"
    return f"{n:.2f} (1σ interval open both ways)"


def _chi2_text(chi2: float, dof: int) -> Cell | str:
    """χ²/dof, with the probability of a larger χ² and a warning when the law does not describe the epochs."""
    if dof <= 0:
        return f"{chi2:.3g} / {dof} (no freedom left)"
    p = float(chi2_distribution.sf(chi2, dof))
    text = f"{chi2:.3g} / {dof} (p = {p:.2g})"
    return Cell(text + ": the law does not fit", "warn") if p < 0.0027 else text


def activity_table_html(act: QTable) -> str:
    """The activity-law fits: slope (fixed, fitted, or unconstrained at a bound of the search) and every χ²/dof."""
    n_range = tuple(act.meta.get("slope_range", SLOPE_RANGE))
    rows = [[str(r["species"]), float(cell_float(getattr(r["aperture_km"], "value", r["aperture_km"]))),
             t_kin_text(r["t_kin_K"]), _slope_text(r, n_range), _chi2_text(cell_float(r["chi2"]), int(r["dof"])),
             f"{u.Quantity(r['q0'], 1 / u.s).value:.3g} ± {u.Quantity(r['q0_err'], 1 / u.s).value:.2g}",
             float(u.Quantity(r["q0_upper"], 1 / u.s).value),
             f"{cell_float(getattr(r['r_h_min'], 'value', r['r_h_min'])):.3f} – "
             f"{cell_float(getattr(r['r_h_max'], 'value', r['r_h_max'])):.3f}", int(r["n_epochs"])] for r in act]
    return (table_html(["species", "aperture [km]", "T_kin [K]", "slope n", "χ² / dof", "Q0 [1/s]",
                        "Q0 upper [1/s]", "r_h range [au]", "epochs"], rows, left=4)
            + f"<p>A free slope is searched between {n_range[0]:g} and {n_range[1]:g}; a best fit at either end means "
              "χ² has no minimum inside the range, and the slope is reported as unconstrained there, not as a "
              "value. Every fit shows χ²/dof and the probability p of a larger χ² if the law held; below p = "
              "0.0027 (3σ) the law does not describe the epochs, and its Q0 is no summary of them.</p>")


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
            t, ap = kelvin(m["t_kin_K"]), float(m["aperture_km"].to_value(u.km))
        else:
            t, ap = kelvin(fc["t_kin_K"][0]), float(np.min(u.Quantity(fc["aperture_km"], u.km).value))
        fc_t = u.Quantity(fc["t_kin_K"], u.K).to_value(u.K)
        fc_ap = u.Quantity(fc["aperture_km"], u.km).to_value(u.km)
        sel = fc[(fc["species"] == species) & np.isclose(fc_t, t) & np.isclose(fc_ap, ap, rtol=0.05)]
        if not len(sel):
            sel = fc[(fc["species"] == species) & np.isclose(fc_t, t)]
        for r in sel:
            rows.append([str(r["epoch"]), r["time"], species, float(u.Quantity(r["aperture_km"], u.km).value),
                         t_kin_text(t), float(r["sigma_q"].value),
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
             t_kin_text(r["t_kin_K"]), f"{r['t_lo_K'].value:.3g} – {r['t_hi_K'].value:.3g}"
             + ("" if r["bounded"] else " (open)"), f"{r['q'].value:.3g} ± {r['sigma_q'].value:.2g}",
             f"{r['chi2']:.1f} / {int(r['dof'])}", int(r["n_lines"]),
             f"{r['e_up_min_K'].value:.0f} – {r['e_up_max_K'].value:.0f}"] for r in fits]
    text = ("<p>T and Q fitted jointly to each species' lines (LTE, blended lines modelled, the cosmic background "
            "included); the interval is where χ² rises by 1, or by χ²/dof when the lines scatter more than their "
            "errors allow (the Particle Data Group's scale factor; σ_Q scaled alike). A closed interval makes the "
            "temperature the one detections are quoted at (this epoch and aperture first, then all epochs, then "
            "another aperture).</p>")
    table = table_html(["species", "epoch", "aperture", "T_kin [K]", "68 % interval [K]", "Q [1/s]", "χ² / dof",
                        "lines", "E_u range [K]"], rows, left=3)
    figure = figure_html(fig, "Population diagrams (all epochs, smallest aperture): the measured window flux of "
                              "each line and cube (where positive) over g_u A_ul against its upper-level energy, "
                              "with the fitted temperature's slope −1/T. The fit itself uses every line, on the full "
                              "model (blends, background, window capture).", "population diagrams") if fig else ""
    return text + table + figure


def _opacity_cell(r) -> Cell | str:
    """The peak-τ cell of a limits row: '–' without a τ, the τ, and beside it what a thick line means."""
    tau = cell_float(r["tau_peak"]) if "tau_peak" in r.colnames else np.nan
    if not np.isfinite(tau):
        return "–"
    corrected = "opacity_corrected" in r.colnames and bool(r["opacity_corrected"])
    if corrected:
        return Cell(f"{tau:.2g}: not thin, Q corrected ×{cell_float(r['opacity_factor']):.3g}", "warn")
    if tau > OPACITY_THRESHOLD:
        return Cell(f"{tau:.2g}: not thin, Q is a lower bound", "warn")
    return f"{tau:.2g}"


def _thick_elsewhere(limits: QTable, shown: QTable) -> str:
    """A sentence naming the rows, not in ``shown``, where the optically thin assumption fails."""
    if "tau_peak" not in limits.colnames:
        return ""
    tau = np.nan_to_num(np.asarray(limits["tau_peak"], dtype=float))
    keys = {(str(r["species"]), str(r["epoch"]), float(r["aperture_km"].to_value(u.km)), kelvin(r["t_kin_K"]))
            for r in shown}
    rest = [r for r, t in zip(limits, tau) if t > OPACITY_THRESHOLD and (
        str(r["species"]), str(r["epoch"]), float(r["aperture_km"].to_value(u.km)), kelvin(r["t_kin_K"])) not in keys]
    if not rest:
        return ""
    worst: dict[str, object] = {}
    for r in rest:
        name = str(r["species"])
        if name not in worst or cell_float(r["tau_peak"]) > cell_float(worst[name]["tau_peak"]):
            worst[name] = r
    parts = [f"{name} up to τ = {cell_float(r['tau_peak']):.2g} (epoch {r['epoch']}, "
             f"{r['aperture_km'].to_value(u.km):.0f} km, T_kin {t_kin_text(r['t_kin_K'])} K)"
             for name, r in worst.items()]
    return (f"<p>Rows of other temperatures (limits.ecsv) where the lines are not optically thin (τ > "
            f"{OPACITY_THRESHOLD:g}, their thin Q a lower bound): " + html.escape("; ".join(parts)) + ".</p>")


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
        rows.append([str(r["species"]), str(r["epoch"]), f"{r['aperture_km'].to_value(u.km):.0f}",
                     "–" if origin == "not needed" else t_kin_text(r["t_kin_K"]), origin + source, value,
                     _opacity_cell(r)])
    return ("<p>Detections at the measured (or configured) temperature, with the spread of Q over that "
            "temperature's interval as a second, systematic error; upper limits at the sweep's conservative "
            "temperature. τ is the peak optical depth of the strongest line in the aperture-mean column; above "
            f"{OPACITY_THRESHOLD:g} the optically thin Q is a lower bound, corrected by τ/(1−e^−τ) only with "
            "excitation.opacity_correction: escape_probability. The table of every temperature follows.</p>"
            + table_html(["species", "epoch", "aperture [km]", "T_kin [K]", "T_kin from", "Q [1/s]", "peak τ"],
                         rows, left=2)
            + _thick_elsewhere(limits, sel))


def conservative_section(limits: QTable, catalogue: Catalogue, nsigma: float) -> str:
    """Every species, epoch and aperture at the conservative temperature, with the opacity of each row."""
    cons = limits[np.asarray(limits["conservative"], bool)]
    band_ids = {b.band_id for b in catalogue.bands}
    rows = []
    for r in cons:
        ids = str(r["lines"]).split(",")
        rows.append([str(r["species"]), str(r["epoch"]), float(r["aperture_km"].to_value(u.km)),
                     "–" if all(x in band_ids for x in ids) else t_kin_text(r["t_kin_K"]),
                     float(r["q"].value), float(r["q_err"].value), float(cell_float(r["snr"])),
                     "yes" if r["detected"] else "no", float(r["q_upper"].value),
                     "–" if not np.isfinite(r["q_fit"].value) else f"{r['q_fit'].value:.3g} ± {r['q_fit_err'].value:.2g}",
                     "–" if not np.isfinite(r["v_offset"].value)
                     else f"{r['v_offset'].value:+.3f} ± {r['v_offset_err'].value:.3f}", _opacity_cell(r),
                     ", ".join(f"{x.split('_', 1)[-1]} band" if x in band_ids else x.split("_", 1)[-1] for x in ids)])
    return (table_html(["species", "epoch", "aperture [km]", "T_kin [K]", "Q [1/s]", "σ_Q [1/s]", "SNR", "detected",
                        "Q upper [1/s]", "profile-fit Q [1/s]", "line centre [km/s]", "peak τ",
                        "lines [MHz] / IR bands"], rows, left=2)
            + "<p>Q upper: Bayesian limit with a flat prior on Q ≥ 0 at the one-sided confidence of "
              f"{nsigma:g}σ; limits.ecsv also holds the classical Q + nσ and the Feldman–Cousins "
              "limits, every temperature and every aperture. For detections, a fit of the outflow line profile gives "
              "Q again and the line centre; a centre far from 0 km/s points at an error in the ephemeris' range "
              "rate. Infrared band rates do not depend on T_kin (shown as –). Peak τ: as in the quoted table; a "
              "detection at a low conservative T_kin may not be thin where the quoted one is.</p>")


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


#: Unit suffixes of configuration and assumption keys, and how the report prints them (longest first).
_KEY_UNITS = (("_m_s2", "m/s²"), ("_kg_m3", "kg/m³"), ("_km_s", "km/s"), ("_au_d2", "au/d²"), ("_days", "d"),
              ("_kg", "kg"), ("_km", "km"), ("_um", "µm"), ("_K", "K"), ("_A", ""))
#: Keys whose two numbers are a value and its 1σ error (the schema's acceleration_m_s2), not a range.
_VALUE_AND_ERROR = ("acceleration_m_s2",)


def number_text(x: float) -> str:
    """A number as the report prints an assumption: 4.24e9, 2.4e-6, 0.15, 1000, 0.1043 (exponents compact)."""
    x = float(x)
    text = f"{x:.4g}" if 1e-3 <= abs(x) < 1e5 else f"{x:.3g}"     # 1000 and 0.104 read better than 1e3, 1.04e-1
    if "e" in text:
        mant, exp = text.split("e")
        text = f"{mant}e{int(exp)}"
    return text


def _split_key(key: str) -> tuple[str, str]:
    for suffix, unit in _KEY_UNITS:
        if key.endswith(suffix):
            return key[: -len(suffix)].replace("_", " "), unit
    return key.replace("_", " "), ""


def assumption_text(key: str, value) -> tuple[str, str]:
    """One assumption as (label, formatted value with its unit): ranges 'a – b unit', a value ± its error."""
    label, unit = _split_key(key)
    tail = f" {unit}" if unit else ""
    if value is None:
        return label, "not given"
    if isinstance(value, bool):
        return label, "yes" if value else "no"
    if isinstance(value, (int, float)):
        return label, number_text(value) + tail
    if isinstance(value, (list, tuple)):
        if value and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
            if len(value) == 2:
                sep = " ± " if key in _VALUE_AND_ERROR else " – "
                return label, f"{number_text(value[0])}{sep}{number_text(value[1])}{tail}"
            return label, ", ".join(number_text(v) for v in value) + tail
        return label, ", ".join(assumption_text(key, v)[1] if not isinstance(v, str) else v for v in value)
    if isinstance(value, dict):
        return label, "; ".join(" ".join(assumption_text(k, v)) for k, v in value.items())
    return label, str(value)


def _nucleus_rows(values: dict) -> dict:
    """Mass, radius and density of a budget's assumptions folded into one 'nucleus mass' entry."""
    out = dict(values)
    if out.get("nucleus_mass_kg") is None:
        return out
    mass = assumption_text("nucleus_mass_kg", out.pop("nucleus_mass_kg"))[1]
    parts = [" ".join(assumption_text(k, out.pop(k))) for k in ("nucleus_radius_km", "bulk_density_kg_m3")
             if out.get(k) is not None]
    out.pop("nucleus_from", None)
    out = {"nucleus_mass_kg": mass + (f" ({', '.join(parts)})" if parts else ""), **out}
    return out


def assumptions_section(measurement: dict, summary: dict) -> str:
    """The assumptions as formatted quantities: the measurements' (limits meta), then the budget's, one column per
    assumption set (an entry that differs from the first set marked)."""
    out = ""
    if measurement:
        out += "<h3>Measurements</h3>" + table_html(
            ["assumption", "value"], [list(assumption_text(k, v)) for k, v in measurement.items()], left=2)
    sets = [dict(a) for a in summary.get("assumption_sets") or []] or (
        [dict(summary["assumptions"])] if summary.get("assumptions") else [])
    if not sets:
        return out + "<p>No budget assumptions (no budget was computed).</p>"
    common = {k: v for k, v in (summary.get("assumptions") or {}).items() if k not in sets[0]}
    names = [str(a.pop("assumption_set", f"set {i + 1}")) for i, a in enumerate(sets)]
    folded = [_nucleus_rows({**a, **common}) for a in sets]
    keys = list(dict.fromkeys(k for a in folded for k in a))
    rows, first = [], folded[0]
    for k in keys:
        cells = []
        for a in folded:
            text = a[k] if k == "nucleus_mass_kg" and k in a else assumption_text(k, a.get(k))[1]
            base = first[k] if k == "nucleus_mass_kg" and k in first else assumption_text(k, first.get(k))[1]
            cells.append(Cell(text, "differs") if a is not first and text != base else text)
        rows.append([_split_key(k)[0], *cells])
    return out + "<h3>Budget</h3>" + table_html(["assumption", *names], rows, left=1 + len(names))


def provenance_section(version: str, provenance: dict, record: dict) -> str:
    """The limits table's inputs with their checksums and the run's configuration, each in a closed block."""
    inputs = provenance.get("inputs", {})
    code = provenance.get("code", "")
    text = (f"<p>gasledger {html.escape(version)}" + (f", code digest {html.escape(str(code))}" if code else "")
            + ". Every output table carries its own provenance record (inputs, checksums, configuration).</p>")
    text += details(f"Inputs of the limits table ({len(inputs)} files, with checksums)",
                    table_html(["file", "checksum"], [[k, v] for k, v in inputs.items()], left=2))
    text += details("Configuration of this run (YAML)",
                    "<pre>" + html.escape(yaml.safe_dump(record, sort_keys=False)) + "</pre>")
    return text
