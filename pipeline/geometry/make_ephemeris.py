"""Command line: write an ephemeris table from osculating elements.

    python -m pipeline.geometry.make_ephemeris --config campaign.yaml --start 2031-03-09 --stop 2031-03-18 \\
        --step 30 --out ephemeris.ecsv

The elements come from the config's ``target.elements`` (or ``--elements`` as JSON), the observer from its
``observatory`` (a site, the geocentre or a spacecraft), or from the ``observatory`` of the cube ``--cube ID``. The table has the columns the workflow reads (time, ra, dec, r_h, delta, delta_dot, phase,
sky rates, and the geocentric range rate when a site is given), so a table made here and elements given
directly feed the same code.
"""

from __future__ import annotations

import argparse
import json
import sys

import astropy.units as u
from astropy.time import Time

from pipeline.settings import load_settings
from pipeline.errors import GasledgerError
from pipeline.offline import future_time_tolerated
from pipeline.geometry.orbit import OrbitalElements, ephemeris_from_elements, write_ephemeris

__all__ = ["main"]


def main(argv: list[str] | None = None) -> int:
    """Parse arguments, write the table; exit status 0 on success, 2 on bad input."""
    parser = argparse.ArgumentParser(prog="python -m pipeline.geometry.make_ephemeris", description=__doc__.splitlines()[0])
    parser.add_argument("--config", help="campaign YAML holding target.elements and observatory")
    parser.add_argument("--elements", help='elements as JSON: {"q_au":..,"e":..,"i_deg":..,"node_deg":..,'
                                           '"peri_deg":..,"tp":".."} (instead of --config)')
    parser.add_argument("--geocentre", action="store_true", help="ignore the config's observatory")
    parser.add_argument("--cube", help="seen from this cube's own observatory (its id in the config)")
    parser.add_argument("--start", required=True, help="first time (ISO, UTC)")
    parser.add_argument("--stop", required=True, help="last time (ISO, UTC)")
    parser.add_argument("--step", type=float, default=30.0, help="step in minutes (default 30)")
    parser.add_argument("--out", required=True, help="output ECSV file")
    args = parser.parse_args(argv)
    try:
        location = None
        if args.config:
            settings = load_settings(args.config)
            if settings.target.elements is None:
                print(f"gasledger: {args.config}: target has no 'elements'", file=sys.stderr)
                return 2
            elements = settings.target.elements
            if not args.geocentre:
                location = settings.observer_of(settings.with_cube(args.cube).cube if args.cube else None)
        elif args.elements:
            elements = OrbitalElements.from_mapping(json.loads(args.elements))
        else:
            print("gasledger: give --config or --elements", file=sys.stderr)
            return 2
        with future_time_tolerated():
            table = ephemeris_from_elements(elements, Time(args.start, scale="utc"), Time(args.stop, scale="utc"),
                                            args.step * u.min, location)
            write_ephemeris(table, args.out)
    except (GasledgerError, ValueError) as exc:
        print(f"gasledger: {exc}", file=sys.stderr)
        return 2
    seen_from = location.describe() if location is not None else "the geocentre"
    print(f"wrote {args.out} ({len(table)} rows, seen from {seen_from})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
