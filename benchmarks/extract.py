"""Benchmark: aperture extraction against reading the bytes it needs.

Makes a float32 cube (default 2000 x 512 x 512, 2 GB) in a temporary folder and prints, in one run, medians of:
the bounding-box slab copy out of the memory map (the floor), a whole-cube read pass, the per-channel photutils
aperture_photometry loop, and gasledger's extraction (pipeline.spectra.apertures.aperture_spectra), with a warm page cache
and with the file evicted (posix_fadvise DONTNEED) before each run; as seconds, ratios against the baselines of
the same run, and the anonymous resident memory (RssAnon, which excludes mapped file pages).

    .venv/bin/python benchmarks/extract.py [--nchan 2000] [--npix 512] [--radius 20] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
from astropy.io import fits
from photutils.aperture import CircularAperture, aperture_photometry

from pipeline.spectra.apertures import aperture_spectra, aperture_weights


def rss_anon_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("RssAnon:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def evict(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
        os.posix_fadvise(fd, 0, 0, os.POSIX_FADV_DONTNEED)
    finally:
        os.close(fd)


def make_cube(path: Path, nchan: int, npix: int) -> None:
    header = fits.Header()
    header["SIMPLE"], header["BITPIX"], header["NAXIS"] = True, -32, 3
    header["NAXIS1"], header["NAXIS2"], header["NAXIS3"] = npix, npix, nchan
    header.tofile(path, overwrite=True)
    rng = np.random.default_rng(0)
    with open(path, "ab") as fh:
        for c0 in range(0, nchan, 100):
            n = min(100, nchan - c0)
            fh.write(rng.standard_normal((n, npix, npix)).astype(">f4").tobytes())
        pad = (-fh.tell()) % 2880
        fh.write(b"\0" * pad)


def timed(fn, path: Path, cold: bool, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        if cold:
            evict(path)
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nchan", type=int, default=2000)
    ap.add_argument("--npix", type=int, default=512)
    ap.add_argument("--radius", type=float, default=20.0)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--loop-channels", type=int, default=200,
                    help="channels timed for the photutils loop (scaled up to the cube)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(dir=os.environ.get("TMPDIR", "/tmp")) as tmp:
        path = Path(tmp) / "bench.fits"
        print(f"writing a {args.nchan} x {args.npix} x {args.npix} float32 cube "
              f"({args.nchan * args.npix**2 * 4 / 1e9:.2f} GB) ...", flush=True)
        make_cube(path, args.nchan, args.npix)
        x = y = args.npix / 2 - 0.3
        weights = aperture_weights((args.npix, args.npix), x, y, args.radius)
        ys, xs = weights.ys, weights.xs

        def opened(fn):
            # open the memory map inside the timed step, so an evicted file really is read from disk
            def run():
                with fits.open(path, memmap=True, mode="readonly") as hdul:
                    return fn(hdul[0].data)
            return run

        slab = opened(lambda d: np.array(d[:, ys, xs]))
        ours = opened(lambda d: aperture_spectra(d, [weights]))

        def _whole(d):
            s = 0.0
            for c0 in range(0, args.nchan, 64):
                s += float(np.asarray(d[c0:c0 + 64]).sum(dtype=np.float64))
            return s

        whole = opened(_whole)
        aperture = CircularAperture((x, y), r=args.radius)
        nloop = min(args.loop_channels, args.nchan)

        def _loop(d):
            for c in range(nloop):
                aperture_photometry(np.asarray(d[c]), aperture, method="exact")

        loop = opened(_loop)

        def _check(d):
            ref = np.array([aperture_photometry(np.asarray(d[c]), aperture, method="exact")["aperture_sum"][0]
                            for c in range(3)])
            got = aperture_spectra(d, [weights])[0][0, :3]
            assert np.allclose(ref, got, rtol=1e-5), (ref, got)

        opened(_check)()
        results = {}
        for cold in (False, True):
            tag = "cold" if cold else "warm"
            if not cold:
                whole()  # warm the cache
            results[f"slab_{tag}"] = timed(slab, path, cold, args.repeat)
            results[f"whole_{tag}"] = timed(whole, path, cold, args.repeat)
            results[f"ours_{tag}"] = timed(ours, path, cold, args.repeat)
        whole()
        results["loop_warm"] = timed(loop, path, False, 1) * args.nchan / nloop
        rss = rss_anon_mb()
    print(f"\n{'step':44s} {'seconds':>9s}")
    names = {"slab": "bounding-box slab copy (floor)", "whole": "whole-cube read pass",
             "ours": "gasledger extraction", "loop": "per-channel aperture_photometry loop"}
    for key, val in results.items():
        kind, tag = key.split("_")
        print(f"{names[kind] + ' (' + tag + ')':44s} {val:9.3f}")
    print("\nratios (same run):")
    print(f"  warm: extraction / slab copy       = {results['ours_warm'] / results['slab_warm']:.2f}  (target <= 1.5)")
    print(f"  warm: photutils loop / extraction  = {results['loop_warm'] / results['ours_warm']:.0f}  (target >= 100)")
    print(f"  cold: extraction / slab read       = {results['ours_cold'] / results['slab_cold']:.2f}  (target <= 1.5)")
    print(f"  cold: extraction / whole-cube pass = {results['ours_cold'] / results['whole_cold']:.3f}")
    print(f"RssAnon at the end: {rss:.0f} MB (target < 300 MB)")


if __name__ == "__main__":
    main()
