"""Campaign configuration: loading, schema validation, defaults and semantic checks.

The schema is ``config/schema.yaml`` (JSON Schema written in YAML). Validation
fills in defaults and reports the first problem as one sentence naming the key,
what was found and what was expected. (Snakemake's own ``validate`` prints the
whole schema with each error, which buries the one line a user needs, so the
Snakefile calls :func:`validate_config` instead.)
"""

from __future__ import annotations

import copy
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import jsonschema
import yaml

from pipeline.errors import ConfigError

__all__ = [
    "SCHEMA_FILE",
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


def _load_schema() -> dict:
    with open(SCHEMA_FILE, encoding="utf-8") as fh:
        return yaml.safe_load(fh)


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
    if error.validator == "oneOf" and where.endswith("target"):
        return f"{source}: target must give exactly one of 'ephemeris' or 'elements'"
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
    errors = sorted(validator.iter_errors(config), key=lambda e: list(e.absolute_path))
    if errors:
        error = errors[0]
        # report the innermost cause of a oneOf failure when it is a misspelt key, else an
        # error below the key (e.g. a bad value inside the object alternative)
        if error.context:
            inner = [e for e in error.context if e.validator == "additionalProperties"]
            inner = inner or [e for e in error.context if len(e.absolute_path) > len(error.absolute_path)]
            if inner:
                error = inner[0]
        raise ConfigError(_describe(error, source))
    entries = cube_entries(config, source)
    seen: dict[str, str] = {}
    for entry in entries:
        if entry.cube_id in seen:
            msg = (f"{source}: cube id {entry.cube_id!r} is used by both {seen[entry.cube_id]!r} "
                   f"and {entry.path!r}; expected unique ids (set 'id' in the cubes entries)")
            raise ConfigError(msg)
        seen[entry.cube_id] = entry.path
    return config


def cube_entries(config: dict[str, Any], source: str = "config") -> list[CubeEntry]:
    """The cubes of a campaign with their ids and epoch labels filled in.

    Raises
    ------
    ConfigError
        When an id taken from a file name is not usable in file names.
    """
    entries = []
    for i, item in enumerate(config["cubes"]):
        cube_id = item.get("id") or Path(item["path"]).name.split(".")[0]
        if not cube_id or not all(c.isascii() and (c.isalnum() or c in "_.-") for c in cube_id) \
                or cube_id[0] in ".-_":
            msg = (f"{source}: cubes[{i}]: the id {cube_id!r} (from the file name) is not usable in file names; "
                   "expected letters, digits and . _ - (set 'id')")
            raise ConfigError(msg)
        entries.append(CubeEntry(cube_id=cube_id, epoch=item.get("epoch", cube_id),
                                 path=item["path"], time=item.get("time"),
                                 spectral_response=item.get("spectral_response", "hanning"),
                                 tracked=bool(item.get("tracked", True)),
                                 position=item.get("position", "auto"),
                                 offset=tuple(item.get("offset_arcsec", (0.0, 0.0))),
                                 resolving_power=item.get("resolving_power")))
    return entries


def check_inputs_exist(config: dict[str, Any], source: str = "config") -> None:
    """Every file the config names exists and is a file."""
    paths = [("target.ephemeris", config["target"].get("ephemeris"))]
    paths += [(f"cubes[{i}].path", c["path"]) for i, c in enumerate(config["cubes"])]
    if "catalogue" in config:
        paths += [(f"catalogue.{k}", config["catalogue"][k]) for k in ("species_file", "lines_file", "bands_file")
                  if k in config["catalogue"]]
    for key, path in paths:
        if path is not None and not Path(path).is_file():
            msg = f"{source}: {key} names the file {path!r}, which does not exist"
            raise ConfigError(msg)


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
