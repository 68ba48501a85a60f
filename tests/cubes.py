"""Tiny seeded FITS cubes for the tests (a helper module, not a conftest).

:func:`cube_header` gives a valid header of a small RA/Dec/frequency cube;
:func:`write_cube` writes seeded Gaussian noise with that header (cards can be
overridden or removed) to a path, optionally with a degenerate 4th Stokes axis.
"""

from __future__ import annotations

from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.wcs import WCS

from pipeline.io.products import ProductMeta, SubCube

__all__ = ["SHAPE", "cube_header", "write_cube", "subcube", "write_subcube"]

#: Axis lengths of the default cube (numpy order: channel, y, x).
SHAPE = (16, 12, 10)


def cube_header(shape: tuple[int, int, int] = SHAPE, **cards) -> fits.Header:
    """A valid header of a (n_chan, n_y, n_x) cube; ``cards`` override or (value None) remove cards."""
    nchan, ny, nx = shape
    header = fits.Header()
    header["NAXIS"] = 3
    header["NAXIS1"] = nx
    header["NAXIS2"] = ny
    header["NAXIS3"] = nchan
    values = {
        "CTYPE1": "RA---TAN", "CRVAL1": 150.0, "CDELT1": -0.5 / 3600, "CRPIX1": nx / 2 + 0.5, "CUNIT1": "deg",
        "CTYPE2": "DEC--TAN", "CRVAL2": -20.0, "CDELT2": 0.5 / 3600, "CRPIX2": ny / 2 + 0.5, "CUNIT2": "deg",
        "CTYPE3": "FREQ", "CRVAL3": 230.5e9, "CDELT3": -244.0e3, "CRPIX3": 3.0, "CUNIT3": "Hz",
        "RESTFRQ": 230.538e9, "SPECSYS": "TOPOCENT",
        "BUNIT": "Jy/beam", "BMAJ": 2.0 / 3600, "BMIN": 1.5 / 3600, "BPA": 30.0,
        "DATE-OBS": "2024-03-01T10:00:00", "EXPTIME": 1800.0,
    }
    values.update(cards)
    for key, value in values.items():
        if value is None:
            header.remove(key, ignore_missing=True)
        else:
            header[key] = value
    return header


def write_cube(path: str | Path, shape: tuple[int, int, int] = SHAPE, seed: int = 0, stokes: bool = False,
               beams_arcsec: np.ndarray | None = None, **cards) -> Path:
    """Write seeded N(0, 1) data with :func:`cube_header` (plus ``cards``) to ``path``; return the path.

    ``beams_arcsec`` (n_chan, 3: major, minor [arcsec], PA [deg]) adds a per-channel BEAMS table in the layout
    interferometer pipelines write (CASAMBM = T, no BMAJ/BMIN cards).
    """
    path = Path(path)
    rng = np.random.default_rng(seed)
    data = rng.normal(size=shape).astype(np.float32)
    header = cube_header(shape, **cards)
    if stokes:
        data = data[None]
        header["NAXIS"] = 4
        header["NAXIS4"] = 1
        for key, value in (("CTYPE4", "STOKES"), ("CRVAL4", 1.0), ("CDELT4", 1.0), ("CRPIX4", 1.0)):
            header[key] = value
    hdu = fits.PrimaryHDU(data=data)
    for key, value in header.items():
        if key not in ("NAXIS", "NAXIS1", "NAXIS2", "NAXIS3", "NAXIS4"):
            hdu.header[key] = value
    hdus = [hdu]
    if beams_arcsec is not None:
        for key in ("BMAJ", "BMIN", "BPA"):
            hdu.header.remove(key, ignore_missing=True)
        hdu.header["CASAMBM"] = True
        beams = np.asarray(beams_arcsec, dtype=float)
        cols = [fits.Column(name="BMAJ", format="E", unit="arcsec", array=beams[:, 0]),
                fits.Column(name="BMIN", format="E", unit="arcsec", array=beams[:, 1]),
                fits.Column(name="BPA", format="E", unit="deg", array=beams[:, 2]),
                fits.Column(name="CHAN", format="J", array=np.arange(len(beams))),
                fits.Column(name="POL", format="J", array=np.zeros(len(beams), dtype=int))]
        hdus.append(fits.BinTableHDU.from_columns(cols, name="BEAMS"))
    fits.HDUList(hdus).writeto(path, overwrite=True)
    return path


def subcube(data: np.ndarray, bunit: str = "Jy/beam", pixel_arcsec: float = 0.3, beam_arcsec: float = 1.0,
            channel_km_s: float = 0.3, line_id: str = "HCN_265886", rest_hz: float = 265.886434e9,
            delta_au: float = 1.0, r_h_au: float = 1.0) -> SubCube:
    """``data`` as a comoving-stage sub-cube (in memory): VRAD axis centred on 0 km/s, target at the centre."""
    nchan, ny, nx = data.shape
    wcs = WCS(naxis=2)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    wcs.wcs.crval = [10.0, 5.0]
    wcs.wcs.cdelt = [-pixel_arcsec / 3600, pixel_arcsec / 3600]
    wcs.wcs.crpix = [nx / 2 + 0.5, ny / 2 + 0.5]
    wcs.wcs.cunit = ["deg", "deg"]
    velocity = -channel_km_s * (nchan // 2) + channel_km_s * np.arange(nchan)
    meta = ProductMeta(cube_id="c1", epoch="e1", line_id=line_id, species=line_id.split("_")[0],
                       target_x=(nx - 1) / 2, target_y=(ny - 1) / 2, delta_au=delta_au, r_h_au=r_h_au)
    return SubCube.build(meta, np.asarray(data, dtype=np.float32), velocity, wcs, bunit, rest_hz * u.Hz,
                         (beam_arcsec / 3600, beam_arcsec / 3600, 0.0), name="test sub-cube")


def write_subcube(path: str | Path, data: np.ndarray, **kwargs) -> Path:
    """Write :func:`subcube` of ``data`` as the comoving step does (arguments as for :func:`subcube`)."""
    path = Path(path)
    subcube(data, **kwargs).to_fits().writeto(path, overwrite=True)
    return path
