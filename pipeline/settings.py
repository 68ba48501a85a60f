"""Campaign settings: the YAML file loaded and validated once, then parsed into typed, frozen settings.

The schema is ``config/schema.yaml`` (JSON Schema written in YAML) and is the
only place a default lives. Validation fills in defaults and reports the first
problem as one sentence naming the key, what was found and what was expected.
(Snakemake's own ``validate`` prints the whole schema with each error, which
buries the one line a user needs, so the workflow calls :func:`validate_config`
instead.)

:class:`Settings` is what the rest of the package sees: Quantities with units,
the catalogue, the coma model, the observer, the budget assumptions. This is
the only module (with :mod:`pipeline.workflow`) that reads a config mapping.
A workflow step is given only the config sections its rule declares
(:func:`sections_record`); reading any other section raises
:class:`~pipeline.errors.SettingsError`, so what triggers a rerun and what the
code reads are one list.
"""

from __future__ import annotations

import copy
import functools
import re
from collections.abc import Iterable
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import astropy.units as u
import jsonschema
import yaml

from pipeline.errors import ConfigError

if TYPE_CHECKING:
    from pipeline.budget.table import BudgetAssumptions
    from pipeline.budget.tracers import TracerAbundance
    from pipeline.catalogue import Catalogue
    from pipeline.coma.response import ComaModel
    from pipeline.geometry.observers import Observer
    from pipeline.geometry.orbit import OrbitalElements
    from pipeline.rates.forecast import PlannedEpoch

__all__ = [
    "SCHEMA_FILE",
    "Settings",
    "graph_settings",
    "TargetSettings",
    "LimitsSettings",
    "InfraredSettings",
    "DustSettings",
    "InterferometerSettings",
    "QualitySettings",
    "BudgetSettings",
    "sections_record",
    "schema_keys",
    "write_campaign",
    "load_settings",
    "append_cubes",
    "assumptions_from_config",
    "assumption_sets",
    "budget_missing",
    "budget_defaulted",
    "CubeEntry",
    "load_config",
    "validate_config",
    "cube_entries",
    "check_inputs_exist",
]

SCHEMA_FILE = Path(__file__).resolve().parents[1] / "config" / "schema.yaml"


@dataclass(frozen=True)
class CubeEntry:
    """One cube of the campaign as the workflow uses it."""

    cube_id: str
    epoch: str
    path: str
    time: str | None
    spectral_response: str = "hanning"
    tracked: bool = True
    position: str = "auto"
    offset: tuple[float, float] = (0.0, 0.0)
    resolving_power: float | None = None     # infrared cubes: lambda / FWHM of the line-spread function
    duration_s: float | None = None          # wall-clock length of the exposure, for a header giving only its start
    beam_arcsec: tuple[float, float, float] | None = None   # (major, minor, PA) for a cube whose header has no beam
    observatory: "Observer | None" = None    # this cube's own observer (None: the campaign's)
    ephemeris: str | None = None             # this cube's own ephemeris table (None: the campaign's target)
    apertures: tuple[u.Quantity, ...] | None = None   # this cube's own aperture radii (None: the campaign's)


@functools.lru_cache(maxsize=1)
def _schema_text_parsed() -> dict:
    # libyaml's safe loader where installed: the schema is read at every workflow start (and in every cluster job)
    with open(SCHEMA_FILE, encoding="utf-8") as fh:
        if hasattr(yaml, "CSafeLoader"):
            return yaml.load(fh, Loader=yaml.CSafeLoader)
        return yaml.safe_load(fh)


def _load_schema() -> dict:
    """The config schema (a fresh copy: callers may not change the cached one)."""
    return copy.deepcopy(_schema_text_parsed())


def _with_defaults(validator_class):
    validate_properties = validator_class.VALIDATORS["properties"]

    def set_defaults(validator, properties, instance, schema):
        if isinstance(instance, dict):
            for prop, sub in properties.items():
                if "default" in sub and prop not in instance:
                    instance[prop] = copy.deepcopy(sub["default"])
        yield from validate_properties(validator, properties, instance, schema)

    return jsonschema.validators.extend(validator_class, {"properties": set_defaults})


def _key_path(error: jsonschema.ValidationError) -> str:
    parts = []
    for p in error.absolute_path:
        parts.append(f"[{p}]" if isinstance(p, int) else (("." if parts else "") + str(p)))
    return "".join(parts) or "(top level)"


def _describe(error: jsonschema.ValidationError, source: str) -> str:
    where = _key_path(error)
    if error.validator == "additionalProperties":
        allowed = sorted(error.schema.get("properties", {}))
        extra = sorted(set(error.instance) - set(allowed))
        return (f"{source}: unknown key {', '.join(repr(e) for e in extra)} under {where} "
                f"(misspelt?); allowed keys there: {', '.join(allowed)}")
    if error.validator == "required":
        return f"{source}: {where} is missing the required key {error.message.split(' ')[0]}"
    if error.validator == "not" and where.endswith("target"):
        return f"{source}: target gives both 'ephemeris' and 'elements'; expected exactly one of them"
    if error.validator == "pattern" and where.endswith(("id", "epoch")):
        return (f"{source}: key {where} = {error.instance!r} is not valid: it is used in file names; expected "
                "letters, digits and . _ - only, starting with a letter or digit (no '/' or '..')")
    if error.validator in ("oneOf", "anyOf") and error.context:
        # name what each alternative expected, not just "not valid under any of the given schemas"
        reasons = "; ".join(dict.fromkeys(e.message for e in error.context))
        return f"{source}: key {where} = {error.instance!r} is not valid: {reasons}"
    bounds = {"exclusiveMinimum": ">", "minimum": ">=", "exclusiveMaximum": "<", "maximum": "<="}
    if error.validator in bounds:
        return (f"{source}: key {where} = {error.instance!r} is not valid: {error.message}; expected a number "
                f"{bounds[error.validator]} {error.validator_value}")
    return f"{source}: key {where} = {error.instance!r} is not valid: {error.message}"


def validate_config(config: dict[str, Any], source: str = "config") -> dict[str, Any]:
    """Validate ``config`` against the schema in place, filling in defaults.

    Parameters
    ----------
    config : dict
        The parsed YAML.
    source : str
        The file name to put in messages.

    Returns
    -------
    dict
        The same dictionary, with defaults filled in.

    Raises
    ------
    ConfigError
        Naming the first offending key. Also for duplicated cube ids.
    """
    if not isinstance(config, dict):
        msg = f"{source}: expected a mapping of keys at the top level, found {type(config).__name__}"
        raise ConfigError(msg)
    validator = _with_defaults(jsonschema.Draft202012Validator)(_load_schema())
    _numbers_from_text(validator, config)
    errors = sorted(validator.iter_errors(config), key=lambda e: list(e.absolute_path))
    if errors:
        error = errors[0]
        # report the innermost cause of a oneOf failure when it is a misspelt key, else an
        # error below the key (e.g. a bad value inside the object alternative)
        if error.context:
            # the alternative that came closest: not a plain type/enum mismatch, fewest errors, deepest first
            by_alt: dict[Any, list] = {}
            for e in error.context:
                by_alt.setdefault(e.relative_schema_path[0], []).append(e)
            near = [errs for errs in by_alt.values()
                    if not all(e.validator in ("type", "enum") and len(e.absolute_path) == len(error.absolute_path)
                               for e in errs)]
            if near:
                errs = min(near, key=len)
                deep = [e for e in errs if len(e.absolute_path) > len(error.absolute_path)]
                extra = [e for e in errs if e.validator == "additionalProperties"]
                error = (deep or extra or errs)[0]
        raise ConfigError(_describe(error, source))
    _check_ranges(config, source)
    _normalise_species(config)
    for i, tracer in enumerate(config.get("budget", {}).get("water_from_tracers", [])):
        if tracer["species"] not in config["species"]:
            msg = (f"{source}: key budget.water_from_tracers[{i}].species = {tracer['species']!r} is not among the "
                   f"campaign's species {config['species']}; expected a measured tracer (add it to 'species')")
            raise ConfigError(msg)
    entries = cube_entries(config, source)
    if not {"ephemeris", "elements"} & set(config["target"]):
        bare = [f"cubes[{i}] ({e.cube_id})" for i, e in enumerate(entries) if e.ephemeris is None]
        if bare or config.get("planned"):
            what = f"{bare[0]} has no 'ephemeris' of its own" if bare else "'planned' epochs need the target's geometry"
            msg = (f"{source}: target gives neither 'ephemeris' nor 'elements' and {what}; expected "
                   "target.ephemeris or target.elements (or an 'ephemeris' key on every cube and no 'planned')")
            raise ConfigError(msg)
    seen: dict[str, str] = {}
    for entry in entries:
        if entry.cube_id in seen:
            msg = (f"{source}: cube id {entry.cube_id!r} is used by both {seen[entry.cube_id]!r} "
                   f"and {entry.path!r}; expected unique ids (set 'id' in the cubes entries)")
            raise ConfigError(msg)
        seen[entry.cube_id] = entry.path
    return config


def _normalise_species(config: dict[str, Any]) -> None:
    """Species names spelt as in the catalogue when they match one of its names but for case ('hcn' -> 'HCN'), in
    ``species``, ``budget.drivers`` and ``budget.water_from_tracers``; a name matching none is left for the
    catalogue's own refusal (with its closest suggestions). Nothing changes when the catalogue cannot be read."""
    from pipeline.errors import GasledgerError

    try:
        names = list(_load_catalogue(_catalogue_files(config)).species)
    except (GasledgerError, OSError):
        return
    by_lower: dict[str, list[str]] = {}
    for name in names:
        by_lower.setdefault(name.lower(), []).append(name)

    def spelt(name: Any) -> Any:
        if not isinstance(name, str) or name in names or len(by_lower.get(name.lower(), [])) != 1:
            return name
        return by_lower[name.lower()][0]

    config["species"] = [spelt(n) for n in config.get("species", [])]
    budget = config.get("budget") or {}
    if "drivers" in budget:
        budget["drivers"] = [spelt(n) for n in budget["drivers"]]
    for tracer in budget.get("water_from_tracers", []):
        tracer["species"] = spelt(tracer["species"])


#: A number in exponent form without a decimal point ('2e-6'): YAML 1.2 reads it as a float, YAML 1.1 as text.
_EXPONENT_FLOAT = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)[eE][-+]?\d+$")


def _numbers_from_text(validator, config: dict[str, Any]) -> None:
    """Read '2e-6' as the number YAML 1.2 makes of it where the schema expects a number (YAML 1.1 loaders, as
    PyYAML and Snakemake's, leave it a string); nothing else is converted."""
    for _ in range(10_000):
        for error in validator.iter_errors(config):
            expected = error.validator_value if isinstance(error.validator_value, list) else [error.validator_value]
            if (error.validator == "type" and "number" in expected and isinstance(error.instance, str)
                    and _EXPONENT_FLOAT.match(error.instance.strip()) and error.absolute_path):
                *where, last = list(error.absolute_path)
                holder = config
                for key in where:
                    holder = holder[key]
                holder[last] = float(error.instance)
                break
        else:
            return


#: Config keys that hold a [min, max] range (a path of keys; '*' for every item of a list).
_RANGES = (("budget", "nucleus", "radius_km"), ("budget", "nucleus", "density_kg_m3"),
           ("budget", "nucleus", "mass_kg"), ("budget", "nucleus", "albedo"),
           ("budget", "water_from_tracers", "*", "abundance"))


def _check_ranges(config: dict[str, Any], source: str) -> None:
    """Refuse a [min, max] range given high to low (e.g. a nucleus radius [0.6, 0.15])."""
    def walk(node, path, done):
        if not path:
            if isinstance(node, list) and len(node) == 2 and all(isinstance(v, (int, float)) for v in node) \
                    and node[0] > node[1]:
                key = ".".join(done).replace(".[", "[")
                msg = (f"{source}: key {key} = {node!r} is a range given high to low; expected [min, max] "
                       f"([{node[1]!r}, {node[0]!r}])")
                raise ConfigError(msg)
            return
        head, rest = path[0], path[1:]
        if head == "*" and isinstance(node, list):
            for i, item in enumerate(node):
                walk(item, rest, done[:-1] + [f"{done[-1]}[{i}]"])
        elif isinstance(node, dict) and head in node:
            walk(node[head], rest, done + [head])

    for path in _RANGES:
        walk(config, list(path), [])


def cube_entries(config: dict[str, Any], source: str = "config") -> list[CubeEntry]:
    """The cubes of a campaign with their ids and epoch labels filled in.

    Raises
    ------
    ConfigError
        When an id taken from a file name is not usable in file names.
    """
    return [_cube_entry(item, i, source) for i, item in enumerate(config["cubes"])]


def _cube_entry(item: dict[str, Any], i: int, source: str) -> CubeEntry:
    """One validated ``cubes`` entry as a :class:`CubeEntry` (its id from the file name unless given)."""
    cube_id = item.get("id") or Path(item["path"]).name.split(".")[0]
    if not cube_id or not all(c.isascii() and (c.isalnum() or c in "_.-") for c in cube_id) \
            or cube_id[0] in ".-_":
        msg = (f"{source}: cubes[{i}]: the id {cube_id!r} (from the file name) is not usable in file names; "
               "expected letters, digits and . _ - (set 'id')")
        raise ConfigError(msg)
    return CubeEntry(cube_id=cube_id, epoch=item.get("epoch", cube_id), path=item["path"], time=item.get("time"),
                     spectral_response=item["spectral_response"], tracked=bool(item["tracked"]),
                     position=item["position"], offset=tuple(item["offset_arcsec"]),
                     resolving_power=item.get("resolving_power"), duration_s=item.get("duration_s"),
                     beam_arcsec=tuple(item["beam_arcsec"]) if "beam_arcsec" in item else None,
                     observatory=_observer(item["observatory"]) if "observatory" in item else None,
                     ephemeris=item.get("ephemeris"),
                     apertures=_apertures(item) if {"apertures_km", "apertures_arcsec"} & set(item) else None)


def _input_paths(config: dict[str, Any]) -> list[tuple[str, str | None]]:
    """(config key, path) of every input file the config names."""
    paths = [("target.ephemeris", config["target"].get("ephemeris"))]
    observatory = config.get("observatory")
    if isinstance(observatory, dict):
        paths.append(("observatory.states", observatory.get("states")))
    for i, c in enumerate(config["cubes"]):
        paths.append((f"cubes[{i}].path", c["path"]))
        paths.append((f"cubes[{i}].ephemeris", c.get("ephemeris")))
        if isinstance(c.get("observatory"), dict):
            paths.append((f"cubes[{i}].observatory.states", c["observatory"].get("states")))
    return paths


def check_inputs_exist(config: dict[str, Any], source: str = "config") -> None:
    """Every file the config names exists and is a file."""
    paths = _input_paths(config)
    if "catalogue" in config:
        paths += [(f"catalogue.{k}", config["catalogue"][k]) for k in ("species_file", "lines_file", "bands_file")
                  if k in config["catalogue"]]
    for key, path in paths:
        if path is not None and not Path(path).is_file():
            msg = f"{source}: {key} names the file {path!r}, which does not exist"
            raise ConfigError(msg)


def write_campaign(config: dict[str, Any], path: str | Path, header: str = "", trailer: str = "") -> None:
    """Write a campaign file: validate a copy (defaults are not written into the user's file), then write atomically.

    ``header`` and ``trailer`` are text (comments) written before and after the YAML; the whole is checked to
    read back as ``config``.
    """
    from pipeline.io.atomic import write_text

    validate_config(copy.deepcopy(config), source=str(path))
    text = header + yaml.safe_dump(config, sort_keys=False) + trailer
    if yaml.safe_load(text) != config:
        msg = f"{path}: the text around the campaign's keys changes what the file holds; expected comments only"
        raise ConfigError(msg)
    write_text(text, Path(path))


def append_cubes(path: str | Path, entries: list[dict[str, Any]]) -> None:
    """Append ``cubes`` entries to the campaign file ``path`` (validated; nothing is written on a problem).

    Raises
    ------
    ConfigError
        When an entry's id is already in the campaign (or twice in ``entries``).
    """
    path = Path(path)
    known = {c.cube_id for c in cube_entries(load_config(path), str(path))}
    text = path.read_text(encoding="utf-8")
    raw = yaml.safe_load(text)
    for entry in entries:
        if entry["id"] in known:
            msg = f"{path}: a cube with id {entry['id']!r} is already in the campaign; expected a new id (set 'id')"
            raise ConfigError(msg)
        known.add(entry["id"])
        raw["cubes"].append(entry)
    validate_config(copy.deepcopy(raw), source=str(path))
    kept = _insert_cubes(text, entries)
    if kept is not None and yaml.safe_load(kept) == raw:
        from pipeline.io.atomic import write_text

        write_text(kept, path)              # the user's comments and layout kept
    else:
        write_campaign(raw, path)           # a flow-style or unusual 'cubes' list: rewritten as plain YAML


def _insert_cubes(text: str, entries: list[dict[str, Any]]) -> str | None:
    """``text`` with ``entries`` added at the end of its block-style top-level ``cubes:`` list (None if not found)."""
    lines = text.splitlines(keepends=True)
    start = next((i for i, ln in enumerate(lines) if re.match(r"^cubes:\s*(#.*)?$", ln.rstrip("\n"))), None)
    if start is None:
        return None
    indent, end = None, len(lines)
    for i in range(start + 1, len(lines)):
        ln = lines[i].rstrip("\n")
        if not ln.strip() or ln.lstrip().startswith("#"):
            continue
        lead = len(ln) - len(ln.lstrip())
        if indent is None:
            if not ln.lstrip().startswith("- "):
                return None
            indent = lead
        if lead < indent or (lead == indent and not ln.lstrip().startswith("- ")):
            end = i
            break
    if indent is None:
        return None
    while end > start + 1 and not lines[end - 1].strip():
        end -= 1                            # new items go right after the last item, before blank lines
    block = yaml.safe_dump(entries, sort_keys=False, default_flow_style=False)
    added = "".join(" " * indent + ln + "\n" for ln in block.splitlines())
    if end > 0 and not lines[end - 1].endswith("\n"):
        lines[end - 1] += "\n"
    return "".join(lines[:end]) + added + "".join(lines[end:])


def graph_settings(config: dict[str, Any]) -> "Settings":
    """The settings the job graph is built from (rules/common.smk): every section of the validated ``config`` but
    the coma model's (``coma``, ``excitation``). The graph needs none of those, and building them imports the
    model's modules (scipy's integrators and special functions, ~0.5 s at every Snakemake start and, on a cluster,
    in every job); the schema has checked them, and what only building them checks (model nonlte without
    excitation.q_h2o_per_s) is refused, in one sentence, by the first job that reads them."""
    return Settings.from_config(config, sections=set(schema_keys()) - {"coma", "excitation"})


def load_settings(path: str | Path) -> "Settings":
    """The typed settings of a campaign file (loaded, validated, defaults filled in)."""
    return Settings.from_config(load_config(path))


@functools.lru_cache(maxsize=1)
def schema_keys() -> tuple[str, ...]:
    """Every top-level key the schema knows (the sections a step may be given)."""
    return tuple(_load_schema()["properties"])


def load_config(path: str | Path) -> dict[str, Any]:
    """Safe-load a campaign YAML file and validate it (defaults filled in)."""
    path = Path(path)
    try:
        with open(path, encoding="utf-8") as fh:
            config = yaml.safe_load(fh)
    except FileNotFoundError:
        msg = f"config file {str(path)!r} does not exist"
        raise ConfigError(msg) from None
    except yaml.YAMLError as exc:
        msg = f"config file {str(path)!r} is not valid YAML: {exc}"
        raise ConfigError(msg) from exc
    return validate_config(config, source=str(path))


# --------------------------------------------------------------------------------------------------------------
# Typed settings


class _NotGiven:
    """Stands for a config section the running step was not given."""

    def __init__(self, key: str) -> None:
        self.key = key

    def __repr__(self) -> str:
        return f"<section {self.key!r} not given>"


class _Guarded:
    """Reading a field that holds :class:`_NotGiven` raises ConfigError naming the section."""

    def __getattribute__(self, name: str) -> Any:
        value = object.__getattribute__(self, name)
        if isinstance(value, _NotGiven):
            msg = (f"settings: this step was not given the config key {value.key!r} (field {name!r}); "
                   "expected it in the rule's settings params (rules/*.smk, settings_of)")
            raise ConfigError(msg)
        return value


def _sub(section: dict[str, Any], key: str, where: str, convert=lambda v: v) -> Any:
    """``convert(section[key])``, or :class:`_NotGiven` when a rule passed the section without that key."""
    if key not in section:
        return _NotGiven(f"{where}.{key}")
    return convert(section[key])


@dataclass(frozen=True)
class TargetSettings:
    """Where the target is: an ephemeris table (path) or osculating elements."""

    name: str
    ephemeris: str | None
    elements: "OrbitalElements | None"


@dataclass(frozen=True)
class LimitsSettings(_Guarded):
    """Significance of the limits, integration window and the activity-law slope."""

    nsigma: float
    window_factor: float
    activity_slope: float


@dataclass(frozen=True)
class InfraredSettings(_Guarded):
    """Band measurement in infrared cubes."""

    margin_fwhm: float
    continuum_factor: float
    continuum_order: int
    continuum_shape: str


@dataclass(frozen=True)
class DustSettings(_Guarded):
    """Afrho wavelengths and the assumptions of the dust production estimate."""

    wavelengths: u.Quantity
    half_width: u.Quantity
    grain_radius: u.Quantity
    grain_density: u.Quantity
    speed: u.Quantity
    albedo: float

    def as_record(self) -> dict[str, Any]:
        """The values as written in the tables' meta (units in the key names)."""
        return {"grain_radius_um": self.grain_radius.to_value(u.um),
                "grain_density_kg_m3": self.grain_density.to_value(u.kg / u.m**3),
                "speed_km_s": self.speed.to_value(u.km / u.s), "albedo": self.albedo}


@dataclass(frozen=True)
class QualitySettings(_Guarded):
    """Which data-quality flags make a voxel unusable, and how much of an aperture's coma may be made up for."""

    dq_bad_bits: int
    max_masked_share: float


@dataclass(frozen=True)
class InterferometerSettings:
    """Spatial filtering: the shortest projected baseline and whether the response is corrected."""

    shortest_baseline: u.Quantity
    correct: bool


@dataclass(frozen=True)
class BudgetSettings:
    """The budget's assumption sets (the baseline first) and whether the dust's push is counted."""

    assumption_sets: tuple["BudgetAssumptions", ...]
    include_dust: bool
    water_from_tracers: tuple["TracerAbundance", ...] = ()
    missing: tuple[str, ...] = ()       # one sentence per input a verdict needs and the campaign lacks
    defaulted: tuple[str, ...] = ()     # one sentence per input a verdict rests on that was left at its default

    @property
    def baseline(self) -> "BudgetAssumptions":
        """The first assumption set, named 'baseline'."""
        return self.assumption_sets[0]


_FIELDS = {   # Settings field -> the top-level config keys it is built from
    "campaign": ("campaign",), "outdir": ("outdir",), "catalogue_files": ("catalogue",), "target": ("target",),
    "observatory": ("observatory",), "cubes": ("cubes",),
    "planned": ("planned", "comoving"), "species": ("species",), "apertures": ("apertures_km", "apertures_arcsec"),
    "half_width": ("comoving",), "interferometer": ("interferometer",), "quality": ("quality",), "infrared": ("infrared",),
    "dust": ("dust",), "limits": ("limits",), "t_kin": ("excitation",), "t_adopted": ("excitation",), "opacity_correction": ("excitation",), "coma": ("coma",), "budget": ("budget",),
}


@dataclass(frozen=True)
class Settings(_Guarded):
    """The campaign's settings, typed and frozen (built by :meth:`from_config`).

    A field whose config section was not given to the running step raises
    :class:`~pipeline.errors.ConfigError` when read. ``cube`` is the one cube a
    per-cube step works on (None for campaign-level steps); ``record`` is the
    config sections the settings were built from, for provenance records.
    """

    record: dict
    campaign: str
    outdir: str
    catalogue_files: tuple[str, str, str | None] | None
    target: TargetSettings
    observatory: "Observer"
    cubes: tuple["CubeEntry", ...]
    cube: "CubeEntry | None"
    planned: tuple["PlannedEpoch", ...]
    species: tuple[str, ...]
    apertures: tuple[u.Quantity, ...]
    half_width: u.Quantity
    interferometer: InterferometerSettings | None
    quality: QualitySettings
    infrared: InfraredSettings
    dust: DustSettings
    limits: LimitsSettings
    t_kin: u.Quantity
    t_adopted: u.Quantity | None
    opacity_correction: str
    coma: "ComaModel"
    budget: BudgetSettings

    @classmethod
    def from_config(cls, config: dict[str, Any], cube: dict[str, Any] | None = None,
                    sections: Iterable[str] | None = None) -> "Settings":
        """Typed settings from a validated config, or from the sections a rule passes (see :func:`sections_record`).

        Parameters
        ----------
        config : dict
            The validated config (defaults filled in), whole or the sections a rule declares.
        cube : dict, optional
            The entry of the one cube a per-cube step works on (as in ``cubes``, defaults filled in).
        sections : iterable of str, optional
            The config keys given; the settings built from any other key cannot be read. Default: every key
            of the schema (a whole config; an optional key it lacks is "not configured").
        """
        given = set(schema_keys() if sections is None else sections)
        values: dict[str, Any] = {}
        for field_name, keys in _FIELDS.items():
            if not all(k in given for k in keys):
                values[field_name] = _NotGiven(",".join(keys))
                continue
            values[field_name] = _BUILDERS[field_name](config)
        values["cube"] = _cube_entry(cube, 0, "cube") if cube is not None else None
        values["record"] = {k: config[k] for k in sorted(config) if k in given and config[k] is not None}
        return cls(**values)

    def with_cube(self, cube_id: str) -> "Settings":
        """The same settings for the campaign's cube ``cube_id`` (what a per-cube step is given)."""
        for entry in self.cubes:
            if entry.cube_id == cube_id:
                values = {f.name: object.__getattribute__(self, f.name) for f in fields(self)}
                return Settings(**{**values, "cube": entry})
        msg = f"settings: no cube with id {cube_id!r}; expected one of {[c.cube_id for c in self.cubes]}"
        raise ConfigError(msg)

    def catalogue(self) -> "Catalogue":
        """The user's catalogue named in the settings, or the built-in one (loaded once per process)."""
        return _load_catalogue(self.catalogue_files)

    def observer_of(self, cube: "CubeEntry | None" = None) -> "Observer":
        """The observer of ``cube`` (default: the step's cube): its own 'observatory', else the campaign's."""
        cube = cube if cube is not None else self.cube
        if cube is not None and cube.observatory is not None:
            return cube.observatory
        return self.observatory

    def ephemeris_of(self, cube: "CubeEntry | None" = None) -> str | None:
        """The ephemeris table of ``cube`` (default: the step's cube): its own, else the target's (None: elements)."""
        cube = cube if cube is not None else self.cube
        if cube is not None and cube.ephemeris is not None:
            return cube.ephemeris
        return self.target.ephemeris

    def elements_of(self, cube: "CubeEntry | None" = None) -> "OrbitalElements | None":
        """The target's elements for ``cube``: None when the cube has its own ephemeris table."""
        cube = cube if cube is not None else self.cube
        if cube is not None and cube.ephemeris is not None:
            return None
        return self.target.elements

    def apertures_of(self, cube: "CubeEntry | None" = None) -> tuple[u.Quantity, ...]:
        """The aperture radii of ``cube`` (default: the step's cube): its own, else the campaign's."""
        cube = cube if cube is not None else self.cube
        if cube is not None and cube.apertures is not None:
            return cube.apertures
        return self.apertures

    def missing_inputs(self, source: str = "config") -> list[str]:
        """One sentence for every file the settings name that does not exist (ephemerides, states, cubes, catalogue)."""
        paths = [("target.ephemeris", self.target.ephemeris)]
        if self.observatory.states is not None:
            paths.append(("observatory.states", self.observatory.states))
        for i, c in enumerate(self.cubes):
            paths += [(f"cubes[{i}].path", c.path), (f"cubes[{i}].ephemeris", c.ephemeris)]
            if c.observatory is not None and c.observatory.states is not None:
                paths.append((f"cubes[{i}].observatory.states", c.observatory.states))
        if self.catalogue_files is not None:
            paths += [(f"catalogue.{k}", f) for k, f in zip(("species_file", "lines_file", "bands_file"),
                                                             self.catalogue_files)]
        return [f"{source}: {key} names the file {path!r}, which does not exist"
                for key, path in paths if path is not None and not Path(path).is_file()]



def sections_record(config: dict[str, Any], keys: Iterable[str]) -> dict[str, Any]:
    """The config sections ``keys`` (None for a section not configured), for a rule's params.

    A key ``"section.name"`` gives only that entry of a section (e.g. ``"limits.window_factor"``), so a rule
    that reads one value of a section is not rerun when another changes. ``outdir`` is always included (the
    checksum cache of the provenance records lives below it).
    """
    out: dict[str, Any] = {"outdir": config.get("outdir")}
    for key in sorted(set(keys)):
        top, _, sub = key.partition(".")
        if not sub:
            out[top] = copy.deepcopy(config.get(top))
        elif config.get(top) is not None and sub in config[top]:
            out.setdefault(top, {})[sub] = copy.deepcopy(config[top][sub])
        else:
            out.setdefault(top, {})
    return out


@functools.lru_cache(maxsize=4)
def _load_catalogue(files: tuple[str, str, str | None] | None) -> "Catalogue":
    from pipeline.catalogue import load_catalogue

    if files is None:
        return load_catalogue()
    return load_catalogue(*files)


def _catalogue_files(config: dict[str, Any]):
    cat = config.get("catalogue")
    if cat is None:
        return None
    return (cat["species_file"], cat["lines_file"], cat.get("bands_file"))


def _target(config: dict[str, Any]) -> TargetSettings:
    from pipeline.geometry.orbit import OrbitalElements

    target = config["target"]
    elements = OrbitalElements.from_mapping(target["elements"]) if "elements" in target else None
    return TargetSettings(name=target.get("name", "target"), ephemeris=target.get("ephemeris"), elements=elements)


def _observer(entry: Any) -> "Observer":
    from pipeline.geometry.observers import observer_from_config

    return observer_from_config(entry)


def _planned(config: dict[str, Any]):
    from pipeline.rates.forecast import PlannedEpoch

    half = float(config["comoving"]["half_width_km_s"])
    return tuple(PlannedEpoch(label=p["label"], time=p["time"], lines=tuple(p["lines"]),
                              noise_jy_beam=float(p["noise_jy_beam"]), channel_khz=float(p["channel_khz"]),
                              beam_arcsec=tuple(float(b) for b in p["beam_arcsec"]),
                              pixel_arcsec=float(p["pixel_arcsec"]) if "pixel_arcsec" in p
                              else float(p["beam_arcsec"][1]) / 4,
                              npix=int(p["npix"]), half_width_km_s=half)
                 for p in config["planned"])


def _apertures(config: dict[str, Any]) -> tuple[u.Quantity, ...]:
    radii = [r * u.km for r in config.get("apertures_km") or []]
    radii += [r * u.arcsec for r in config.get("apertures_arcsec") or []]
    return tuple(radii)


def _interferometer(config: dict[str, Any]) -> InterferometerSettings | None:
    section = config.get("interferometer")
    if section is None:
        return None
    return InterferometerSettings(shortest_baseline=section["shortest_baseline_m"] * u.m,
                                  correct=bool(section["correct"]))


def _quality(config: dict[str, Any]) -> QualitySettings:
    q = config["quality"]
    return QualitySettings(dq_bad_bits=_sub(q, "dq_bad_bits", "quality", int),
                           max_masked_share=_sub(q, "max_masked_share", "quality", float))


def _infrared(config: dict[str, Any]) -> InfraredSettings:
    ir = config["infrared"]
    return InfraredSettings(margin_fwhm=_sub(ir, "margin_fwhm", "infrared", float),
                            continuum_factor=_sub(ir, "continuum_factor", "infrared", float),
                            continuum_order=_sub(ir, "continuum_order", "infrared", int),
                            continuum_shape=_sub(ir, "continuum_shape", "infrared", str))


def _dust(config: dict[str, Any]) -> DustSettings:
    d = config["dust"]
    return DustSettings(wavelengths=_sub(d, "wavelengths_um", "dust", lambda v: u.Quantity(v, u.um)),
                        half_width=_sub(d, "half_width_um", "dust", lambda v: v * u.um),
                        grain_radius=_sub(d, "grain_radius_um", "dust", lambda v: v * u.um),
                        grain_density=_sub(d, "grain_density_kg_m3", "dust", lambda v: v * u.kg / u.m**3),
                        speed=_sub(d, "speed_km_s", "dust", lambda v: v * u.km / u.s),
                        albedo=_sub(d, "albedo", "dust"))


def _limits(config: dict[str, Any]) -> LimitsSettings:
    lim = config["limits"]
    return LimitsSettings(nsigma=_sub(lim, "nsigma", "limits"), window_factor=_sub(lim, "window_factor", "limits"),
                          activity_slope=_sub(lim, "activity_slope", "limits"))


def _coma(config: dict[str, Any]):
    from pipeline.coma.response import EXCITATION_NOT_GIVEN, ComaModel

    coma = config["coma"]
    exc = config.get("excitation")
    excitation = (EXCITATION_NOT_GIVEN if exc is None or "model" not in exc
                  else _nonlte(exc, coma["solar_activity"]))
    return ComaModel(outflow=coma["outflow_km_s"], solar_activity=coma["solar_activity"], excitation=excitation)


def _nonlte(exc: dict[str, Any], solar_activity: str):
    """The ``excitation`` section's non-LTE settings (None for model lte); water's photodestruction rate and the
    species' pumping rates from the built-in catalogue (H2O's rate under ``solar_activity``; the sum of each
    species' band fluorescence rates, unless ``pump_rate_1au_per_s`` gives it)."""
    from pipeline.coma.departure import NonLteSettings
    from pipeline.coma.nonlte import band_pump_rate

    if exc["model"] == "lte":
        return None
    if "q_h2o_per_s" not in exc:
        msg = ("config: excitation.model is nonlte but excitation.q_h2o_per_s is missing; expected the water "
               "production rate [1/s] whose collisions excite the lines (set excitation.q_h2o_per_s, or "
               "excitation.model: lte)")
        raise ConfigError(msg)
    files = []
    for name, paths in sorted(exc["molecular_data"].items()):
        paths = (paths,) if isinstance(paths, str) else tuple(paths)
        for path in paths:
            if not Path(path).is_file():
                msg = (f"config: excitation.molecular_data.{name} names the file {path!r}, which does not exist; "
                       "expected a LAMDA-format molecular data file")
                raise ConfigError(msg)
        files.append((str(name), tuple(str(x) for x in paths)))
    builtin = _load_catalogue(None)
    pumps = {name: float(band_pump_rate(builtin.bands_of(name)).to_value(1 / u.s)) for name in builtin.species}
    pumps.update({str(k): float(v) for k, v in exc["pump_rate_1au_per_s"].items()})
    return NonLteSettings(q_h2o_per_s=float(exc["q_h2o_per_s"]),
                          h2o_rate_1au_per_s=float(builtin.get_species("H2O").photo_rate(solar_activity)
                                                   .to_value(1 / u.s)),
                          x_ne=float(exc["x_ne"]), sigma_cm2=float(exc["collision_cross_section_cm2"]),
                          steady_state=bool(exc["steady_state"]), molecular_data=tuple(files),
                          pump_rates_1au_per_s=tuple(sorted((k, v) for k, v in pumps.items() if v > 0)))


def _budget(config: dict[str, Any]) -> BudgetSettings:
    from pipeline.budget.tracers import TracerAbundance

    tracers = tuple(TracerAbundance(species=str(t["species"]), low=float(min(t["abundance"])),
                                    high=float(max(t["abundance"])), ref=str(t["ref"]))
                    for t in config["budget"].get("water_from_tracers", []))
    return BudgetSettings(assumption_sets=tuple(assumption_sets(config["budget"])),
                          include_dust=bool(config["budget"]["include_dust"]), water_from_tracers=tracers,
                          missing=tuple(budget_missing(config["budget"])),
                          defaulted=tuple(budget_defaulted(config["budget"])))


def budget_missing(budget: dict[str, Any]) -> list[str]:
    """One sentence per input the verdicts need that the validated ``budget`` section lacks, naming the key."""
    if "acceleration_m_s2" in budget or "nongrav" in budget:
        return []
    return ["no verdict will be computed: the campaign gives no measured non-gravitational acceleration; set "
            "budget.acceleration_m_s2: [value, sigma] in m/s^2 (or budget.nongrav: {A1, A2, A3} in au/d^2)"]


def budget_defaulted(budget: dict[str, Any]) -> list[str]:
    """One sentence per budget input left at the schema's default although a verdict rests on it."""
    default = _load_schema()["properties"]["budget"]["properties"]["nucleus"]["default"]
    nucleus = budget.get("nucleus", default)
    if {"mass_kg", "absolute_magnitude"} & set(nucleus) or nucleus.get("radius_km") != default["radius_km"]:
        return []
    lo, hi = default["radius_km"]
    return [f"the nucleus radius is the schema's default range {lo:g}-{hi:g} km, which nobody chose for this "
            "target: set budget.nucleus.radius_km (or budget.nucleus.mass_kg, or budget.nucleus.absolute_magnitude "
            "with albedo)"]


_BUILDERS = {
    "campaign": lambda c: str(c["campaign"]), "outdir": lambda c: str(c["outdir"]),
    "catalogue_files": _catalogue_files, "target": _target, "observatory": lambda c: _observer(c["observatory"]),
    "cubes": lambda c: tuple(cube_entries(c)), "planned": _planned,
    "species": lambda c: tuple(c["species"]), "apertures": _apertures,
    "half_width": lambda c: c["comoving"]["half_width_km_s"] * u.km / u.s, "interferometer": _interferometer,
    "quality": _quality,
    "infrared": _infrared, "dust": _dust, "limits": _limits,
    "t_kin": lambda c: u.Quantity(c["excitation"]["t_kin_K"], u.K),
    "t_adopted": lambda c: (c["excitation"]["t_adopted_K"] * u.K if "t_adopted_K" in c["excitation"] else None),
    "opacity_correction": lambda c: str(c["excitation"]["opacity_correction"]),
    "coma": _coma, "budget": _budget,
}


# --------------------------------------------------------------------------------------------------------------
# The budget's assumptions (the config's ``budget`` section)


def _radius_range(nucleus: dict[str, Any]) -> tuple[tuple[float, float], str]:
    from pipeline.budget.momentum import diameter_from_absolute_magnitude

    if "absolute_magnitude" in nucleus:
        h_mag = float(nucleus["absolute_magnitude"])
        albedo = nucleus["albedo"]
        d = [float(diameter_from_absolute_magnitude(h_mag, p).to_value(u.km)) for p in albedo]
        return (min(d) / 2, max(d) / 2), f"H = {h_mag:g} and albedo {min(albedo):g}-{max(albedo):g}"
    return (float(nucleus["radius_km"][0]), float(nucleus["radius_km"][1])), "radius and density"


def assumptions_from_config(budget: dict[str, Any]) -> "BudgetAssumptions":
    """The baseline budget assumptions from the config's validated ``budget`` section."""
    from pipeline.budget.momentum import nucleus_mass
    from pipeline.budget.table import BudgetAssumptions

    nucleus = budget["nucleus"]
    if "mass_kg" in nucleus:
        mass = tuple(float(m) for m in nucleus["mass_kg"])
        radius = density = None
        source = "mass range"
    else:
        radius, source = _radius_range(nucleus)
        density = tuple(float(d) for d in nucleus["density_kg_m3"])
        mass = (float(nucleus_mass(radius[0] * u.km, density[0] * u.kg / u.m**3).to_value(u.kg)),
                float(nucleus_mass(radius[1] * u.km, density[1] * u.kg / u.m**3).to_value(u.kg)))
    acc = tuple(float(a) for a in budget["acceleration_m_s2"]) if "acceleration_m_s2" in budget else None
    nongrav = budget.get("nongrav")
    return BudgetAssumptions(acceleration=acc, nongrav=nongrav, radius_km=radius,
                             density_kg_m3=density, mass_kg=(min(mass), max(mass)),
                             ejection=budget["ejection_speed_km_s"], efficiency=float(budget["momentum_efficiency"]),
                             interval_days=float(budget["interval_days"]), drivers=tuple(budget["drivers"]),
                             g_params=(nongrav or {}).get("g_params"), nucleus_from=source)


def assumption_sets(budget: dict[str, Any]) -> list["BudgetAssumptions"]:
    """The baseline assumptions and every further set of ``budget.assumption_sets``."""
    base = assumptions_from_config(budget)
    sets = [base]
    for extra in budget.get("assumption_sets", []):
        sets.append(replace(base, name=str(extra["name"]),
                            efficiency=float(extra.get("momentum_efficiency", base.efficiency)),
                            ejection=extra.get("ejection_speed_km_s", base.ejection)))
    return sets
