"""The campaign command line: start a campaign from a folder of cubes, add cubes as they arrive, check it, run it.

    gasledger new  CUBE_DIR --ephemeris EPH.ecsv --species HCN CH3OH CO -o campaign.yaml [--observatory ...]
    gasledger add  campaign.yaml NEW_CUBE.fits [...] [--epoch LABEL]
    gasledger check campaign.yaml
    gasledger run  campaign.yaml [--cores N] [--profile P] [--directory D] [--verbose] [-- SNAKEMAKE OPTIONS]
    gasledger --version

Exit codes: 0 fine; 1 the campaign has problems (check) or the run failed (run); 2 bad input (unreadable cube or
config, bad option).
"""

from __future__ import annotations

import argparse
import copy
import json
import sys
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

import pipeline
from pipeline.catalogue.entries import load_catalogue
from pipeline.runner import report_path, run_workflow, snakemake_command
from pipeline.settings import SCHEMA_FILE, append_cubes, load_settings, validate_config, write_campaign
from pipeline.io.cubes import read_cube_info
from pipeline.io.times import observation_times
from pipeline.geometry.ephemeris import check_observer, check_spacing, read_ephemeris
from pipeline.errors import GasledgerError, SpacingWarning
from pipeline.offline import future_time_tolerated
from pipeline.geometry.frames import radio_velocity, to_target_frame, to_topocentric
from pipeline.geometry.observers import observer_from_config

__all__ = ["main", "covered_lines", "group_epochs", "budget_template", "EPOCH_GAP_HOURS"]

#: Cubes whose mid-times lie closer than this belong to one epoch (``gasledger new --epoch-gap-hours``): one
#: night's or one visit's cubes are taken within a few hours, consecutive nights about 24 h apart.
EPOCH_GAP_HOURS = 12.0


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


def group_epochs(mid_times: dict[str, Time], gap_hours: float = EPOCH_GAP_HOURS) -> dict[str, str]:
    """Epoch labels e1, e2, ... in time order: a cube starts a new epoch when its mid-time lies more than
    ``gap_hours`` after the previous cube's (cube id -> label)."""
    order = sorted(mid_times, key=lambda k: (mid_times[k].mjd, k))
    labels: dict[str, str] = {}
    n, last = 0, None
    for key in order:
        t = mid_times[key].mjd
        if last is None or (t - last) * 24.0 > gap_hours:
            n += 1
        labels[key] = f"e{n}"
        last = t
    return labels


#: The budget keys ``gasledger new`` lists for the user to fill in, with the form of their value (None: the
#: schema's default is shown).
_BUDGET_KEYS = (
    ("acceleration_m_s2", "[VALUE, SIGMA]",
     "measured non-gravitational acceleration and its 1-sigma error [m/s^2]"),
    ("nongrav", "{A1: VALUE, A2: VALUE, A3: VALUE}",
     "or its parameters A1, A2, A3 [au/d^2] (water-ice g(r) law)"),
    ("nucleus", "", "the nucleus: radius and density ranges, or a mass range"),
    ("nucleus.radius_km", "[MIN, MAX]", "nucleus radius range [km]: the verdict rests on it"),
    ("nucleus.density_kg_m3", None, "bulk density range [kg/m^3]"),
    ("nucleus.mass_kg", "[MIN, MAX]", "or a nucleus mass range [kg] instead"),
    ("ejection_speed_km_s", None, "speed of the gas carrying the momentum [km/s]"),
    ("momentum_efficiency", None, "share of the gas momentum that pushes the nucleus (0-1]"),
    ("interval_days", None, "interval of steady push for the rocket equation [d]"),
    ("drivers", None, "species that could drive the push"),
)


def budget_template() -> str:
    """The campaign's budget section, commented out, for the user to fill in (keys, units, the schema's defaults).

    Every line is a comment, so the file reads the same with it; uncommenting ``budget:`` and the keys given
    (with real values in place of VALUE, SIGMA, MIN, MAX) makes it a budget section.
    """
    import yaml

    with open(SCHEMA_FILE, encoding="utf-8") as fh:
        props = yaml.safe_load(fh)["properties"]["budget"]["properties"]
    lines = ["",
             "# The mass budget: what the measured push demands of the gas. Uncomment 'budget:' and the keys you",
             "# know, with your values in place of VALUE, SIGMA, MIN, MAX. Without an acceleration the run still",
             "# gives the limits and the report, whose budget part then says what is missing ('gasledger check' too).",
             "# budget:"]
    for key, form, what in _BUDGET_KEYS:
        top, _, sub = key.partition(".")
        indent = "    " if sub else "  "
        if form is None:
            spec = props[top]["properties"][sub] if sub else props[top]
            if sub and "default" not in spec:
                spec = {"default": props[top]["default"].get(sub)}
            value = json.dumps(spec["default"]).replace('"', "")
            what = f"{what}; the default"
        else:
            value = form
        entry = f"# {indent}{sub or top}: {value}".rstrip()
        lines.append(f"{entry:<48s} # {what}")
    return "\n".join(lines) + "\n"


def _absolute(path: str | Path) -> str:
    return str(Path(path).expanduser().resolve())


def cmd_new(args) -> int:
    cubes = sorted(Path(args.cube_dir).glob(args.pattern))
    if not cubes:
        print(f"gasledger: no files matching {args.pattern!r} in {args.cube_dir}", file=sys.stderr)
        return 2
    observatory = (dict(zip(("lon_deg", "lat_deg", "height_m"), args.observatory)) if args.observatory
                   else "geocentre")
    output = Path(args.output).expanduser().resolve()
    outdir = Path(args.outdir).expanduser()
    campaign = {"campaign": args.campaign or Path(args.cube_dir).resolve().name,
                "outdir": str(outdir if outdir.is_absolute() else output.parent / outdir),
                "target": {"name": args.target or "target", "ephemeris": _absolute(args.ephemeris)},
                "observatory": observatory, "cubes": [], "species": list(args.species)}
    checked = validate_config(copy.deepcopy(dict(campaign, cubes=[{"path": _absolute(cubes[0])}])),
                              source="(new campaign)")
    campaign["species"] = checked["species"]          # spelt as in the catalogue ('hcn' -> 'HCN')
    catalogue = load_catalogue()
    for name in campaign["species"]:
        catalogue.get_species(name)
    ephem = read_ephemeris(args.ephemeris)
    location = observer_from_config(observatory)
    mids: dict[str, Time] = {}
    for path in cubes:
        cube_id = path.name.split(".")[0]
        campaign["cubes"].append({"path": _absolute(path), "id": cube_id})
        try:
            info = read_cube_info(path)
            mids[cube_id] = observation_times(info.header, info.path).mid
            lines = covered_lines(str(path), ephem, catalogue, campaign["species"], location)
        except GasledgerError as exc:     # listed, not fatal: the user completes the entry (e.g. its time)
            print(f"{path.name}: needs attention: {exc}")
            continue
        covered = ", ".join(lines) if lines else "no catalogue line of these species"
        print(f"{path.name}: {covered}  (mid-time {mids[cube_id].isot[:16]})")
    epochs = group_epochs(mids, args.epoch_gap_hours)
    for entry in campaign["cubes"]:
        if entry["id"] in epochs:
            entry["epoch"] = epochs[entry["id"]]
    for label in dict.fromkeys(epochs.values()):
        members = sorted((k for k, v in epochs.items() if v == label), key=lambda k: mids[k].mjd)
        print(f"epoch {label}: {mids[members[0]].isot[:16]} to {mids[members[-1]].isot[:16]}  "
              f"({len(members)} cube(s): {', '.join(members)})")
    if len(epochs) < len(cubes):
        print(f"note: {len(cubes) - len(epochs)} cube(s) have no mid-time and no 'epoch': give each entry its "
              "'time' (or 'duration_s') and 'epoch' keys")
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
    if args.observatory and len(telescopes) == 1 and "(no TELESCOP card)" not in telescopes:
        campaign["observatory"] = {"name": next(iter(telescopes)), **observatory}   # the site the headers name
    if not args.observatory:
        print(f"note: no --observatory given, so every cube is taken as observed from the geocentre ('observatory: "
              f"geocentre' in {args.output}); for a telescope on the ground give --observatory LON_DEG LAT_DEG "
              "HEIGHT_M, or edit 'observatory' (a site: lon_deg, lat_deg, height_m; a spacecraft: states)")
    write_campaign(campaign, output, "# Written by 'gasledger new'. Paths are absolute, so the file works from any "
                   "folder.\n", budget_template())
    print(f"wrote {output} with {len(cubes)} cube(s) in {len(set(epochs.values()))} epoch(s); "
          "fill in its budget section, then:")
    print(f"  gasledger check {args.output}")
    print(f"  gasledger run {args.output} --cores 2")
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
    problems += [f"{args.config}: {s}" for s in (*settings.budget.missing, *settings.budget.defaulted)]
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
            if ephem is not None and not lines:
                listed = ", ".join(species)
                if ir:
                    notes.append(f"cube {entry.cube_id} covers no band of {listed}; it serves only the dust "
                                 "continuum (Afrho)")
                else:
                    problems.append(f"cube {entry.cube_id} ({entry.path}) covers no line of the listed species "
                                    f"({listed}); remove it, or add the species whose lines it holds to 'species'")
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


def cmd_run(args) -> int:
    directory = Path(args.directory).expanduser().resolve() if args.directory else Path.cwd().resolve()
    if not directory.is_dir():
        print(f"gasledger: --directory {args.directory!r} is not a folder", file=sys.stderr)
        return 2
    report = report_path(args.config, directory)             # the campaign is read (and refused) before any job
    command = snakemake_command(args.config, args.cores, args.profile, directory, args.snakemake_args)
    if args.verbose:
        print("running: " + " ".join(command), flush=True)
    code, reader = run_workflow(command, directory, verbose=args.verbose)
    if code != 0:
        return 1
    if report.is_file():
        print(f"Report: {report}")
    elif not reader.nothing_to_do:
        print(f"finished; no report at {report} (a target other than the whole workflow was asked for)")
    return 0


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    snakemake_args: list[str] = []
    if "--" in argv:                                       # gasledger run CAMPAIGN [options] -- SNAKEMAKE OPTIONS
        cut = argv.index("--")
        argv, snakemake_args = argv[:cut], argv[cut + 1:]
    parser = argparse.ArgumentParser(prog="gasledger", description=__doc__.splitlines()[0])
    parser.add_argument("--version", action="version", version=f"gasledger {pipeline.__version__}")
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
    p_new.add_argument("--outdir", default="results",
                       help="results folder (default: results, beside the campaign file; written as an absolute path)")
    p_new.add_argument("--epoch-gap-hours", type=float, default=EPOCH_GAP_HOURS,
                       help=f"cubes whose mid-times lie closer than this share an epoch (default {EPOCH_GAP_HOURS:g})")
    p_new.set_defaults(func=cmd_new)
    p_add = sub.add_parser("add", help="add newly arrived cubes to a campaign config")
    p_add.add_argument("config")
    p_add.add_argument("cubes", nargs="+")
    p_add.add_argument("--epoch", help="epoch label for the new cubes (default: their ids)")
    p_add.set_defaults(func=cmd_add)
    p_check = sub.add_parser("check", help="check a campaign without running it and print a summary")
    p_check.add_argument("config")
    p_check.set_defaults(func=cmd_check)
    p_run = sub.add_parser("run", help="run the workflow on a campaign and print the report's path",
                           description="Run the workflow (Snakemake) on a campaign; options after -- go to Snakemake.")
    p_run.add_argument("config")
    p_run.add_argument("--cores", help="cores to use (default: all, or the profile's)")
    p_run.add_argument("--profile", help="a Snakemake profile (e.g. profiles/slurm)")
    p_run.add_argument("--directory", help="folder relative paths of the campaign are read from and results "
                                           "written to (default: the current folder)")
    p_run.add_argument("--verbose", action="store_true", help="show Snakemake's full output")
    p_run.set_defaults(func=cmd_run)
    args = parser.parse_args(argv)
    args.snakemake_args = snakemake_args
    if snakemake_args and args.command != "run":
        parser.error("options after -- are passed to Snakemake and only 'gasledger run' takes them")
    try:
        with future_time_tolerated():
            return args.func(args)
    except GasledgerError as exc:
        print(f"gasledger: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
