"""What every column of the pipeline's output tables holds: its unit and a one-line description, in one place.

:func:`pipeline.io.atomic.write_table` looks each column up here by name (with a per-table override where one
name means different things in two tables) and writes the description into the ECSV header; a bare numeric
column gets the unit named here, and a quantity in another unit of the same kind is converted to it, so a
column name has one unit across all tables. The unit is ``""`` for a number that is dimensionless on purpose
(a ratio, a count, a significance) and ``None`` for text, flags and times. A column not listed here is written
as it is: the run never fails over a missing description; ``tests/workflow/test_workflow.py`` checks that every
column of every table the workflow writes is listed.
"""

from __future__ import annotations

from pathlib import Path

import astropy.units as u

__all__ = ["COLUMNS", "TABLE_COLUMNS", "TABLE_KINDS", "PERCENT_PER_100NM", "column_spec", "table_kind", "described"]

#: The colour of the dust: per cent per 100 nm of the normalised reflectivity gradient.
PERCENT_PER_100NM = u.Unit(u.percent / (100 * u.nm))

_PER_S = "1 / s"
_AREA_FLUX = "W / (um m2)"

#: name -> (unit, description) for every output table; ``TABLE_COLUMNS`` overrides per table.
COLUMNS: dict[str, tuple[str | None, str]] = {
    # identity
    "species": (None, "molecule (catalogue species name)"),
    "tracer": (None, "species measured as a tracer of water (budget.water_from_tracers)"),
    "epoch": (None, "epoch group of the campaign (config cubes[].epoch); 'all' = every epoch combined"),
    "cube_id": (None, "cube identifier (config cubes[].id)"),
    "aperture": (None, "aperture as configured ('1000 km', '2 arcsec')"),
    "aperture_km": ("km", "radius of the circular aperture at the target's distance"),
    "lines": (None, "catalogue lines and bands combined (line_id / band_id, comma-separated)"),
    "n_lines": ("", "number of distinct lines and bands combined"),
    "n_cubes": ("", "number of cubes combined"),
    "n_epochs": ("", "number of epochs combined"),
    # geometry
    "time_start": (None, "start of the exposure (UTC)"),
    "time_mid": (None, "middle of the exposure (UTC)"),
    "time_end": (None, "end of the exposure (UTC)"),
    "time_source": (None, "header cards or config keys the exposure times were read from"),
    "ra": ("deg", "target's right ascension (ICRS) seen by the cube's observer at mid-exposure"),
    "dec": ("deg", "target's declination (ICRS) seen by the cube's observer at mid-exposure"),
    "r_h": ("AU", "heliocentric distance of the target"),
    "delta": ("AU", "distance from the observer to the target"),
    "delta_dot": ("km / s", "range rate of the target seen from the observer (positive receding)"),
    "phase": ("deg", "phase angle Sun-target-observer"),
    "motion": ("arcsec", "target's motion on the sky from the start to the end of the exposure"),
    "delta_dot_change": ("km / s", "change of delta_dot from the start to the end of the exposure"),
    "x_pix": ("", "target's pixel column in the cube (0-based, from the WCS)"),
    "y_pix": ("", "target's pixel row in the cube (0-based, from the WCS)"),
    "specsys": (None, "spectral reference frame of the cube (SPECSYS card)"),
    "frame_factor": ("", "Doppler factor from the cube's SPECSYS frame to its observer's frame"),
    "observer": (None, "who observed: geocentre, site or spacecraft, and its name"),
    "tracked": (None, "whether the cube was made tracking the target (config cubes[].tracked)"),
    "position": (None, "where the target's position comes from: ephemeris or phase_centre"),
    "offset_east": ("arcsec", "offset added to the target's position, east (config cubes[].offset_arcsec)"),
    "offset_north": ("arcsec", "offset added to the target's position, north (config cubes[].offset_arcsec)"),
    "ra_target": ("deg", "right ascension the apertures are centred on"),
    "dec_target": ("deg", "declination the apertures are centred on"),
    "beam_major": ("arcsec", "beam (or PSF) major axis FWHM; NaN where the cube gives none"),
    "beam_minor": ("arcsec", "beam (or PSF) minor axis FWHM; NaN where the cube gives none"),
    "freq_min": ("GHz", "lowest frequency of the cube's spectral axis"),
    "freq_max": ("GHz", "highest frequency of the cube's spectral axis"),
    # production rates and limits
    "t_kin_K": ("K", "gas kinetic temperature of the LTE excitation model"),
    "q": (_PER_S, "production rate Q (molecules per second) at t_kin_K"),
    "q_err": (_PER_S, "1-sigma statistical error of the production rate"),
    "q_upper": (_PER_S, "upper limit on Q at the one-sided confidence of 'confidence' (Bayesian, flat prior on "
                        "Q >= 0)"),
    "snr": ("", "Q over its 1-sigma error"),
    "detected": (None, "Q at least limits.nsigma times its error"),
    "q_upper_classical": (_PER_S, "classical upper limit Q + nsigma sigma_Q"),
    "q_upper_fc": (_PER_S, "upper end of the Feldman-Cousins interval at the same confidence"),
    "confidence": ("", "one-sided confidence of the upper limits (from limits.nsigma)"),
    "q_distributed": (_PER_S, "Q if the species is a Haser daughter of a distributed source (catalogue "
                              "distributed_scale_km); NaN where the catalogue gives none"),
    "q_distributed_err": (_PER_S, "1-sigma error of q_distributed"),
    "q_nonlte": (_PER_S, "Q under non-LTE excitation at gas temperature t_kin_K and water rate q_h2o_excitation "
                         "(the comparison); NaN without it"),
    "q_nonlte_err": (_PER_S, "1-sigma statistical error of q_nonlte"),
    "q_nonlte_upper": (_PER_S, "upper limit on q_nonlte at the confidence of q_upper (Bayesian, flat prior)"),
    "q_h2o_excitation": (_PER_S, "Q(H2O) of the non-LTE excitation at this epoch; NaN without it, or for 'all' "
                                 "when the epochs differ"),
    "q_h2o_from": (None, "where q_h2o_excitation comes from: the epoch's own H2O measurement, or "
                         "excitation.q_h2o_per_s and why"),
    "q_fit": (_PER_S, "Q from a fit of the line profile (detections only, else NaN)"),
    "q_fit_err": (_PER_S, "1-sigma error of q_fit"),
    "v_offset": ("km / s", "velocity offset of the fitted line profile in the target's rest frame"),
    "v_offset_err": ("km / s", "1-sigma error of v_offset"),
    "v_moment": ("km / s", "first moment (flux-weighted mean velocity) of the line in the target's rest frame"),
    "v_moment_err": ("km / s", "1-sigma error of v_moment"),
    "tau_peak": ("", "peak optical depth of the species' strongest line at Q (LTE); NaN where not computed"),
    "surviving_fraction": ("", "mean share of the model flux that survives interferometric filtering "
                               "(1: no filtering configured)"),
    "t_origin": (None, "where t_kin_K comes from: sweep, measured, configured, conservative or not needed"),
    "t_source": (None, "the measurement or setting behind t_kin_K"),
    "t_kin_lo_K": ("K", "lower end of the adopted temperature's interval (NaN on sweep rows)"),
    "t_kin_hi_K": ("K", "upper end of the adopted temperature's interval (NaN on sweep rows)"),
    "q_sys": (_PER_S, "systematic error of Q: its change over the temperature's interval"),
    "adopted": (None, "the row the report quotes for this species, epoch and aperture"),
    "opacity_factor": ("", "tau / (1 - exp(-tau)) where tau_peak > 0.1, else 1"),
    "opacity_corrected": (None, "whether q, q_err, q_sys and q_upper were multiplied by opacity_factor"),
    "conservative": (None, "the sweep temperature giving the largest q_upper for this species, epoch and "
                           "aperture"),
    # temperature
    "t_lo_K": ("K", "lower end of the temperature's 1-sigma interval (profile chi2 + 1)"),
    "t_hi_K": ("K", "upper end of the temperature's 1-sigma interval (profile chi2 + 1)"),
    "bounded": (None, "whether the interval closes inside the temperature grid"),
    "sigma_q": (_PER_S, "1-sigma error of Q"),
    "chi2": ("", "chi-square of the fit"),
    "dof": ("", "degrees of freedom of the fit"),
    "e_up_min_K": ("K", "lowest upper-level energy of the lines fitted"),
    "e_up_max_K": ("K", "highest upper-level energy of the lines fitted"),
    # activity law
    "slope": (None, "the slope n: 'fixed' (limits.activity_slope) or 'fitted'"),
    "n": ("", "slope n of Q(r_h) = Q0 (r_h / 1 au)^-n"),
    "n_lo": ("", "lower end of the 1-sigma interval of a fitted n (NaN where open)"),
    "n_hi": ("", "upper end of the 1-sigma interval of a fitted n (NaN where open)"),
    "n_constrained": (None, "whether both ends of n's interval are found"),
    "n_at_bound": ("", "the end of the slope's search range a fitted n sits at (NaN: inside the range)"),
    "q0": (_PER_S, "Q0, the production rate at 1 au"),
    "q0_err": (_PER_S, "1-sigma error of Q0"),
    "q0_upper": (_PER_S, "upper limit on Q0 at the limits' confidence"),
    "r_h_min": ("AU", "smallest heliocentric distance of the epochs fitted"),
    "r_h_max": ("AU", "largest heliocentric distance of the epochs fitted"),
    # budget
    "assumption_set": (None, "the budget's assumption set (baseline first)"),
    "acceleration": ("m / s2", "non-gravitational acceleration at r_h"),
    "acceleration_err": ("m / s2", "1-sigma error of the acceleration"),
    "ejection_speed": ("km / s", "speed of the escaping gas assumed by the assumption set"),
    "mdot_required_min": ("kg / s", "gas mass-loss rate the push needs for the lightest nucleus of the range"),
    "mdot_required_max": ("kg / s", "gas mass-loss rate the push needs for the heaviest nucleus of the range"),
    "q_required_min": (_PER_S, "production rate the push needs from this species alone, lightest nucleus"),
    "q_required_max": (_PER_S, "production rate the push needs from this species alone, heaviest nucleus"),
    "ratio_min": ("", "q_required_min / q_upper"),
    "ratio_max": ("", "q_required_max / q_upper"),
    "mass_allowed": ("kg", "largest nucleus mass whose push the species' limit allows"),
    "density_allowed_rmin": ("kg / m3", "bulk density of mass_allowed for the smallest nucleus radius"),
    "density_allowed_rmax": ("kg / m3", "bulk density of mass_allowed for the largest nucleus radius"),
    "sunlit_area_ratio_min": ("", "sublimating area the lightest nucleus needs over its cross-section"),
    "sunlit_area_ratio_max": ("", "sublimating area the heaviest nucleus needs over its cross-section"),
    "dust_force": ("N", "largest push the dust can give (0 unless budget.include_dust)"),
    "verdict": (None, "what the limit says about the push: the nucleus-mass range excluded, partly or not"),
    # joint test
    "mass": ("kg", "nucleus mass tested"),
    "significance": ("", "one-sided Gaussian significance with which the data exclude the gas the push needs "
                         "at this mass"),
    # line shift
    "cos_theta": ("", "cosine of the angle between the escaping gas's direction and the line of sight"),
    "zeta": ("", "momentum efficiency the line's first moment allows"),
    "zeta_err": ("", "1-sigma error of zeta"),
    "zeta_upper": ("", "upper limit on zeta at 95 % confidence"),
    "reading": (None, "what the row says, in words"),
    "push_direction": (None, "where the push's direction comes from"),
    # water from tracers
    "kind": (None, "whether the tracer is a detection or an upper limit"),
    "q_tracer": (_PER_S, "the tracer's production rate (quoted row)"),
    "q_tracer_err": (_PER_S, "its error, statistical and temperature systematic in quadrature"),
    "abundance_low": ("", "lowest assumed abundance of the tracer relative to water"),
    "abundance_high": ("", "highest assumed abundance of the tracer relative to water"),
    "q_h2o_low": (_PER_S, "lowest water production rate the tracer implies (inference)"),
    "q_h2o_high": (_PER_S, "highest water production rate the tracer implies (inference)"),
    "q_h2o_required_min": (_PER_S, "water production rate the push needs, lightest nucleus"),
    "q_h2o_required_max": (_PER_S, "water production rate the push needs, heaviest nucleus"),
    "abundance_ref": (None, "source of the abundance range"),
    # dust
    "wavelength": ("um", "wavelength of the Afrho measurement"),
    "wavelength_ref": ("um", "reference (shortest measured) wavelength of afrho"),
    "flux_density": (_AREA_FLUX, "continuum flux density in the aperture"),
    "flux_density_err": (_AREA_FLUX, "1-sigma error of the flux density"),
    "afrho": ("cm", "Afrho (A'Hearn et al. 1984) at the observed phase angle"),
    "afrho_err": ("cm", "1-sigma error of Afrho"),
    "q_dust": ("kg / s", "dust mass production rate (single grain size; an order-of-magnitude estimate)"),
    "q_dust_err": ("kg / s", "error of q_dust from Afrho's error only"),
    "momentum_rate": ("N", "momentum rate of the dust, all grains leaving one way (an upper bound)"),
    # injection
    "level": (None, "what was injected: Q at the limit, or the Q the push needs"),
    "q_injected": (_PER_S, "production rate of the injected model coma"),
    "instrument": (None, "which measurement the coma was injected into: millimetre lines or infrared bands"),
    "placement_kind": (None, "where the coma was injected: on the nucleus or on the ring around it"),
    "placement": ("", "index of the sky position the coma was injected at (0: the nucleus)"),
    "velocity_slot": ("", "index of the velocity the coma was injected at, clear of every catalogue line"),
    "q_recovered": (_PER_S, "production rate measured from the injected coma"),
    "n_spectra": ("", "number of spectra or band measurements combined"),
    "q_data": (_PER_S, "the data measured at the injection placement, in Q units (noise: no line is there)"),
    "q_per_q": ("", "the model coma measured alone at the placement, per unit injected production rate"),
    # forecast
    "time": (None, "planned time (UTC, config planned[].time)"),
    "q_upper_forecast": (_PER_S, "upper limit expected for a measured Q of 0"),
    "significance_required": ("", "q_required_min over the forecast sigma_Q"),
}

#: table kind -> name -> (unit, description), where a column means something else in that table.
TABLE_COLUMNS: dict[str, dict[str, tuple[str | None, str]]] = {
    "limits": {
        "time_mid": (None, "mean of the epoch's cubes' mid-exposure times (UTC); empty for 'all'"),
        "r_h": ("AU", "mean heliocentric distance of the epoch's cubes; NaN for 'all'"),
        "delta": ("AU", "mean observer-target distance of the epoch's cubes; NaN for 'all'"),
    },
    "temperature": {
        "q": (_PER_S, "production rate fitted jointly with the temperature"),
        "t_kin_K": ("K", "kinetic temperature fitted to the species' lines (LTE)"),
    },
    "activity": {
        "t_kin_K": ("K", "temperature conservative for the epochs combined, at which every epoch's Q is fitted"),
    },
    "budget": {
        "r_h": ("AU", "mean heliocentric distance of the epoch group's cubes"),
        "q_upper": (_PER_S, "the species' largest upper limit at this epoch over temperatures and apertures"),
        "t_kin_K": ("K", "temperature of q_upper"),
        "aperture_km": ("km", "aperture of q_upper"),
        "detected": (None, "whether the species is detected in any row of the limits at this epoch"),
    },
    "exclusion": {
        "t_kin_K": ("K", "temperature of the per-epoch Q tested (conservative for the epochs combined)"),
        "aperture_km": ("km", "aperture of the per-epoch Q tested (the smallest)"),
    },
    "dust": {
        "slope": (PERCENT_PER_100NM.to_string(), "dust colour: normalised reflectivity gradient over every "
                                                 "wavelength measured, at their mean"),
        "slope_err": (PERCENT_PER_100NM.to_string(), "1-sigma error of the colour"),
    },
    "injection": {
        "t_kin_K": ("K", "temperature the injected coma is modelled and measured at"),
        "q_err": (_PER_S, "1-sigma error of q_recovered"),
        "snr": ("", "q_recovered over its 1-sigma error"),
    },
    "injection_epoch": {
        "t_kin_K": ("K", "temperature the model coma is made and measured at"),
        "q_err": (_PER_S, "1-sigma noise of the data at the placement, in Q units"),
        "line_id": (None, "the line or band injected"),
    },
    "forecast": {
        "epoch": (None, "planned epoch (config planned[].label)"),
        "sigma_q": (_PER_S, "forecast 1-sigma error of Q for the planned noise (the measurement code on "
                            "noise-only cubes)"),
        "n_lines": ("", "number of planned lines of the species combined"),
        "r_h": ("AU", "heliocentric distance at the planned time"),
        "delta": ("AU", "observer-target distance at the planned time"),
    },
    "zeta": {
        "v_moment": ("km / s", "first moment of the best-measured detection of the epoch"),
        "ejection_speed": ("km / s", "ejection speed of the baseline assumption set at the epoch"),
    },
}

#: The table kinds, named after their files (results/<kind>.ecsv, or results/<kind>/<name>.ecsv).
TABLE_KINDS = ("geometry", "limits", "activity", "temperature", "budget", "exclusion", "zeta", "water_inferred",
               "dust", "afrho", "injection", "injection_epoch", "forecast")


def table_kind(path: str | Path) -> str | None:
    """The kind of output table a path holds: its file name (``limits.ecsv``), its folder's (``limits/CO.ecsv``)
    or its folder's folder's (``injection_epoch/e1/CO.ecsv``).

    >>> table_kind("results/demo/limits/CO.ecsv"), table_kind("out/budget.ecsv"), table_kind("x/y.ecsv")
    ('limits', 'budget', None)
    >>> table_kind("out/injection_epoch/e1/CO.ecsv")
    'injection_epoch'
    """
    path = Path(path)
    for name in (path.stem, path.parent.name, path.parent.parent.name):
        if name in TABLE_KINDS:
            return name
    return None


def column_spec(name: str, kind: str | None = None) -> tuple[str | None, str] | None:
    """(unit, description) of column ``name`` in a table of ``kind``; None when the column is not listed.

    >>> column_spec("t_kin_K", "limits")[0], column_spec("slope", "activity")[0], column_spec("nothing")
    ('K', None, None)
    """
    override = TABLE_COLUMNS.get(kind or "", {})
    return override.get(name, COLUMNS.get(name))


def _unit_of(spec_unit: str | None) -> u.UnitBase | None:
    return u.Unit(spec_unit) if spec_unit else None


def described(table, kind: str | None):
    """A copy of ``table`` (data shared) with each listed column's description, and its unit where one is listed.

    A bare numeric column takes the listed unit (its name promises it, as ``t_kin_K`` or ``aperture_km`` do); a
    column already in another unit of the same kind is converted; a column in a unit of another kind, or not
    listed, is left as it is (the workflow test names it).
    """
    out = table.copy(copy_data=False)
    for name in out.colnames:
        spec = column_spec(name, kind)
        if spec is None:
            continue
        unit, text = _unit_of(spec[0]), spec[1]
        col = out[name]
        current = getattr(col, "unit", None)
        if unit is not None and getattr(col, "dtype", None) is not None and col.dtype.kind in "fiu":
            if current is None:
                col = col.copy()
                col.unit = unit           # a Column: the QTable makes it a Quantity (masked where it was)
                out[name] = col
            elif current != unit and current.is_equivalent(unit):
                out[name] = u.Quantity(col).to(unit) if isinstance(col, u.Quantity) else col.to(unit)
        out[name].info.description = text
    return out
