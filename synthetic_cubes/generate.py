"""Writing the synthetic campaign: ephemerides, the spacecraft's state table, cubes and a campaign config.

Sky model of each millimetre line: a Haser parent coma (column density
integrated over each pixel analytically near the nucleus), times the LTE flux
per molecule, with the arcsine-plus-thermal line profile of an isotropic
outflow, each channel convolved with its elliptical Gaussian beam (one beam
for the cube, or the channel's own from a per-channel beam table),
Doppler-shifted by the target's topocentric radial velocity and placed at its
ephemeris position. Noise is Gaussian, correlated over the channel's beam on
the sky and between neighbouring channels by Hanning smoothing (applied to
signal and noise, as a correlator does). Geometry comes from propagating the
invented orbital elements, seen from the fictional ground site (millimetre
cubes) or the fictional spacecraft (infrared cubes, :mod:`.infrared`,
:mod:`.spacecraft`).

Two file layouts (``layout``): 'facility', as facility pipelines deliver
cubes -- the ground array's 4-D cubes (RA, Dec, FREQ descending, a Stokes axis
of length 1; DATE-OBS at the start of the track, with DATE-END or, at the
scenario's ``start_only_epochs``, without any end card so the config carries
``duration_s``; BMAJ/BMIN cards or, at ``beam_table_epochs``, a BEAMS table
with CASAMBM = T) and the space IFU's multi-extension files (see
:mod:`.infrared`); 'native', the simple layout (one 3-D primary image with
FREQ ascending, DATE-OBS/DATE-END, BMAJ/BMIN).

The generator reuses the pipeline's physics (orbit, LTE, Haser, frames), so
recovering the injected rates is a consistency check of the chain; each
physics function has its own external checks in tests/.
"""

from __future__ import annotations

import logging
import warnings
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
import yaml
from astropy.coordinates import EarthLocation, SkyCoord
from astropy.io import fits
from astropy.time import Time
from astropy.wcs import WCS, FITSFixedWarning
from scipy.signal import fftconvolve

from pipeline.io.atomic import write_fits, write_text
from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.image import apply_spectral_response, beam_kernel, coma_molecules_image
from pipeline.coma.line_profile import channel_fractions, thermal_dispersion
from pipeline.coma.response import SPECTRAL_RESPONSES, ComaModel, outflow_speed, scale_lengths
from pipeline.offline import future_time_tolerated
from pipeline.geometry.observers import Observer
from pipeline.geometry.orbit import OrbitalElements, ephemeris_from_elements, observe, write_ephemeris
from pipeline.geometry.frames import observer_frame_factor, radio_velocity, to_target_frame

from .infrared import write_ir_cube
from .spacecraft import state_table, write_state_table
from .sky import sky_header
from .scenario import Scenario

__all__ = ["write_scenario", "campaign_config", "hanning", "line_sky_model", "beam_correlated_noise",
           "channel_beams", "LAYOUTS", "STATES_FILE", "SPACECRAFT_EPHEMERIS_FILE"]

#: Cube layouts the generator writes: as facility pipelines deliver them, or the simple native one.
LAYOUTS = ("facility", "native")
#: The spacecraft's state-vector table and the target's ephemeris seen from it, below the output folder.
STATES_FILE = "spacecraft_states.ecsv"
SPACECRAFT_EPHEMERIS_FILE = "ephemeris_spacecraft.ecsv"

log = logging.getLogger(__name__)
_HANNING = SPECTRAL_RESPONSES["hanning"]


def hanning(cube: np.ndarray) -> np.ndarray:
    """Hanning smoothing [1/4, 1/2, 1/4] along the first axis (edges reflect)."""
    return apply_spectral_response(cube, "hanning")



def _window_frequencies(window, catalogue, delta_dot: u.Quantity) -> np.ndarray:
    """Topocentric channel frequencies [Hz] of a window tuned on its lines at ``delta_dot``."""
    freqs = u.Quantity([catalogue.get_line(l).freq for l in window.lines])
    beta = (delta_dot / const.c).decompose().value
    shifted = freqs.to_value(u.Hz) * np.sqrt((1 - beta) / (1 + beta))
    margin = shifted.mean() * window.margin_km_s / const.c.to_value(u.km / u.s)
    lo, hi = shifted.min() - margin, shifted.max() + margin
    df = window.channel_khz * 1e3
    n = int(np.ceil((hi - lo) / df)) + 1
    return lo + df * np.arange(n)


def line_sky_model(shape: tuple[int, int], x0: float, y0: float, pixel_arcsec: float, lines: list[dict],
                   beams: tuple[np.ndarray, np.ndarray, np.ndarray], t_kin: u.Quantity, r_h: u.Quantity,
                   delta: u.Quantity, model: ComaModel) -> np.ndarray:
    """Model comae of several lines in Jy/beam, each channel convolved with its own beam, shape (n_chan, n_y, n_x).

    ``lines`` holds mappings of ``line``, ``species``, ``parent`` (catalogue entries), ``q`` [1/s] and
    ``velocity`` (the channels' velocities for that line in the target's frame, km/s, ascending); ``beams`` the
    channels' FWHM major, minor [arcsec] and PA [deg]. The pieces are those of
    :func:`pipeline.coma.image.model_line_cube` (Haser column integrated over each pixel, LTE flux per molecule,
    outflow-plus-thermal line profile), with the beam convolution done channel by channel: with one beam for
    every channel the result equals the sum of ``model_line_cube`` over the lines. No channel response.
    """
    bmaj, bmin, bpa = (np.asarray(b, dtype=float) for b in beams)
    nchan = bmaj.size
    v_out = outflow_speed(model, r_h)
    pix_km = (pixel_arcsec * u.arcsec).to_value(u.rad) * u.Quantity(delta).to_value(u.km)
    flux = np.zeros((nchan, *shape))                                   # Jy per pixel in each channel
    for entry in lines:
        species, line = entry["species"], entry["line"]
        length, daughter = scale_lengths(species, entry.get("parent"), model, r_h, v_out)
        molecules = coma_molecules_image(shape, x0, y0, pix_km, v_out, length, daughter)
        image = molecules * entry["q"] * flux_per_molecule(line, species, t_kin, delta).to_value(u.Jy * u.km / u.s)
        vel = np.asarray(entry["velocity"], dtype=float)
        sigma_th = thermal_dispersion(t_kin, species.mass).to_value(u.km / u.s)
        profile = channel_fractions(vel, v_out.to_value(u.km / u.s), sigma_th) / np.abs(np.median(np.diff(vel)))
        flux += profile[:, None, None] * image[None]
    beam_over_pix = np.pi / (4 * np.log(2)) * bmaj * bmin / pixel_arcsec**2
    if np.all(bmaj == bmaj[0]) and np.all(bmin == bmin[0]) and np.all(bpa == bpa[0]):
        kernel = beam_kernel(bmaj[0] / pixel_arcsec, bmin[0] / pixel_arcsec, bpa[0])
        return fftconvolve(flux, kernel[None], mode="same", axes=(1, 2)) * beam_over_pix[:, None, None]
    out = np.empty_like(flux)
    for c in range(nchan):
        kernel = beam_kernel(bmaj[c] / pixel_arcsec, bmin[c] / pixel_arcsec, bpa[c])
        out[c] = fftconvolve(flux[c], kernel, mode="same") * beam_over_pix[c]
    return out


def beam_correlated_noise(rng: np.random.Generator, shape: tuple[int, int, int], pixel_arcsec: float,
                          beams: tuple[np.ndarray, np.ndarray, np.ndarray], rms: float) -> np.ndarray:
    """White noise convolved with each channel's beam (kernel normalised to unit sum of squares), times ``rms``."""
    noise = rng.standard_normal(shape)
    bmaj, bmin, bpa = (np.asarray(b, dtype=float) for b in beams)
    for c in range(shape[0]):
        if c == 0 or (bmaj[c], bmin[c], bpa[c]) != (bmaj[c - 1], bmin[c - 1], bpa[c - 1]):
            kernel = beam_kernel(bmaj[c] / pixel_arcsec, bmin[c] / pixel_arcsec, bpa[c])
            kernel = kernel / np.sqrt(np.sum(kernel**2))
        noise[c] = fftconvolve(noise[c], kernel, mode="same")
    return noise * rms


def channel_beams(sc: Scenario, epoch: str, f_topo: u.Quantity, layout: str) -> tuple[np.ndarray, ...]:
    """FWHM major, minor [arcsec] and PA [deg] of each channel.

    The scenario's beam in every channel, except in the facility layout at the scenario's ``beam_table_epochs``:
    there the beam scales as 1/frequency (a diffraction-limited synthesised beam, FWHM ~ lambda / baseline) from
    the scenario's beam at the window's mean frequency, as a per-channel BEAMS table carries it.
    """
    bmaj, bmin, bpa = sc.beam_arcsec
    ones = np.ones(f_topo.size)
    if layout == "facility" and epoch in sc.beam_table_epochs:
        scale = float(np.mean(f_topo.to_value(u.Hz))) / f_topo.to_value(u.Hz)
        return bmaj * scale, bmin * scale, bpa * ones
    return bmaj * ones, bmin * ones, bpa * ones


def _beam_table(beams: tuple[np.ndarray, ...]) -> fits.BinTableHDU:
    """The per-channel BEAMS table (one polarisation) radio-interferometer pipelines write."""
    bmaj, bmin, bpa = beams
    n = bmaj.size
    hdu = fits.BinTableHDU.from_columns([
        fits.Column(name="BMAJ", format="E", unit="arcsec", array=bmaj),
        fits.Column(name="BMIN", format="E", unit="arcsec", array=bmin),
        fits.Column(name="BPA", format="E", unit="deg", array=bpa),
        fits.Column(name="CHAN", format="J", array=np.arange(n, dtype=np.int32)),
        fits.Column(name="POL", format="J", array=np.zeros(n, dtype=np.int32)),
    ], name="BEAMS")
    hdu.header["EXTVER"] = 1
    hdu.header["NCHAN"] = n
    hdu.header["NPOL"] = 1
    return hdu


def _write_cube(path: Path, sc: Scenario, window, epoch: str, times: tuple[Time, Time, Time], geo, catalogue,
                location: EarthLocation, rng: np.random.Generator, layout: str) -> dict:
    """Build and write one millimetre cube in ``layout``; return a summary."""
    start, mid, end = times
    ra, dec = geo["ra"], geo["dec"]
    delta, r_h, ddot = geo["delta"], geo["r_h"], geo["delta_dot"]
    f_topo = _window_frequencies(window, catalogue, ddot) * u.Hz
    n, nchan = sc.npix, f_topo.size
    pix = sc.pixel_arcsec * u.arcsec
    # target position: phase centre is offset from the target
    header = sky_header(ra, dec, sc.pointing_offset_arcsec, pix, n, "SIN")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        wcs = WCS(header).celestial
    x0, y0 = (float(v) for v in wcs.world_to_pixel(SkyCoord(ra, dec, frame="icrs")))
    specsys = sc.specsys[epoch]
    factor = observer_frame_factor(specsys, mid, location, ra, dec)
    f_label = f_topo * factor
    f_rest_target = to_target_frame(f_topo, ddot)
    beams = channel_beams(sc, epoch, f_topo, layout)
    model = ComaModel(outflow="law", solar_activity="quiet")
    lines = []
    for line in catalogue.lines:
        q = sc.production_rates.get(line.species)
        if q is None:
            continue
        vel = radio_velocity(f_rest_target, line.freq).to_value(u.km / u.s)
        if not (vel.min() < -5 and vel.max() > 5):
            continue
        species = catalogue.get_species(line.species)
        lines.append({"line": line, "species": species, "q": q, "velocity": vel,
                      "parent": catalogue.get_species(species.parent) if species.parent else None})
    signal = line_sky_model((n, n), x0, y0, sc.pixel_arcsec, lines, beams, sc.t_kin_K * u.K, r_h, delta, model)
    noise = beam_correlated_noise(rng, (nchan, n, n), sc.pixel_arcsec, beams,
                                  sc.noise_jy_beam / np.sqrt(np.sum(_HANNING**2)))
    cube = hanning(signal + noise).astype(np.float32)

    header["RADESYS"] = "ICRS"
    if layout == "facility":                   # the ground array's pipeline: FREQ descending, a Stokes axis
        cube, f_label, beams = cube[::-1], f_label[::-1], tuple(b[::-1] for b in beams)
    header["CTYPE3"], header["CUNIT3"] = "FREQ", "Hz"
    header["CRVAL3"], header["CDELT3"], header["CRPIX3"] = f_label[0].to_value(u.Hz), \
        (f_label[1] - f_label[0]).to_value(u.Hz), 1.0
    if layout == "facility":
        header["CTYPE4"], header["CRVAL4"], header["CDELT4"], header["CRPIX4"] = "STOKES", 1.0, 1.0, 1.0
        header["CUNIT4"] = ""
    header["SPECSYS"] = specsys
    header["RESTFRQ"] = float(np.mean(f_topo.to_value(u.Hz)))
    header["BUNIT"] = "Jy/beam"
    header["BTYPE"] = "Intensity"
    hdus = []
    if layout == "facility" and epoch in sc.beam_table_epochs:
        header["CASAMBM"] = (True, "per-channel beams in the BEAMS table")
        hdus.append(_beam_table(beams))
    else:
        header["BMAJ"], header["BMIN"], header["BPA"] = (sc.beam_arcsec[0] / 3600, sc.beam_arcsec[1] / 3600,
                                                         sc.beam_arcsec[2])
    header["DATE-OBS"] = start.isot
    if layout == "native":
        header["DATE-END"] = end.isot
        header["MJD-OBS"] = start.mjd
        header["EXPTIME"] = (end - start).to_value(u.s)
    else:
        header["TIMESYS"] = "UTC"
        if epoch not in sc.start_only_epochs:
            header["DATE-END"] = end.isot
    header["OBJECT"] = sc.target_name
    header["TELESCOP"] = sc.site["name"]
    geocentric = location.to_geocentric()
    header["OBSGEO-X"], header["OBSGEO-Y"], header["OBSGEO-Z"] = (float(c.to_value(u.m)) for c in geocentric)
    header["ORIGIN"] = "gasledger synthetic_cubes (invented data)"
    data = cube[None] if layout == "facility" else cube
    write_fits(fits.HDUList([fits.PrimaryHDU(data, header=header), *hdus]), path)
    return {"path": str(path), "lines": [entry["line"].line_id for entry in lines], "x_pix": x0, "y_pix": y0,
            "nchan": nchan}


def _cube_times(mid: Time, seconds: float) -> tuple[Time, Time, Time]:
    """Start, mid and end of an exposure of ``seconds`` centred on ``mid``."""
    half = seconds / 2 * u.s
    return mid - half, mid, mid + half


def campaign_config(sc: Scenario, outdir: str | Path, results: str = "results/demo",
                    layout: str = "facility") -> dict:
    """The campaign config of ``sc`` with its files below ``outdir`` (what :func:`write_scenario` writes).

    The campaign's observatory is the fictional ground site and ``target.ephemeris`` its table; each infrared
    cube names its own observer (the fictional spacecraft and its state table), its own ephemeris (seen from
    the spacecraft) and apertures that fit its small field. In the facility layout a cube whose header gives
    only its start carries ``duration_s`` and an infrared cube its PSF as ``beam_arcsec`` (the space IFU's
    product carries no beam cards).
    """
    _check_layout(layout)
    outdir = Path(outdir)
    craft = {"name": sc.spacecraft["name"], "states": str(outdir / STATES_FILE)}
    cubes = []
    for label, _ in sc.epochs:
        for window in sc.windows:
            entry = {"path": str(outdir / f"{label}_{window.name}.fits"), "id": f"{label}_{window.name}",
                     "epoch": label}
            if layout == "facility" and label in sc.start_only_epochs:
                entry["duration_s"] = _track_s(sc, label)
            cubes.append(entry)
        for setup in sc.infrared:
            if label not in setup.epochs:
                continue
            entry = {"path": str(outdir / f"{label}_{setup.name}.fits"), "id": f"{label}_{setup.name}",
                     "epoch": label, "resolving_power": setup.resolving_power, "observatory": dict(craft),
                     "ephemeris": str(outdir / SPACECRAFT_EPHEMERIS_FILE), "apertures_km": list(sc.ir_apertures_km)}
            if layout == "facility":
                entry["beam_arcsec"] = [setup.psf_fwhm_arcsec, setup.psf_fwhm_arcsec, 0.0]
            cubes.append(entry)
    return {
        "campaign": sc.campaign,
        "outdir": results,
        "target": {"name": sc.target_name, "ephemeris": str(outdir / "ephemeris.ecsv")},
        "observatory": {"name": sc.site["name"], "lon_deg": sc.site["lon_deg"], "lat_deg": sc.site["lat_deg"],
                        "height_m": sc.site["height_m"]},
        "cubes": cubes,
        "species": sorted(sc.production_rates),
        "apertures_km": list(sc.apertures_km),
        "comoving": {"half_width_km_s": sc.half_width_km_s},
        "limits": {"nsigma": 3},
        # the scenario's own water production rate: the collisions of the non-LTE comparison the report shows
        # beside the LTE sweep (excitation.model stays lte)
        "excitation": {"t_kin_K": [10, 20, 40, 80],
                       **({"q_h2o_per_s": float(sc.production_rates["H2O"])} if sc.production_rates.get("H2O")
                          else {})},
        "coma": {"outflow_km_s": "law", "solar_activity": "quiet"},
        "infrared": {"margin_fwhm": 1.5, "continuum_factor": 1.0, "continuum_order": 1,
                     "continuum_shape": "solar"},
        "dust": {"wavelengths_um": [2.5, 2.9, 4.1, 4.45, 4.9], "half_width_um": 0.04, "grain_radius_um": 1.0,
                 "grain_density_kg_m3": 1000.0, "speed_km_s": 0.1, "albedo": 0.16},
        "planned": [dict(p) for p in sc.planned],
        "budget": {"acceleration_m_s2": list(sc.acceleration_m_s2), "interval_days": 30,
                   "nucleus": {"radius_km": list(sc.nucleus_radius_km),
                               "density_kg_m3": list(sc.nucleus_density_kg_m3)},
                   "ejection_speed_km_s": 0.3, "momentum_efficiency": 1.0, "include_dust": False,
                   # a second set: gas leaving at the outflow law's speed, so the report shows how far the verdict
                   # moves with the ejection speed
                   "assumption_sets": [{"name": "outflow-law ejection speed", "ejection_speed_km_s": "law"}],
                   # published ranges of cometary abundances relative to water (the review's compilation of
                   # measured comets; numbers from memory): turn the tracers into an inferred water range
                   "water_from_tracers": [t for t in [
                       {"species": "HCN", "abundance": [0.0008, 0.0025],
                        "ref": "Bockelee-Morvan & Biver 2017, Phil. Trans. R. Soc. A 375, 20160252 (from memory)"},
                       {"species": "CH3OH", "abundance": [0.007, 0.061],
                        "ref": "Bockelee-Morvan & Biver 2017, Phil. Trans. R. Soc. A 375, 20160252 (from memory)"}]
                       if t["species"] in sc.production_rates]},                 # only tracers the campaign measures
    }


def _track_s(sc: Scenario, label: str) -> float:
    if label not in sc.track_s:
        msg = f"scenario: epoch {label!r} has no track length in track_s (found {', '.join(sc.track_s)})"
        raise ValueError(msg)
    return float(sc.track_s[label])


def _check_layout(layout: str) -> None:
    if layout not in LAYOUTS:
        msg = f"layout {layout!r} is not one of {', '.join(LAYOUTS)}"
        raise ValueError(msg)


def write_scenario(sc: Scenario, outdir: str | Path, config_path: str | Path | None = None,
                   results: str = "results/demo", progress=print, layout: str = "facility") -> Path:
    """Write the ephemerides, the spacecraft's state table, the cubes and the campaign config of ``sc``.

    ``layout`` 'facility' writes the cubes as facility pipelines deliver them (millimetre: 4-D with a Stokes
    axis, FREQ descending, start-only or DATE-END times, BMAJ cards or a BEAMS table; infrared: the space
    IFU's empty primary and SCI/ERR/DQ/WMAP extensions, a rotated field with a blank border and flagged
    voxels); 'native' the simple layout (one 3-D primary image per millimetre cube; primary, SCI and ERR for
    the infrared ones). Returns the path of the config file written (default ``outdir/campaign.yaml``).
    """
    _check_layout(layout)
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    catalogue = load_catalogue()
    elements = OrbitalElements.from_mapping(sc.elements)
    location = EarthLocation.from_geodetic(sc.site["lon_deg"] * u.deg, sc.site["lat_deg"] * u.deg,
                                           sc.site["height_m"] * u.m)
    mids = Time([t for _, t in sc.epochs], scale="utc")
    span = Time([t for _, t in sc.epochs] + [p["time"] for p in sc.planned], scale="utc")
    start, stop = span.min() - 1 * u.day, span.max() + 1 * u.day
    progress(f"ephemeris of {sc.target_name} from {start.isot} to {stop.isot}")
    craft = Observer(name=sc.spacecraft["name"], states=str(outdir / STATES_FILE))
    with future_time_tolerated():
        table = ephemeris_from_elements(elements, start, stop, sc.ephemeris_step_min * u.min, location)
        write_ephemeris(table, outdir / "ephemeris.ecsv")
        geo = observe(elements, mids, location)
        write_state_table(state_table(start, stop, sc.spacecraft, Time(sc.spacecraft["halo_epoch"], scale="utc")),
                          outdir / STATES_FILE)
        progress(f"state vectors of {craft.name} every {sc.spacecraft['state_step_h']:g} h")
        table = ephemeris_from_elements(elements, start, stop, sc.ephemeris_step_min * u.min, craft)
        write_ephemeris(table, outdir / SPACECRAFT_EPHEMERIS_FILE)
        geo_craft = observe(elements, mids, craft)
    rng = np.random.default_rng(sc.seed)
    for k, (label, _) in enumerate(sc.epochs):
        g = {c: geo[c][k] for c in ("ra", "dec", "r_h", "delta", "delta_dot")}
        for window in sc.windows:
            path = outdir / f"{label}_{window.name}.fits"
            with future_time_tolerated():
                info = _write_cube(path, sc, window, label, _cube_times(mids[k], _track_s(sc, label)), g, catalogue,
                                   location, rng, layout)
            progress(f"wrote {path} ({info['nchan']} channels, lines {', '.join(info['lines']) or 'none'})")
        g = {c: geo_craft[c][k] for c in ("ra", "dec", "r_h", "delta", "delta_dot")}
        for setup in sc.infrared:
            if label not in setup.epochs:
                continue
            path = outdir / f"{label}_{setup.name}.fits"
            with future_time_tolerated():
                info = write_ir_cube(path, sc, setup, mids[k], g, catalogue, rng, layout=layout, observer=craft)
            progress(f"wrote {path} ({info['nchan']} channels, bands {', '.join(info['bands']) or 'none'})")
    config = campaign_config(sc, outdir, results, layout)
    truth = {"production_rates_per_s": sc.production_rates, "t_kin_K": sc.t_kin_K, "seed": sc.seed,
             "dust": dict(sc.extra.get("dust", {})), "layout": layout}
    write_text(yaml.safe_dump(truth, sort_keys=True), outdir / "truth.yaml")
    config_path = Path(config_path) if config_path is not None else outdir / "campaign.yaml"
    write_text("# Written by synthetic_cubes: an invented campaign (fictional object, site, spacecraft and epochs).\n"
               + yaml.safe_dump(config, sort_keys=False), config_path)
    progress(f"wrote {config_path}")
    return config_path
