"""The drivers' verdicts: classes read from the budget's numbers, their wording, colours and the verdict tables' HTML.

A driver's verdict compares the largest nucleus mass its upper bound allows (``mass_allowed`` in budget.ecsv,
the mass whose push the bounded gas could still pay for) with the nucleus-mass range:

* ``total`` -- the allowed mass lies below the lightest nucleus: every mass in the range is excluded;
* ``partial`` -- it lies inside the range: only masses above it are excluded (the value is said);
* ``none`` -- it lies above the heaviest nucleus: no mass in the range is excluded;
* ``unobserved`` -- no cube measured the species (no bound): nothing is said about it.

Tracers (measured species that are not budget drivers) get no verdict. A detected species' bound is its
Bayesian upper bound, close to Q + nσ, and is labelled as such.
"""

from __future__ import annotations

import html
from dataclasses import dataclass
from typing import Any

import astropy.units as u
import numpy as np
from astropy.table import QTable

__all__ = ["KINDS", "COLOURS", "DriverVerdict", "classify", "driver_verdicts", "short_label", "verdict_sentence",
           "conditions_text", "verdict_section", "assumption_sets_table", "no_verdict_html", "defaulted_html",
           "sci", "VERDICT_CSS"]

#: verdict classes, in the order the legend lists them
KINDS = ("total", "partial", "none", "unobserved")

#: one colour per class (the figure's panel labels and the HTML badges); the badges also differ in fill, so
#: the classes stay apart without colour
COLOURS = {"total": "#a50026", "partial": "#c55a00", "none": "#2166ac", "unobserved": "#6b6b6b"}

VERDICT_CSS = """
.verdict{display:inline-block;padding:0 .45em;border-radius:3px;font-weight:600;white-space:nowrap;
border:2px solid currentColor}
.v-total{color:#a50026} .verdict.v-total{background:#a50026;color:#fff;border-color:#a50026}
.v-partial{color:#c55a00} .verdict.v-partial{background:repeating-linear-gradient(135deg,#fde3cc 0 4px,#fff 4px 8px)}
.v-none{color:#2166ac} .verdict.v-none{background:#fff}
.v-unobserved{color:#6b6b6b;font-style:italic} .verdict.v-unobserved{border-style:dashed;background:#fff}
.v-sentences{list-style:none;padding-left:0} .v-sentences li{margin:.35em 0}
.v-missing{background:#fbeaea;border-left:4px solid #a50026;padding:.6em 1em;margin:1em 0}
.v-defaulted{background:#fff6e0;border-left:4px solid #e0a000;padding:.6em 1em;margin:1em 0}
"""

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def sci(value: float, digits: int = 2) -> str:
    """``value`` as 4.2×10⁹ (plain for 0.01 <= |value| < 1e4; '–' when not finite)."""
    if not np.isfinite(value):
        return "–"
    if value == 0 or 1e-2 <= abs(value) < 1e4:
        return f"{float(f'{value:.{digits}g}'):g}"
    exp = int(np.floor(np.log10(abs(value))))
    mant = value / 10.0**exp
    if round(abs(mant), digits - 1) >= 10:
        mant, exp = mant / 10, exp + 1
    return f"{mant:.{digits - 1}f}×10{str(exp).translate(_SUPERSCRIPT)}"


@dataclass(frozen=True)
class DriverVerdict:
    """One driver's verdict under one assumption set, from the budget's all-epochs row."""

    species: str
    assumption_set: str
    kind: str                          # one of KINDS
    q_upper: u.Quantity                # the bound used (1/s); NaN when not observed
    detected: bool
    q: u.Quantity                      # the measured Q and its sigma behind the bound (NaN when unknown)
    q_err: u.Quantity
    q_required: tuple[u.Quantity, u.Quantity]   # lightest, heaviest nucleus
    mass_allowed: u.Quantity
    mass_range: tuple[u.Quantity, u.Quantity]
    ejection_speed: u.Quantity
    t_kin: float                       # K; NaN for infrared bands or when not observed
    aperture: u.Quantity


def classify(q_upper: u.Quantity, mass_allowed: u.Quantity, mass_range: tuple[u.Quantity, u.Quantity]) -> str:
    """The verdict class of a bound: 'unobserved', 'total', 'partial' or 'none' (see the module's docstring).

    ``mass_allowed`` is the largest nucleus mass the bound allows (infinite when the push is zero).
    """
    q = u.Quantity(q_upper, 1 / u.s).value
    if not np.isfinite(q):
        return "unobserved"
    m = u.Quantity(mass_allowed, u.kg).value
    lo, hi = (u.Quantity(x, u.kg).value for x in mass_range)
    if np.isnan(m):
        msg = f"budget: a bound of {q:.3g}/s gives no allowed nucleus mass (NaN); expected a number of kg"
        raise ValueError(msg)
    if m < lo:
        return "total"
    if m < hi:
        return "partial"
    return "none"


def _set_of(sets: list[dict[str, Any]], name: str) -> dict[str, Any]:
    for s in sets:
        if s.get("assumption_set") == name:
            return s
    msg = (f"budget.json: assumption set {name!r} of budget.ecsv is not among assumption_sets "
           f"({', '.join(str(s.get('assumption_set')) for s in sets)}); expected every set the table uses")
    raise KeyError(msg)


def driver_verdicts(budget: QTable, limits: QTable, drivers: list[str],
                    sets: list[dict[str, Any]]) -> list[DriverVerdict]:
    """The verdict of every driver under every assumption set (budget.ecsv's all-epochs rows, drivers only).

    ``sets`` are budget.json's ``assumption_sets`` (for each set's nucleus-mass range); ``limits`` gives the
    measured Q and σ behind a detected driver's bound.
    """
    out = []
    if not len(budget):
        return out
    for r in budget[budget["epoch"] == "all"]:
        name = str(r["species"])
        if name not in drivers:
            continue
        aset = _set_of(sets, str(r["assumption_set"]))
        m_lo, m_hi = (float(x) * u.kg for x in aset["nucleus_mass_kg"])
        q_up = u.Quantity(r["q_upper"], 1 / u.s)
        q, q_err = np.nan / u.s, np.nan / u.s
        if np.isfinite(q_up.value):
            sel = limits[(limits["species"] == name) & (limits["epoch"] == "all")
                         & np.isclose(limits["aperture_km"].to_value(u.km), u.Quantity(r["aperture_km"], u.km).value)
                         & np.isclose(np.asarray(limits["t_kin_K"], float), u.Quantity(r["t_kin_K"], u.K).value)]
            if len(sel):
                q, q_err = u.Quantity(sel["q"][0], 1 / u.s), u.Quantity(sel["q_err"][0], 1 / u.s)
        out.append(DriverVerdict(
            species=name, assumption_set=str(r["assumption_set"]),
            kind=classify(q_up, u.Quantity(r["mass_allowed"], u.kg), (m_lo, m_hi)),
            q_upper=q_up, detected=bool(r["detected"]), q=q, q_err=q_err,
            q_required=(u.Quantity(r["q_required_min"], 1 / u.s), u.Quantity(r["q_required_max"], 1 / u.s)),
            mass_allowed=u.Quantity(r["mass_allowed"], u.kg), mass_range=(m_lo, m_hi),
            ejection_speed=u.Quantity(r["ejection_speed"], u.km / u.s), t_kin=u.Quantity(r["t_kin_K"], u.K).value,
            aperture=u.Quantity(r["aperture_km"], u.km)))
    return out


def short_label(v: DriverVerdict) -> str:
    """A few words: 'excluded at every mass', 'excluded above 4.5×10⁹ kg', 'not excluded', 'not observed'."""
    if v.kind == "total":
        return "excluded at every mass"
    if v.kind == "partial":
        return f"excluded above {sci(v.mass_allowed.to_value(u.kg))} kg"
    if v.kind == "none":
        return "not excluded"
    return "not observed"


def _badge(kind: str, text: str) -> str:
    return f'<span class="verdict v-{kind}">{html.escape(text)}</span>'


def _range(a: float, b: float, unit: str) -> str:
    return f"{a:g}–{b:g} {unit}"


def conditions_text(aset: dict[str, Any], ejection_speed: u.Quantity | None = None) -> str:
    """The assumptions a verdict rests on: nucleus-mass range and where it came from, ejection speed, efficiency."""
    lo, hi = aset["nucleus_mass_kg"]
    source = str(aset.get("nucleus_from", ""))
    radius, density = aset.get("nucleus_radius_km"), aset.get("bulk_density_kg_m3")
    if radius is not None and density is not None:
        origin = f"radius {_range(*radius, 'km')}"
        if source.startswith("H ="):
            origin += f" from {source}"
        origin += f", bulk density {_range(*density, 'kg/m³')}"
    else:
        origin = "given as a mass range"
    ej = aset.get("ejection_speed_km_s")
    if ej == "law":
        speed = "gas leaving at the outflow law's speed 0.85 km/s (r_h/1 au)^-½"
        if ejection_speed is not None and np.isfinite(ejection_speed.value):
            speed += f" ({ejection_speed.to_value(u.km / u.s):.2f} km/s at the epochs' mean r_h)"
    elif isinstance(ej, dict):
        speed = f"gas leaving at its thermal speed at {ej.get('thermal_K')} K"
        if ejection_speed is not None and np.isfinite(ejection_speed.value):
            speed += f" ({ejection_speed.to_value(u.km / u.s):.2f} km/s)"
    else:
        speed = f"gas leaving at {float(ej):g} km/s"
    return (f"a nucleus of {sci(lo)}–{sci(hi)} kg ({origin}), {speed}, momentum efficiency "
            f"{float(aset['momentum_efficiency']):.3g}")


def _bound_text(v: DriverVerdict, nsigma: float) -> str:
    q = sci(v.q_upper.to_value(1 / u.s))
    return f"the bound Q + {nsigma:g}σ ≈ {q} s⁻¹ of its detection" if v.detected else \
        f"its {nsigma:g}σ upper limit of {q} s⁻¹"


def verdict_sentence(v: DriverVerdict, aset: dict[str, Any], nsigma: float) -> str:
    """One plain sentence: the verdict, the numbers behind it and the assumptions it rests on."""
    lo, hi = (x.to_value(1 / u.s) for x in v.q_required)
    cond = conditions_text(aset, v.ejection_speed)
    if v.kind == "unobserved":
        return (f"{v.species} alone: not observed — no cube covered a line or band of it, so these data say "
                "nothing about it (it is not excluded either).")
    q_up = v.q_upper.to_value(1 / u.s)
    if v.kind == "total":
        return (f"{v.species} alone cannot carry the push for any nucleus mass in the range: for {cond}, even the "
                f"lightest nucleus needs {sci(lo)} s⁻¹, {lo / q_up:.3g}× {_bound_text(v, nsigma)}.")
    if v.kind == "partial":
        return (f"{v.species} alone is excluded only for nuclei heavier than "
                f"{sci(v.mass_allowed.to_value(u.kg))} kg; lighter ones in the range remain possible. Assumed: "
                f"{cond}; the lightest nucleus needs {sci(lo)} s⁻¹ and the heaviest {sci(hi)} s⁻¹ against "
                f"{_bound_text(v, nsigma)}.")
    return (f"{v.species} alone is not excluded: for {cond}, even the heaviest nucleus needs only {sci(hi)} s⁻¹, "
            f"{hi / q_up:.2g}× {_bound_text(v, nsigma)}.")


def _measured_cell(v: DriverVerdict, nsigma: float) -> str:
    if v.kind == "unobserved":
        return "not observed"
    if v.detected:
        return (f"detected: Q = {sci(v.q.to_value(1 / u.s), 3)} ± {sci(v.q_err.to_value(1 / u.s))}"
                if np.isfinite(v.q.value) else "detected")
    return f"upper limit ({nsigma:g}σ)"


def verdict_section(verdicts: list[DriverVerdict], sets: list[dict[str, Any]], nsigma: float,
                    defaulted: list[str] = ()) -> str:
    """The first set's verdict table and sentences (drivers only), with the 'defaulted' warnings beside them."""
    if not sets:
        return no_verdict_html(["budget.json lists no assumption set"])
    first = sets[0]
    rows = [v for v in verdicts if v.assumption_set == first["assumption_set"]]
    head = ["driver", "verdict", "detected / limit", "Q bound [1/s]", "Q the push needs [1/s] (lightest – heaviest "
            "nucleus)", "needs / bound", "largest nucleus mass allowed [kg]"]
    body = []
    for v in rows:
        q_up = v.q_upper.to_value(1 / u.s)
        lo, hi = (x.to_value(1 / u.s) for x in v.q_required)
        bound = "–" if not np.isfinite(q_up) else (
            f"{sci(q_up, 3)} (Q + {nsigma:g}σ)" if v.detected else f"{sci(q_up, 3)} ({nsigma:g}σ limit)")
        cells = [html.escape(v.species), _badge(v.kind, short_label(v)), html.escape(_measured_cell(v, nsigma)),
                 html.escape(bound), html.escape(f"{sci(lo)} – {sci(hi)}"),
                 "–" if not np.isfinite(q_up) else html.escape(f"{sci(lo / q_up, 3)} – {sci(hi / q_up, 3)}"),
                 html.escape(sci(v.mass_allowed.to_value(u.kg), 3))]
        body.append("<tr>" + "".join(
            f'<td class="{"l" if i < 3 else ""}">{c}</td>' for i, c in enumerate(cells)) + "</tr>")
    table = ("<table><thead><tr>" + "".join(f'<th class="{"l" if i < 3 else ""}">{html.escape(h)}</th>'
                                            for i, h in enumerate(head))
             + "</tr></thead><tbody>" + "".join(body) + "</tbody></table>")
    sentences = "".join(f"<li>{_badge(v.kind, short_label(v))} {html.escape(verdict_sentence(v, first, nsigma))}</li>"
                        for v in rows)
    legend = ("<p class=\"meta\">" + " ".join(_badge(k, t) for k, t in (
        ("total", "excluded at every mass"), ("partial", "excluded above a mass"), ("none", "not excluded"),
        ("unobserved", "not observed"))) + " — each driver on its own carrying the whole push, all epochs "
              f"combined, assumption set '{html.escape(str(first['assumption_set']))}'. Tracers get no verdict "
              "(see the tracer figure and the quoted table).</p>")
    return defaulted_html(defaulted) + legend + table + f'<ul class="v-sentences">{sentences}</ul>'


def assumption_sets_table(verdicts: list[DriverVerdict], sets: list[dict[str, Any]]) -> str:
    """Driver × assumption set: how the verdict moves when the ejection speed or the efficiency changes."""
    names = [str(s["assumption_set"]) for s in sets]
    drivers = list(dict.fromkeys(v.species for v in verdicts))
    by = {(v.species, v.assumption_set): v for v in verdicts}

    def head(s: dict[str, Any]) -> str:
        ej = s.get("ejection_speed_km_s")
        speed = "outflow law" if ej == "law" else (f"thermal {ej.get('thermal_K')} K" if isinstance(ej, dict)
                                                   else f"{float(ej):g} km/s")
        return (f'<th>{html.escape(str(s["assumption_set"]))}<br><span class="meta">v_ej {html.escape(speed)}, '
                f'ζ = {float(s["momentum_efficiency"]):.3g}</span></th>')

    rows = []
    for d in drivers:
        cells = []
        for n in names:
            v = by.get((d, n))
            if v is None:
                cells.append("<td>–</td>")
                continue
            q_up = v.q_upper.to_value(1 / u.s)
            ratio = "" if not np.isfinite(q_up) else (
                f'<br><span class="meta">needs {sci(v.q_required[0].to_value(1 / u.s) / q_up, 3)}–'
                f'{sci(v.q_required[1].to_value(1 / u.s) / q_up, 3)}× the bound</span>')
            cells.append(f"<td>{_badge(v.kind, short_label(v))}{ratio}</td>")
        rows.append(f'<tr><td class="l">{html.escape(d)}</td>{"".join(cells)}</tr>')
    return ('<table><thead><tr><th class="l">driver</th>' + "".join(head(s) for s in sets) + "</tr></thead><tbody>"
            + "".join(rows) + "</tbody></table><p>Each column repeats the verdict with one assumption changed; the "
            "nucleus-mass range is the same in every column; 'needs' is the production rate the lightest and the "
            "heaviest nucleus need over the species' bound. A verdict that changes across columns rests on that "
            "assumption.</p>")


def no_verdict_html(missing: list[str]) -> str:
    """The verdict section when the budget lacks an input: no verdict, and the sentences saying what is missing."""
    items = "".join(f"<li>{html.escape(s)}</li>" for s in missing)
    return ('<div class="v-missing"><b>No verdict was computed.</b> The budget lacks what a verdict needs:'
            f"<ul>{items}</ul>The production rates and limits are computed as usual; the campaign figure shows "
            "them without the band the push would demand.</div>")


def defaulted_html(defaulted: list[str]) -> str:
    """A warning beside the verdict for every budget input left at a default nobody chose (empty when none)."""
    if not defaulted:
        return ""
    items = "".join(f"<li>{html.escape(s)}</li>" for s in defaulted)
    return f'<div class="v-defaulted"><b>This verdict rests on a default:</b><ul>{items}</ul></div>'
