"""Geometry + comoving on a hand-made cube with a known Doppler shift and a known sky offset.

The cube is built here from the closed-form relativistic Doppler formula and a Gaussian source placed by the
FITS WCS (astropy), not with pipeline code; the chain must put the line at 0 km/s in the target's frame to 1 %
of a channel and find the source at the predicted pixel to 1 % of a pixel (issue 3's recovery check).
"""

import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.table import QTable
from astropy.time import Time
from astropy.wcs import WCS, FITSFixedWarning

from pipeline.catalogue.entries import load_catalogue
from pipeline.geometry.comoving import crop_box, cut_subcube
from pipeline.io.cubes import read_cube_info
from pipeline.geometry.ephemeris import read_ephemeris
from pipeline.errors import CoverageError
from pipeline.geometry.observing import cube_geometry
from pipeline.geometry.orbit import write_ephemeris

C_KMS = const.c.to_value(u.km / u.s)
DELTA_DOT = 23.4  # km/s, receding


def _make(tmp_path, ra_t=150.00041, dec_t=-20.00037, ddot=DELTA_DOT, n=48, nchan=160, specsys="TOPOCENT",
          eph_ddot=None):
    line = load_catalogue().get_line("HCN_265886")
    f0 = line.freq.to_value(u.Hz)
    beta = ddot / C_KMS
    f_obs = f0 * np.sqrt((1 - beta) / (1 + beta))            # relativistic Doppler, receding source
    df = 244140.625
    freqs = f_obs + (np.arange(nchan) - nchan / 2 + 0.3) * df   # line 0.3 channel off a channel centre
    h = fits.Header()
    h["CTYPE1"], h["CRVAL1"], h["CDELT1"], h["CRPIX1"], h["CUNIT1"] = "RA---SIN", 150.0, -0.3 / 3600, 24.5, "deg"
    h["CTYPE2"], h["CRVAL2"], h["CDELT2"], h["CRPIX2"], h["CUNIT2"] = "DEC--SIN", -20.0, 0.3 / 3600, 24.5, "deg"
    h["CTYPE3"], h["CRVAL3"], h["CDELT3"], h["CRPIX3"], h["CUNIT3"] = "FREQ", freqs[0], df, 1.0, "Hz"
    h["SPECSYS"], h["BUNIT"], h["RADESYS"] = specsys, "Jy/beam", "ICRS"
    h["BMAJ"], h["BMIN"], h["BPA"] = 1.0 / 3600, 1.0 / 3600, 0.0
    h["DATE-OBS"], h["DATE-END"] = "2030-06-01T02:00:00", "2030-06-01T03:00:00"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        wcs = WCS(h).celestial
    x0, y0 = wcs.world_to_pixel(SkyCoord(ra_t * u.deg, dec_t * u.deg))
    yy, xx = np.mgrid[0:n, 0:n]
    blob = np.exp(-0.5 * ((xx - x0) ** 2 + (yy - y0) ** 2) / 2.0**2)
    vel = C_KMS * (1 - freqs / f_obs)                        # velocity relative to the shifted line (radio)
    prof = np.exp(-0.5 * (vel / 0.8) ** 2)
    cube = (prof[:, None, None] * blob[None]).astype(np.float32)
    path = tmp_path / "cube.fits"
    fits.PrimaryHDU(cube, header=h).writeto(path)
    times = Time("2030-05-31T00:00:00") + np.arange(0, 49, 2) * u.hour
    eph = QTable({"time": times, "ra": np.full(len(times), ra_t) * u.deg, "dec": np.full(len(times), dec_t) * u.deg,
                  "r_h": np.full(len(times), 1.2) * u.au, "delta": np.full(len(times), 0.8) * u.au,
                  "delta_dot": np.full(len(times), ddot if eph_ddot is None else eph_ddot) * u.km / u.s})
    write_ephemeris(eph, tmp_path / "eph.ecsv")
    return path, tmp_path / "eph.ecsv", (float(x0), float(y0)), line


def test_line_and_position_recovered(tmp_path):
    path, eph, (x0, y0), line = _make(tmp_path)
    info = read_cube_info(path)
    geo = cube_geometry(info, "c1", "e1", ephemeris=read_ephemeris(eph))[0]
    assert geo["x_pix"] == pytest.approx(x0, abs=0.01) and geo["y_pix"] == pytest.approx(y0, abs=0.01)
    sub = cut_subcube(info, geo, line, 30 * u.km / u.s, 1.5 * u.km / u.s, 10.0)
    assert sub.meta.covered
    h = sub.header
    vel = h["CRVAL3"] + (np.arange(sub.data.shape[0]) + 1 - h["CRPIX3"]) * h["CDELT3"]
    spec = sub.data.sum(axis=(1, 2))
    centre = np.sum(vel * spec) / np.sum(spec)
    assert abs(centre) < 0.01 * abs(h["CDELT3"])              # 1 % of a channel
    img = sub.data.sum(axis=0)
    yy, xx = np.mgrid[0:img.shape[0], 0:img.shape[1]]
    cx, cy = np.sum(xx * img) / img.sum(), np.sum(yy * img) / img.sum()
    assert cx == pytest.approx(sub.meta.target_x, abs=0.01) and cy == pytest.approx(sub.meta.target_y, abs=0.01)  # 1 % of a pixel
    assert h["SPECSYS"] == "SOURCE" and h["CTYPE3"] == "VRAD"
    assert h["RESTFRQ"] == pytest.approx(line.freq.to_value(u.Hz))


def test_window_outside_band_is_reported_not_cut(tmp_path):
    path, eph, _, line = _make(tmp_path, eph_ddot=-75.0)    # the ephemeris puts the line 98 km/s off the 39 MHz band
    info = read_cube_info(path)
    geo = cube_geometry(info, "c1", "e1", ephemeris=read_ephemeris(eph))[0]
    sub = cut_subcube(info, geo, line, 30 * u.km / u.s, 1.5 * u.km / u.s, 10.0)
    assert not sub.meta.covered and sub.data is None
    assert "not fully inside the band" in sub.meta.reason and sub.meta.covered is False


def test_target_outside_field(tmp_path):
    path, eph, _, _ = _make(tmp_path, ra_t=150.01)
    with pytest.raises(CoverageError, match=r"outside the 48 x 48 field"):
        cube_geometry(read_cube_info(path), "c1", "e1", ephemeris=read_ephemeris(eph))


def test_crop_box_clipped():
    ys, xs = crop_box((40, 50), 2.2, 38.7, 5)
    assert (ys.start, ys.stop, xs.start, xs.stop) == (34, 40, 0, 8)
