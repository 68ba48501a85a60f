"""What a stacked detection says beyond Q: its line-profile fit, its optical depth and the interferometer's filtering.

These fill extra columns of one species' limits table (:mod:`pipeline.rates.limits_table`) from its stack file's
STACK and INPUTS extensions.
"""

from __future__ import annotations

import logging
import warnings

import astropy.units as u
import numpy as np
from astropy.table import QTable, Table

from pipeline.catalogue import Catalogue
from pipeline.coma.excitation import line_optical_depth
from pipeline.coma.haser import parent_aperture_count, scale_length
from pipeline.coma.line_profile import thermal_dispersion
from pipeline.errors import OpacityWarning
from pipeline.io.memo import Memo, inputs_key
from pipeline.io.products import SpeciesStack
from pipeline.rates.line_fit import fit_line, line_moment

__all__ = ["add_fit_columns", "fit_detections", "opacity_columns", "filtering_columns", "opacity_factor", "OPACITY_THRESHOLD", "mark_opacity"]

log = logging.getLogger(__name__)


def add_fit_columns(table: QTable) -> None:
    """Add the columns of the line-profile fit (q_fit, q_fit_err, v_offset, v_offset_err) and of the line's first
    moment (v_moment, v_moment_err), NaN until fitted."""
    n = len(table)
    table["q_fit"] = np.full(n, np.nan) / u.s
    table["q_fit_err"] = np.full(n, np.nan) / u.s
    table["v_offset"] = np.full(n, np.nan) * u.km / u.s
    table["v_offset_err"] = np.full(n, np.nan) * u.km / u.s
    table["v_moment"] = np.full(n, np.nan) * u.km / u.s
    table["v_moment_err"] = np.full(n, np.nan) * u.km / u.s


def fit_detections(table: QTable, group: str, stack: SpeciesStack, inputs: Table, t_grid: np.ndarray,
                    mass, memo: Memo | None = None) -> None:
    """Fill q_fit, q_fit_err, v_offset, v_offset_err, v_moment, v_moment_err for the detected rows of one group.

    With ``memo`` (:class:`pipeline.io.memo.Memo`), a row whose fit inputs (the spectrum, outflow, thermal width,
    window, channel response, starting Q) are those of a fit kept there takes that fit's numbers, which are the
    ones fitting again gives: an earlier epoch's rows at the sweep's temperatures are not fitted again when the
    campaign grows."""
    members = inputs[(inputs["epoch"] == group)] if group != "all" else inputs
    if "kind" in members.colnames:  # infrared bands have no velocity spectrum to fit
        members = members[members["kind"] == "line"]
    if len(members) == 0:
        return
    spectrum = stack.spectra[group]
    vel = spectrum.velocity
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
        density = spectrum.density[it, ja]
        q_guess = row["q"].to_value(1 / u.s)
        half_width = v_out + 3 * sig_th + abs(spectrum.v_step)

        def measured(density=density, sig_th=sig_th, q_guess=q_guess, half_width=half_width):
            fit = fit_line(vel, density, v_out, sig_th, window, response, q_guess=q_guess)
            return (fit.q, fit.q_err, fit.v_offset, fit.v_offset_err, *line_moment(vel, density, half_width))

        if memo is None:
            q_fit, q_fit_err, v_off, v_off_err, m1, m1_err = measured()
        else:
            key = inputs_key("fit_detections", np.asarray(vel, dtype=float), np.asarray(density, dtype=float),
                             v_out, sig_th, window, response, q_guess, half_width)
            q_fit, q_fit_err, v_off, v_off_err, m1, m1_err = memo.result(key, measured)
        table["q_fit"][k] = q_fit / u.s
        table["q_fit_err"][k] = q_fit_err / u.s
        table["v_offset"][k] = v_off * u.km / u.s
        table["v_offset_err"][k] = v_off_err * u.km / u.s
        table["v_moment"][k] = m1 * u.km / u.s
        table["v_moment_err"][k] = m1_err * u.km / u.s


def opacity_columns(table: QTable, inputs: Table, catalogue: Catalogue, species_name: str,
                    solar_activity: str = "quiet") -> None:
    """Peak optical depth, in the aperture-mean column, of the strongest line of each detected row."""
    species = catalogue.get_species(species_name)
    table["tau_peak"] = np.full(len(table), np.nan)
    known_lines = {ln.line_id for ln in catalogue.lines}
    epochs = np.asarray(inputs["epoch"])
    outflow, r_hs = inputs["outflow"], inputs["r_h"]
    flow: dict[str, tuple] = {}             # per epoch group: outflow, r_h and the scale length (the rows share them)
    for k, row in enumerate(table):
        if not row["detected"] or not np.isfinite(row["q"].value) or row["q"].value <= 0:
            continue
        group = str(row["epoch"])
        if group not in flow:
            sel = (epochs == row["epoch"]) | (group == "all")
            v = float(np.mean(outflow[sel])) * u.km / u.s
            r_h = float(np.mean(r_hs[sel])) * u.au
            flow[group] = (v, r_h, scale_length(v, species.photo_rate(solar_activity), r_h))
        v, r_h, length = flow[group]
        rho = row["aperture_km"].to(u.km)
        column = parent_aperture_count(rho, row["q"], v, length) / (np.pi * rho**2)
        taus = []
        for line_id in str(row["lines"]).split(","):
            if line_id not in known_lines:
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


#: Peak optical depth above which a row is marked (and, if configured, corrected) for opacity.
OPACITY_THRESHOLD = 0.1


def opacity_factor(tau) -> np.ndarray:
    """Escape-probability correction C = tau / (1 - exp(-tau)) of an optically thin Q (1 for tau -> 0).

    >>> round(float(opacity_factor(1.0)), 4)
    1.582

    The factor by which a line of optical depth tau is fainter than the optically thin line of the same
    column (Mangum & Shirley 2015, PASP 127, 266, the optical-depth correction factor, from memory). Applied with
    the peak depth it is an upper bound of the correction of the velocity-integrated flux.
    """
    tau = np.asarray(tau, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(tau > 1e-8, -tau / np.expm1(-np.where(tau > 1e-8, tau, 1.0)), 1.0 + tau / 2)
    return out


def mark_opacity(table: QTable, correction: str) -> None:
    """Mark rows whose peak optical depth exceeds the threshold; with 'escape_probability', correct quoted detections.

    ``opacity_factor`` is tau / (1 - exp(-tau)) where tau_peak > OPACITY_THRESHOLD, else 1; ``opacity_corrected``
    says whether a row's Q, sigma_Q, q_sys and q_upper were multiplied by it (quoted detections only).
    """
    tau = np.nan_to_num(np.asarray(table["tau_peak"], dtype=float)) if "tau_peak" in table.colnames else np.zeros(
        len(table))
    factor = np.where(tau > OPACITY_THRESHOLD, opacity_factor(tau), 1.0)
    table["opacity_factor"] = factor
    fix = (np.asarray(table["adopted"], bool) & np.asarray(table["detected"], bool) & (factor > 1.0)
           if correction == "escape_probability" else np.zeros(len(table), dtype=bool))
    for name in ("q", "q_err", "q_sys", "q_upper"):
        if name in table.colnames:
            table[name][fix] = table[name][fix] * factor[fix]
    table["opacity_corrected"] = fix


def filtering_columns(table: QTable, inputs: Table) -> None:
    """Mean fraction of the model flux that survives interferometric filtering, per row (1 = not configured)."""
    frac = np.ones(len(table))
    if "surviving_fraction" in inputs.colnames:
        for k, row in enumerate(table):
            sel = inputs[((inputs["epoch"] == row["epoch"]) | (row["epoch"] == "all"))
                         & np.isclose(np.asarray(inputs["aperture_km"], dtype=float), row["aperture_km"].to_value(u.km))]
            if len(sel):
                frac[k] = float(np.mean(sel["surviving_fraction"]))
    table["surviving_fraction"] = frac
