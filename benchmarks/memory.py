"""Benchmark: bounded memory and throughput of geometry -> comoving -> extract on a cube larger than memory allows.

Writes a float32 cube (default 2048 x 1024 x 1024 channels x pixels, 8.6 GB) with a topocentric FREQ axis
around HCN J=3-2 and an ephemeris in a temporary folder, then runs the three per-cube stages in this process
exactly as the workflow does (pipeline.workflow.*.run), and prints, in one run: the time of a raw sequential read of
the file (the baseline), the time of each stage, the ratio of the stages' total to the raw pass, and the peak
resident memory (ru_maxrss, which includes mapped file pages) and the anonymous memory (RssAnon).

    .venv/bin/python benchmarks/memory.py [--nchan 2048] [--npix 1024] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import tempfile
import time
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import QTable
from astropy.time import Time

from pipeline.settings import Settings, validate_config
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import write_ephemeris
from pipeline.workflow import comoving, extract, geometry


def rss_anon_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("RssAnon:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def write_cube(path: Path, nchan: int, npix: int) -> None:
    h = fits.Header()
    h["SIMPLE"], h["BITPIX"], h["NAXIS"] = True, -32, 3
    h["NAXIS1"], h["NAXIS2"], h["NAXIS3"] = npix, npix, nchan
    h["CTYPE1"], h["CRVAL1"], h["CDELT1"], h["CRPIX1"], h["CUNIT1"] = "RA---SIN", 150.0, -0.1 / 3600, npix / 2, "deg"
    h["CTYPE2"], h["CRVAL2"], h["CDELT2"], h["CRPIX2"], h["CUNIT2"] = "DEC--SIN", -20.0, 0.1 / 3600, npix / 2, "deg"
    f0 = 265.886434e9 * (1 - 10.0 / 299792.458)
    h["CTYPE3"], h["CRVAL3"], h["CDELT3"], h["CRPIX3"], h["CUNIT3"] = "FREQ", f0, 122070.3125, nchan / 2, "Hz"
    h["SPECSYS"], h["BUNIT"], h["RADESYS"] = "TOPOCENT", "Jy/beam", "ICRS"
    h["BMAJ"], h["BMIN"], h["BPA"] = 0.5 / 3600, 0.4 / 3600, 20.0
    h["DATE-OBS"], h["DATE-END"] = "2030-06-01T02:00:00", "2030-06-01T03:00:00"
    h.tofile(path, overwrite=True)
    rng = np.random.default_rng(1)
    block = rng.standard_normal((16, npix, npix)).astype(">f4")
    with open(path, "ab") as fh:
        for c0 in range(0, nchan, 16):
            fh.write(block[: min(16, nchan - c0)].tobytes())
        fh.write(b"\0" * ((-fh.tell()) % 2880))


def evict(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.posix_fadvise(fd, 0, 0, os.POSIX_FADV_DONTNEED)
    finally:
        os.close(fd)


def raw_pass(path: Path) -> float:
    t0 = time.perf_counter()
    with open(path, "rb") as fh:
        while fh.read(1 << 24):
            pass
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nchan", type=int, default=2048)
    ap.add_argument("--npix", type=int, default=1024)
    ap.add_argument("--keep", default=None, help="folder to keep the cube in (default: a temporary one)")
    args = ap.parse_args()
    tmp = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(dir=os.environ.get("TMPDIR", "/tmp")))
    tmp.mkdir(parents=True, exist_ok=True)
    try:
        cube = tmp / "big.fits"
        size = args.nchan * args.npix**2 * 4 / 1e9
        if not cube.exists():
            print(f"writing a {args.nchan} x {args.npix} x {args.npix} float32 cube ({size:.1f} GB) ...", flush=True)
            write_cube(cube, args.nchan, args.npix)
        times = Time("2030-05-31T00:00:00") + np.arange(0, 73, 1) * u.hour
        n = len(times)
        eph = QTable({"time": times, "ra": np.full(n, 150.0) * u.deg, "dec": np.full(n, -20.0) * u.deg,
                      "r_h": np.full(n, 1.1) * u.au, "delta": np.full(n, 0.5) * u.au,
                      "delta_dot": np.full(n, 10.0) * u.km / u.s})
        write_ephemeris(eph, tmp / "eph.ecsv")
        config = validate_config({"outdir": str(tmp / "out"), "target": {"ephemeris": str(tmp / "eph.ecsv")},
                                  "cubes": [{"path": str(cube), "id": "big"}], "species": ["HCN"],
                                  "apertures_km": [500, 1500]})
        evict(cube)
        t_raw = raw_pass(cube)
        evict(cube)
        out = tmp / "out"
        shutil.rmtree(out, ignore_errors=True)   # no cached checksums from an earlier run
        steps = {}
        guard = future_time_tolerated()
        guard.__enter__()
        t0 = time.perf_counter()
        settings = Settings.from_config(config).with_cube("big")
        geometry.run(settings, str(out / "geometry.ecsv"))
        steps["geometry (header, ephemeris, input checksum)"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        comoving.run(str(out / "geometry.ecsv"), "HCN_265886", settings, str(out / "sub.fits"))
        steps["comoving (line window cut)"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        extract.run(str(out / "sub.fits"), settings, str(out / "spectra.fits"))
        steps["extract (aperture spectra, noise)"] = time.perf_counter() - t0
        guard.__exit__(None, None, None)
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        anon = rss_anon_mb()
        total = sum(steps.values())
        print(f"\ncube: {size:.1f} GB; raw sequential read (cold): {t_raw:.2f} s ({size / t_raw:.2f} GB/s)")
        for name, t in steps.items():
            print(f"  {name:48s} {t:8.2f} s")
        print(f"  {'total of the three stages':48s} {total:8.2f} s  = {total / t_raw:.2f} x the raw pass (target <= 1.5)")
        print(f"peak RSS (incl. mapped file pages) {peak:.0f} MB; RssAnon {anon:.0f} MB (target < 1500 MB)")
    finally:
        if not args.keep:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
