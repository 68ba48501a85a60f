"""The campaign command line: start a campaign from a folder of cubes, add cubes as they arrive, check it.

    gasledger new  CUBE_DIR --ephemeris EPH.ecsv --species HCN CH3OH CO -o campaign.yaml [--observatory ...]
    gasledger add  campaign.yaml NEW_CUBE.fits [...] [--epoch LABEL]
    gasledger check campaign.yaml

Exit codes: 0 fine; 1 the campaign has problems (check); 2 bad input (unreadable cube or config, bad option).
Run the campaign with ``snakemake --cores N --configfile campaign.yaml``.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np

from pipeline.catalogue.entries import load_catalogue
from pipeline.settings import append_cubes, load_settings, validate_config, write_campaign
from pipeline.io.cubes import read_cube_info
from pipeline.io.times import observation_times
from pipeline.geometry.ephemeris import check_observer, check_spacing, read_ephemeris
from pipeline.errors import GasledgerError, SpacingWarning
from pipeline.offline import future_time_tolerated
from pipeline.geometry.frames import radio_velocity, to_target_frame, to_topocentric
from pipeline.geometry.observers import observer_from_config

__all__ = ["main", "covered_lines"]


def covered_lines(path: str, ephemeris, catalogue, species: list[str], observer, time_override=None,
                  margin_km_s: float = 5.0, duration=None, beam_arcsec=None) -> list[str]:
    """Line ids whose rest frequency, at the target's actual Doppler shift, falls inside the cube's band.

    ``ephemeris`` is the target's table seen from ``observer`` (an Observer, an EarthLocation or None).

    For an infrared cube: the ids of the bands whose whole extent falls inside its rest-frame wavelength range.
    """
    info = read_cube_info(path, beam_arcsec)
    _, mid, _ = observation_times(info.header, info.path, time_override, duration)
    geo = ephemeris.at(mid, what=str(path))
    if info.specsys == "SOURCE":
        rest = info.frequencies
    else:
        topo = to_topocentric(info.frequencies, info.specsys, mid, observer, geo["ra"], geo["dec"])
        rest = to_target_frame(topo, geo["delta_dot"])
    out = []
    if info.regime == "infrared":
        lam = rest.to(u.um, equivalencies=u.spectral())
        return [b.band_id for name in species for b in catalogue.bands_of(name)
                if b.extent_lo > lam.min() and b.extent_hi < lam.max()]
    for name in species:
        for line in catalogue.lines_of(name):
            v = radio_velocity(rest, line.freq).to_value(u.km / u.s)
            if v.min() < -margin_km_s and v.max() > margin_km_s:
                out.append(line.line_id)
    return out


def _same_name(telescope: str, observer: str) -> bool:
    """Whether a TELESCOP card and an observer's name plausibly name the same thing (one contains the other)."""
    a, b = (" ".join(x.lower().replace("(fictional)", "").split()) for x in (telescope, observer))
    return bool(a) and bool(b) and (a in b or b in a)


def cmd_new(args) -> int:
    cubes = sorted(Path(args.cube_dir).glob(args.pattern))
    if not cubes:
        print(f"gasledger: no files matching {args.pattern!r} in {args.cube_dir}", file=sys.stderr)
        return 2
    observatory = (dict(zip(("lon_deg", "lat_deg", "height_m"), args.observatory)) if args.observatory
                   else "geocentre")
    campaign = {"campaign": args.campaign or Path(args.cube_dir).name, "outdir": args.outdir,
                "target": {"name": args.target or "target", "ephemeris": str(args.ephemeris)},
                "observatory": observatory, "cubes": [], "species": list(args.species)}
    validate_config(dict(campaign, cubes=[{"path": str(cubes[0])}]), source="(new campaign)")
    catalogue = load_catalogue()
    ephem = read_ephemeris(args.ephemeris)
    location = observer_from_config(observatory)
    for path in cubes:
        campaign["cubes"].append({"path": str(path), "id": path.name.split(".")[0]})
        try:
            lines = covered_lines(str(path), ephem, catalogue, list(args.species), location)
        except GasledgerError as exc:     # listed, not fatal: the user completes the entry (e.g. its time)
            print(f"{path.name}: needs attention: {exc}")
            continue
        print(f"{path.name}: {', '.join(lines) if lines else 'no catalogue line of these species'}")
    telescopes: dict[str, list[str]] = {}
    for path in cubes:
        try:
            name = str(read_cube_info(path).header.get("TELESCOP", "")).strip()
        except GasledgerError:
            continue
        telescopes.setdefault(name or "(no TELESCOP card)", []).append(path.name)
    if len(telescopes) > 1:
        listed = "; ".join(f"{t}: {len(names)} cube(s)" for t, names in telescopes.items())
        print(f"note: the cubes come from {len(telescopes)} telescopes ({listed}); every cube is taken as observed "
              "from the one observatory given here unless its entry names its own: give the others their own "
              "'observatory' and 'ephemeris' keys (README, config reference)")
    write_campaign(campaign, Path(args.output), "# Written by 'gasledger new'.\n")
    print(f"wrote {args.output} with {len(cubes)} cube(s); run: snakemake --cores 2 --configfile {args.output}")
    return 0


def cmd_add(args) -> int:
    path = Path(args.config)
    entries = []
    for cube in args.cubes:
        read_cube_info(cube)                                   # refuse an unreadable cube before touching the file
        entry = {"path": str(cube), "id": Path(cube).name.split(".")[0]}
        if args.epoch:
            entry["epoch"] = args.epoch
        entries.append(entry)
    append_cubes(path, entries)
    for entry in entries:
        print(f"added {entry['path']} as {entry['id']}")
    return 0


def cmd_check(args) -> int:
    settings = load_settings(args.config)
    problems = list(settings.missing_inputs(source=args.config))
    catalogue = settings.catalogue()
    species = list(settings.species)
    for name in species:
        try:
            catalogue.get_species(name)
        except GasledgerError as exc:
            problems.append(str(exc))
    print(f"campaign: {settings.campaign}  ({len(settings.cubes)} cubes, species {', '.join(species)})")
    tables: dict[str, object] = {}

    def table(path: str):
        """Each ephemeris table read and its spacing checked once."""
        if path not in tables:
            tables[path] = read_ephemeris(path)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", SpacingWarning)
                check_spacing(tables[path])
            problems.extend(str(w.message) for w in caught if issubclass(w.category, SpacingWarning))
            lo, hi = tables[path].span
            print(f"ephemeris: {path} spans {lo.isot} to {hi.isot}")
        return tables[path]

    covered = {s: 0 for s in species}
    notes: list[str] = []
    for entry in settings.cubes:
        try:
            observer = settings.observer_of(entry)
            path = settings.ephemeris_of(entry)
            ephem = table(path) if path is not None else None
            if ephem is not None:
                check_observer(ephem, observer)
            info = read_cube_info(entry.path, entry.beam_arcsec)
            duration = entry.duration_s * u.s if entry.duration_s is not None else None
            times = observation_times(info.header, info.path, entry.time, duration)
            mid = times.mid
            lines = covered_lines(entry.path, ephem, catalogue, species, observer, entry.time,
                                  duration=duration, beam_arcsec=entry.beam_arcsec) if ephem is not None else []
            ir = info.regime == "infrared"
            for ln in lines:
                covered[(catalogue.get_band(ln) if ir else catalogue.get_line(ln)).species] += 1
            f = info.wavelengths.to_value(u.um) if ir else info.frequencies.to_value(u.GHz)
            telescope = str(info.header.get("TELESCOP", "")).strip()
            if telescope and not _same_name(telescope, observer.name):
                notes.append(f"cube {entry.cube_id}: its header says TELESCOP = {telescope!r} but the config observes "
                             f"it from {observer.describe()}; if it was observed from elsewhere, give the cube its own "
                             "'observatory' and 'ephemeris' keys")
            print(f"  {entry.cube_id:18s} epoch {entry.epoch:8s} {mid.isot[:19]}  {np.min(f):.3f}-{np.max(f):.3f} "
                  f"{'um ' if ir else 'GHz'} {info.specsys:8s} {'bands' if ir else 'lines'}: {', '.join(lines) or 'none'}; "
                  f"mid-time from {times.source}; observer {observer.describe()}")
        except GasledgerError as exc:
            problems.append(str(exc))
    for name, n in covered.items():
        if n == 0:
            problems.append(f"species {name!r} has no line or band in any cube (it will be reported as not observed)")
    for note in notes:
        print(f"note: {note}")
    if problems:
        print("problems:")
        for p in dict.fromkeys(problems):
            print(f"  - {p}")
        return 1
    print("no problems found")
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="gasledger", description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="command", required=True)
    p_new = sub.add_parser("new", help="write a campaign config from a folder of cubes")
    p_new.add_argument("cube_dir")
    p_new.add_argument("--ephemeris", required=True, help="ephemeris table (ECSV/CSV) of the target")
    p_new.add_argument("--species", nargs="+", required=True, help="species names from the catalogue")
    p_new.add_argument("-o", "--output", default="campaign.yaml")
    p_new.add_argument("--pattern", default="*.fits", help="which files are cubes (default *.fits)")
    p_new.add_argument("--observatory", nargs=3, type=float, metavar=("LON_DEG", "LAT_DEG", "HEIGHT_M"))
    p_new.add_argument("--campaign", help="campaign title")
    p_new.add_argument("--target", help="target name")
    p_new.add_argument("--outdir", default="results")
    p_new.set_defaults(func=cmd_new)
    p_add = sub.add_parser("add", help="add newly arrived cubes to a campaign config")
    p_add.add_argument("config")
    p_add.add_argument("cubes", nargs="+")
    p_add.add_argument("--epoch", help="epoch label for the new cubes (default: their ids)")
    p_add.set_defaults(func=cmd_add)
    p_check = sub.add_parser("check", help="check a campaign without running it and print a summary")
    p_check.add_argument("config")
    p_check.set_defaults(func=cmd_check)
    args = parser.parse_args(argv)
    try:
        with future_time_tolerated():
            return args.func(args)
    except GasledgerError as exc:
        print(f"gasledger: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
