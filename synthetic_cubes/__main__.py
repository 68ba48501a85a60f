"""Command line: ``python -m synthetic_cubes [--small] [--seed N] [--layout facility|native] OUTDIR``."""

from __future__ import annotations

import argparse
import sys
from dataclasses import replace

from pipeline.offline import future_time_tolerated

from .generate import LAYOUTS, write_scenario
from .scenario import demo_scenario, small_scenario


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m synthetic_cubes",
                                     description="Write the invented demo campaign: ephemerides, the spacecraft's "
                                                 "state vectors, FITS cubes and a campaign config.")
    parser.add_argument("outdir", help="folder for the cubes, the ephemeris and campaign.yaml")
    parser.add_argument("--small", action="store_true", help="the small test version (smaller cubes)")
    parser.add_argument("--seed", type=int, default=None, help="random seed of the noise")
    parser.add_argument("--config", default=None, help="where to write the campaign config "
                                                       "(default OUTDIR/campaign.yaml)")
    parser.add_argument("--results", default="results/demo", help="outdir written into the config")
    parser.add_argument("--layout", choices=LAYOUTS, default="facility",
                        help="file layout of the cubes: as facility pipelines deliver them (default), or the simple "
                             "native one (one 3-D image per millimetre cube)")
    args = parser.parse_args(argv)
    sc = small_scenario() if args.small else demo_scenario()
    if args.seed is not None:
        sc = replace(sc, seed=args.seed)
    with future_time_tolerated():      # the invented epochs lie beyond the bundled leap-second/UT1 tables
        write_scenario(sc, args.outdir, args.config, results=args.results, layout=args.layout)
    return 0


if __name__ == "__main__":
    sys.exit(main())
