"""Writing the synthetic campaign: ephemeris table, cubes and a campaign config.

Sky model of each line: a Haser parent coma (column density integrated over
each pixel analytically near the nucleus), times the LTE flux per molecule,
convolved with the elliptical Gaussian beam, with the arcsine-plus-thermal
line profile of an isotropic outflow, Doppler-shifted by the target's
topocentric radial velocity and placed at its ephemeris position. Noise is
Gaussian, correlated over the beam on the sky and between neighbouring
channels by Hanning smoothing (applied to signal and noise, as a correlator
does). Geometry comes from propagating the invented orbital elements.

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
from pipeline.coma.image import apply_spectral_response, beam_kernel, model_line_cube
from pipeline.coma.response import SPECTRAL_RESPONSES, ComaModel
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import OrbitalElements, ephemeris_from_elements, observe, write_ephemeris
from pipeline.geometry.frames import observer_frame_factor, radio_velocity, to_target_frame

from .infrared import write_ir_cube
from .sky import sky_header
from .scenario import Scenario

__all__ = ["write_scenario", "hanning"]

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


def _write_cube(path: Path, sc: Scenario, window, epoch: str, mid: Time, geo, catalogue,
                location: EarthLocation, rng: np.random.Generator) -> dict:
    """Build and write one cube; return a summary."""
    ra, dec = geo["ra"], geo["dec"]
    delta, r_h, ddot = geo["delta"], geo["r_h"], geo["delta_dot"]
    f_topo = _window_frequencies(window, catalogue, ddot) * u.Hz
    n, nchan = sc.npix, f_topo.size
    pix = sc.pixel_arcsec * u.arcsec
    # target position: phase centre is offset from the target
    header = sky_header(ra, dec, sc.pointing_offset_arcsec, pix, n, "SIN")
    specsys = sc.specsys[epoch]
    factor = 1.0 if specsys == "TOPOCENT" else observer_frame_factor(specsys, mid, location, ra, dec)
    f_label = f_topo * factor
    header["CTYPE3"], header["CUNIT3"] = "FREQ", "Hz"
    header["CRVAL3"], header["CDELT3"], header["CRPIX3"] = f_label[0].to_value(u.Hz), \
        (f_label[1] - f_label[0]).to_value(u.Hz), 1.0
    header["SPECSYS"] = specsys
    header["RESTFRQ"] = float(np.mean(f_topo.to_value(u.Hz)))
    header["RADESYS"] = "ICRS"
    header["BUNIT"] = "Jy/beam"
    bmaj, bmin, bpa = sc.beam_arcsec
    header["BMAJ"], header["BMIN"], header["BPA"] = bmaj / 3600, bmin / 3600, bpa
    half_exp = sc.exposure_s / 2 * u.s
    header["DATE-OBS"] = (mid - half_exp).isot
    header["DATE-END"] = (mid + half_exp).isot
    header["MJD-OBS"] = (mid - half_exp).mjd
    header["EXPTIME"] = sc.exposure_s
    header["OBJECT"] = sc.target_name
    header["TELESCOP"] = sc.site["name"]
    geocentric = location.to_geocentric()
    header["OBSGEO-X"], header["OBSGEO-Y"], header["OBSGEO-Z"] = (float(c.to_value(u.m)) for c in geocentric)
    header["ORIGIN"] = "gasledger synthetic_cubes (invented data)"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        wcs = WCS(header).celestial
    x0, y0 = wcs.world_to_pixel(SkyCoord(ra, dec, frame="icrs"))
    f_rest_target = to_target_frame(f_topo, ddot)
    kernel = beam_kernel(bmaj / sc.pixel_arcsec, bmin / sc.pixel_arcsec, bpa)
    signal = np.zeros((nchan, n, n))
    truth = []
    model = ComaModel(outflow="law", solar_activity="quiet")
    for line in catalogue.lines:
        q = sc.production_rates.get(line.species)
        if q is None:
            continue
        vel = radio_velocity(f_rest_target, line.freq).to_value(u.km / u.s)
        if not (vel.min() < -5 and vel.max() > 5):
            continue
        species = catalogue.get_species(line.species)
        parent = catalogue.get_species(species.parent) if species.parent else None
        signal += model_line_cube((n, n), float(x0), float(y0), sc.pixel_arcsec, vel, line, species, q,
                                  sc.t_kin_K * u.K, r_h, delta, (bmaj, bmin, bpa), model, spectral_response=None,
                                  parent=parent)
        truth.append({"line": line.line_id, "q": q})
    noise = rng.standard_normal((nchan, n, n))
    k_norm = kernel / np.sqrt(np.sum(kernel**2))
    noise = fftconvolve(noise, k_norm[None, :, :], mode="same", axes=(1, 2))
    noise *= sc.noise_jy_beam / np.sqrt(np.sum(_HANNING**2))
    cube = hanning(signal + noise).astype(np.float32)
    write_fits(fits.HDUList([fits.PrimaryHDU(cube, header=header)]), path)
    return {"path": str(path), "lines": [t["line"] for t in truth], "x_pix": float(x0), "y_pix": float(y0),
            "nchan": nchan}


def write_scenario(sc: Scenario, outdir: str | Path, config_path: str | Path | None = None,
                   results: str = "results/demo", progress=print) -> Path:
    """Write the ephemeris, the cubes and the campaign config of ``sc`` below ``outdir``.

    Returns the path of the config file written (default ``outdir/campaign.yaml``).
    """
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
    with future_time_tolerated():
        table = ephemeris_from_elements(elements, start, stop, sc.ephemeris_step_min * u.min, location)
        write_ephemeris(table, outdir / "ephemeris.ecsv")
        geo = observe(elements, mids, location)
    rng = np.random.default_rng(sc.seed)
    cubes = []
    for k, (label, _) in enumerate(sc.epochs):
        g = {c: geo[c][k] for c in ("ra", "dec", "r_h", "delta", "delta_dot")}
        for window in sc.windows:
            path = outdir / f"{label}_{window.name}.fits"
            with future_time_tolerated():
                info = _write_cube(path, sc, window, label, mids[k], g, catalogue, location, rng)
            progress(f"wrote {path} ({info['nchan']} channels, lines {', '.join(info['lines']) or 'none'})")
            cubes.append({"path": str(path), "id": f"{label}_{window.name}", "epoch": label})
        for setup in sc.infrared:
            if label not in setup.epochs:
                continue
            path = outdir / f"{label}_{setup.name}.fits"
            with future_time_tolerated():
                info = write_ir_cube(path, sc, setup, mids[k], g, catalogue, rng)
            progress(f"wrote {path} ({info['nchan']} channels, bands {', '.join(info['bands']) or 'none'})")
            cubes.append({"path": str(path), "id": f"{label}_{setup.name}", "epoch": label,
                          "resolving_power": setup.resolving_power})
    config = {
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
        "excitation": {"t_kin_K": [10, 20, 40, 80]},
        "coma": {"outflow_km_s": "law", "solar_activity": "quiet"},
        "infrared": {"margin_fwhm": 1.5, "continuum_factor": 1.0, "continuum_order": 1,
                     "continuum_shape": "solar"},
        "dust": {"wavelengths_um": [2.5, 2.9, 4.1, 4.45, 4.9], "half_width_um": 0.04, "grain_radius_um": 1.0,
                 "grain_density_kg_m3": 1000.0, "speed_km_s": 0.1, "albedo": 0.16},
        "planned": [dict(p) for p in sc.planned],
        "budget": {"acceleration_m_s2": list(sc.acceleration_m_s2), "interval_days": 30,
                   "nucleus": {"radius_km": list(sc.nucleus_radius_km),
                               "density_kg_m3": list(sc.nucleus_density_kg_m3)},
                   "ejection_speed_km_s": 0.3, "momentum_efficiency": 1.0, "include_dust": False},
    }
    truth = {"production_rates_per_s": sc.production_rates, "t_kin_K": sc.t_kin_K, "seed": sc.seed,
             "dust": dict(sc.extra.get("dust", {}))}
    write_text(yaml.safe_dump(truth, sort_keys=True), outdir / "truth.yaml")
    config_path = Path(config_path) if config_path is not None else outdir / "campaign.yaml"
    write_text("# Written by synthetic_cubes: an invented campaign (fictional object, site and epochs).\n"
               + yaml.safe_dump(config, sort_keys=False), config_path)
    progress(f"wrote {config_path}")
    return config_path
