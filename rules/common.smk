# Config validation, wildcard constraints and the helpers that build input lists.
import json
import re
import sys
from types import SimpleNamespace

from pipeline.catalogue.coverage import bands_for_cube, lines_for_cube
from pipeline.errors import GasledgerError
from pipeline.io.cube_index import cube_spans, index_location
from pipeline.io.provenance import code_version
from pipeline.settings import check_inputs_exist, graph_settings, schema_keys, sections_record, validate_config

try:
    validate_config(config, source="config")
    check_inputs_exist(config, source="config")
    SETTINGS = graph_settings(config)          # every section but the coma model's (see its docstring)
    CATALOGUE = SETTINGS.catalogue()
    for _name in config["species"]:
        CATALOGUE.get_species(_name)
    CUBES = {c.cube_id: c for c in SETTINGS.cubes}
    CUBE_ITEMS = {c.cube_id: item for c, item in zip(SETTINGS.cubes, config["cubes"])}
    # each cube's spectral range: its header read (and checked) once per file version, kept in the cube index
    SPANS = cube_spans({cid: (c.path, c.beam_arcsec) for cid, c in CUBES.items()}, index_location())
    LINES = {cid: lines_for_cube(SPANS[cid], CATALOGUE, config["species"]) for cid in CUBES}
    IR_CUBES = {cid: SPANS[cid].regime == "infrared" for cid in CUBES}
    BANDS = {cid: bands_for_cube(SPANS[cid], CATALOGUE, config["species"]) for cid in CUBES}
except GasledgerError as exc:
    sys.exit(f"gasledger: {exc}")

OUT = config["outdir"].rstrip("/")
SPECIES = list(config["species"])
CONFIG_KEYS = schema_keys()
# the package's code and data: a change reruns every job (Snakemake's code trigger sees only the rule scripts)
CODE_VERSION = code_version()


wildcard_constraints:
    cube="[A-Za-z0-9][A-Za-z0-9_.-]*",
    epoch="[A-Za-z0-9][A-Za-z0-9_.-]*",
    species="[A-Za-z0-9][A-Za-z0-9_+-]*",


def canon(value):
    """Params as canonical JSON, so key order in the YAML does not make Snakemake rerun jobs."""
    return json.dumps(value, sort_keys=True)


def settings_of(*keys, cube=False, epoch=False):
    """A rule's ``settings`` param: the config sections ``keys`` it reads (and, with ``cube``, its cube's entry).

    With ``epoch``, the ``cubes`` section holds only the entries of the job's epoch, so a per-epoch job is not
    rerun when a cube of another epoch is added. The step parses exactly this into typed settings
    (pipeline.workflow.common.rule_settings) and cannot read any other section, so what triggers a rerun and what
    the code reads are one list.
    """
    sections = sections_record(config, keys)
    if cube:
        return lambda w: canon({"sections": sections, "cube": CUBE_ITEMS[w.cube]})
    if epoch:
        return lambda w: canon({"sections": {**sections, "cubes": [CUBE_ITEMS[cid] for cid in CUBES
                                                                    if CUBES[cid].epoch == w.epoch]}})
    return canon({"sections": sections})


def catalogue_files():
    """The user's catalogue files (rule inputs, so that editing one reruns what read it); none for the built-in."""
    cat = config.get("catalogue") or {}
    return [cat[k] for k in ("species_file", "lines_file", "bands_file") if k in cat]


def molecular_data_files():
    """The user's LAMDA-format files of excitation.molecular_data (inputs of the rules that model lines under
    non-LTE excitation, so that editing one reruns what read it); none without."""
    files = []
    for paths in ((config.get("excitation") or {}).get("molecular_data") or {}).values():
        files.extend([paths] if isinstance(paths, str) else list(paths))
    return files


def cube_path(wildcards):
    return CUBES[wildcards.cube].path


def ephemeris_input(wildcards):
    """The cube's ephemeris table (its own, else the target's) and its observer's state table, when there are."""
    cube = CUBES[wildcards.cube]
    table = SETTINGS.ephemeris_of(cube)
    states = SETTINGS.observer_of(cube).states
    return [p for p in (table, states) if p is not None]


def campaign_geometry_inputs():
    """The target's ephemeris table and the campaign observer's state table, when there are (planned epochs)."""
    return [p for p in (SETTINGS.target.ephemeris, SETTINGS.observatory.states) if p is not None]


def cubes_of(wildcards):
    """The cubes a job reads from: all, or those of its ``epoch`` wildcard when the rule has one."""
    epoch = getattr(wildcards, "epoch", None)
    return [cid for cid in CUBES if epoch is None or CUBES[cid].epoch == epoch]


def cube_id_pattern(infrared):
    """The cube wildcard's pattern for the infrared (or the millimetre) cubes' step: exactly their ids (a pattern
    that matches nothing when there are none), so each cube's products have one maker."""
    ids = [re.escape(cid) for cid in CUBES if IR_CUBES[cid] == infrared]
    return "|".join(ids) if ids else "(?!)"


def _line_cubes(wildcards):
    """The cubes of the job's species (and epoch, if any) with a line of it: (cube, its lines of the species)."""
    out = []
    for cid in cubes_of(wildcards):
        lines = [line for line in LINES[cid] if CATALOGUE.get_line(line).species == wildcards.species]
        if lines:
            out.append((cid, lines))
    return out


def per_line_folders(folder):
    """Input function: the folders below OUT/folder (one per cube, made by its cube_lines job) that hold a line of
    the job's species (of its epoch, if any)."""
    return lambda wildcards: [f"{OUT}/{folder}/{cid}" for cid, _ in _line_cubes(wildcards)]


def per_line_files(folder):
    """Params function: every (cube, line) file of the job's species inside those folders
    (``OUT/folder/<cube>/<line>.fits``), in the campaign's cube order and each cube's line order."""
    return lambda wildcards: [f"{OUT}/{folder}/{cid}/{line}.fits" for cid, lines in _line_cubes(wildcards)
                              for line in lines]


def band_files_of_species(wildcards):
    """Input function: the bands file of every infrared cube that covers a band of one species (of the job's
    epoch, if any)."""
    return [
        f"{OUT}/bands/{cid}.fits"
        for cid in cubes_of(wildcards)
        if any(CATALOGUE.get_band(b).species == wildcards.species for b in BANDS[cid])
    ]


def ir_cubes_of_species(wildcards):
    """Input function: the infrared cube files that cover a band of one species (the band injections read them;
    of the job's epoch, if any)."""
    return [
        CUBES[cid].path
        for cid in cubes_of(wildcards)
        if any(CATALOGUE.get_band(b).species == wildcards.species for b in BANDS[cid])
    ]


def bands_files():
    """Every infrared cube's bands file (also those covering no configured species: they hold the dust)."""
    return [f"{OUT}/bands/{cid}.fits" for cid in CUBES if IR_CUBES[cid]]


spectra_folders_of_species = per_line_folders("spectra")
spectra_of_species = per_line_files("spectra")
subcube_folders_of_species = per_line_folders("comoving")
subcubes_of_species = per_line_files("comoving")


def _covers(cid, species):
    """Whether cube ``cid`` covers a line or a band of ``species``."""
    return (any(CATALOGUE.get_line(line).species == species for line in LINES[cid])
            or any(CATALOGUE.get_band(b).species == species for b in BANDS[cid]))


def epochs_of_species(species):
    """The epochs with a cube that covers a line or band of ``species``, in the campaign's order."""
    return list(dict.fromkeys(CUBES[cid].epoch for cid in CUBES if _covers(cid, species)))


def epoch_folders(kind):
    """The per-epoch folders below OUT/kind (``stack_epoch`` or ``injection_epoch``) of every epoch that covers a
    configured species (each made by its epoch job)."""
    covered = dict.fromkeys(e for s in SPECIES for e in epochs_of_species(s))
    return [f"{OUT}/{kind}/{e}" for e in covered]


def stack_epoch_files():
    """Each species' per-epoch stack inputs (epochs that cover it), by species in the config's order."""
    return {s: [f"{OUT}/stack_epoch/{e}/{s}.fits" for e in epochs_of_species(s)] for s in SPECIES}


def injection_epoch_files():
    """Each species' per-epoch injection measurements (epochs that cover it), by species in the config's order."""
    return {s: [f"{OUT}/injection_epoch/{e}/{s}.ecsv" for e in epochs_of_species(s)] for s in SPECIES}


def _epoch_species(epoch):
    """The configured species an epoch's cubes cover, H2O first (its measured water excites the others' lines
    under non-LTE), the others in the config's order."""
    return sorted((s for s in SPECIES if epoch in epochs_of_species(s)), key=lambda s: s != "H2O")


def epoch_plan(wildcards):
    """Params function: what the epoch's job does, per species it covers (H2O first): the spectra, bands and
    sub-cube files it reads, the files it writes, and the epoch's H2O stack inputs whose measured water production
    rate excites the lines under non-LTE (excitation.q_h2o_from: measured; for the injection's model comae only
    under excitation.model nonlte, since under lte its numbers do not depend on the water), or None."""
    excitation = config.get("excitation") or {}
    species = _epoch_species(wildcards.epoch)
    water = (f"{OUT}/stack_epoch/{wildcards.epoch}/H2O.fits"
             if "H2O" in species and excitation.get("q_h2o_from", "measured") == "measured" else None)
    nonlte = excitation.get("model", "lte") == "nonlte"
    plan = []
    for name in species:
        w = SimpleNamespace(species=name, epoch=wildcards.epoch)
        plan.append({"species": name, "spectra": spectra_of_species(w), "bands": band_files_of_species(w),
                     "subcubes": subcubes_of_species(w),
                     "stack": f"{OUT}/stack_epoch/{wildcards.epoch}/{name}.fits",
                     "injection": f"{OUT}/injection_epoch/{wildcards.epoch}/{name}.ecsv",
                     "water": water if name != "H2O" else None,
                     "water_injection": water if name != "H2O" and nonlte else None})
    return plan


def epoch_inputs(wildcards):
    """Input function: every file or folder the epoch's job reads (the spectra and sub-cube folders of its
    millimetre cubes, the bands files and cube files of its infrared cubes, for the species it covers)."""
    files = []
    for name in _epoch_species(wildcards.epoch):
        w = SimpleNamespace(species=name, epoch=wildcards.epoch)
        files += (spectra_folders_of_species(w) + subcube_folders_of_species(w) + band_files_of_species(w)
                  + ir_cubes_of_species(w))
    return list(dict.fromkeys(files))


def geometry_files():
    return [f"{OUT}/geometry/{cid}.ecsv" for cid in CUBES]


def spectra_folders():
    """Every millimetre cube's folder of aperture spectra (``spectra/<cube>``)."""
    return [f"{OUT}/spectra/{cid}" for cid in CUBES if not IR_CUBES[cid]]


def spectra_files():
    """Every line's aperture spectra file (``spectra/<cube>/<line>.fits``), in the campaign's order."""
    return [f"{OUT}/spectra/{cid}/{line}.fits" for cid in CUBES for line in LINES[cid]]


def stack_files():
    return [f"{OUT}/stack/{s}.fits" for s in SPECIES]


def injection_files():
    return [f"{OUT}/injection/{s}.ecsv" for s in SPECIES]


def final_outputs():
    return [f"{OUT}/limits.ecsv", f"{OUT}/budget.ecsv", f"{OUT}/budget.json", f"{OUT}/report.html"]
