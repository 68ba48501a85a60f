"""Safety: configs are data, never code; outputs stay below the outdir; inputs are only read.

* YAML is safe-loaded: a ``!!python/object/apply`` tag is refused, by gasledger's own loader and by the
  ``snakemake --configfile`` path, and the object is never built.
* No config or header value is ever evaluated: the package, the rule scripts and the rule files hold no call
  of eval/exec/compile/__import__, no unsafe YAML or pickle loading, no shell; the rules run scripts only.
* Outputs are never written outside the outdir: ids and names with path characters are refused, every rule's
  output, log and benchmark lies below the outdir, and a run creates files only there.
* Inputs are opened read-only: after the stages ran on a cube and an ephemeris, their bytes and modification
  times are unchanged, and no open of them asked for writing.
"""

import ast
import builtins
import hashlib
import io
import mmap
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from pipeline.settings import _load_catalogue
import yaml
from astropy.table import QTable
from bad_builders import CUBE_ID, run_workflow, tiny_campaign

from pipeline.catalogue.entries import DEFAULT_LINES_FILE, DEFAULT_SPECIES_FILE, load_catalogue
from pipeline.settings import load_config, validate_config
from pipeline.errors import CatalogueError, ConfigError

REPO = Path(__file__).resolve().parents[2]


def _snakemake(workdir: Path, configfile: Path, *extra: str) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
           "--configfile", str(configfile), "--cores", "1", *extra]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=300)


# --------------------------------------------------------------------------------------------------------------- #
# YAML is safe-loaded


def _evil_yaml(marker: Path) -> str:
    # the tag would create the folder ``marker`` if PyYAML ever constructed it (PyYAML documentation: only the
    # unsafe loader builds python/object/apply; safe_load knows standard YAML tags only)
    return (f"campaign: !!python/object/apply:os.mkdir [{str(marker)!r}]\n"
            "target: {ephemeris: eph.ecsv}\ncubes: [{path: a.fits}]\nspecies: [HCN]\n")


def test_python_object_tag_refused_by_load_config(tmp_path):
    marker = tmp_path / "constructed"
    path = tmp_path / "evil.yaml"
    path.write_text(_evil_yaml(marker))
    with pytest.raises(ConfigError, match=r"evil\.yaml' is not valid YAML: could not determine a constructor "
                                          r"for the tag 'tag:yaml\.org,2002:python/object/apply:os\.mkdir'"):
        load_config(path)
    assert not marker.exists()


@pytest.mark.workflow
def test_python_object_tag_refused_by_snakemake_configfile(tmp_path):
    marker = tmp_path / "constructed"
    path = tmp_path / "evil.yaml"
    path.write_text(_evil_yaml(marker))
    run = _snakemake(tmp_path, path, "--dry-run")
    assert run.returncode != 0
    assert "not valid JSON or YAML" in run.stdout + run.stderr, (run.stdout + run.stderr)[-2000:]
    assert not marker.exists()


@pytest.mark.workflow
@pytest.mark.xfail(strict=True, raises=AssertionError,
                   reason="Snakemake (9.x) reads --configfile through YTE, which evaluates the file's ?-expressions "
                          "when it opts in with '__use_yte__: true'; this happens before the Snakefile runs, so "
                          "gasledger cannot refuse it: only run config files you trust")
def test_yte_templates_in_a_configfile_are_not_evaluated(tmp_path):
    marker = tmp_path / "evaluated"
    path = tmp_path / "template.yaml"
    path.write_text("__use_yte__: true\n"
                    f"campaign: ?__import__('pathlib').Path({str(marker)!r}).mkdir() or 'x'\n"
                    "target: {ephemeris: eph.ecsv}\ncubes: [{path: a.fits}]\nspecies: [HCN]\n")
    _snakemake(tmp_path, path, "--dry-run")
    assert not marker.exists()


# --------------------------------------------------------------------------------------------------------------- #
# nothing is evaluated

_FORBIDDEN_NAMES = {"eval", "exec", "compile", "__import__", "execfile"}
_FORBIDDEN_ATTRS = {("yaml", "load"), ("yaml", "unsafe_load"), ("yaml", "full_load"), ("yaml", "load_all"),
                    ("yaml", "unsafe_load_all"), ("pickle", "load"), ("pickle", "loads"), ("marshal", "loads"),
                    ("os", "system"), ("os", "popen"), ("importlib", "import_module"), ("subprocess", "getoutput"),
                    ("subprocess", "getstatusoutput")}


def _python_files() -> list[Path]:
    files = sorted((REPO / "pipeline").rglob("*.py")) + sorted((REPO / "rules" / "scripts").glob("*.py"))
    files += sorted((REPO / "synthetic_cubes").glob("*.py"))
    assert len(files) > 40
    return files


_SAFE_LOADERS = ("SafeLoader", "CSafeLoader")     # PyYAML's loaders that build only plain Python objects


def _dangerous_calls(path: Path) -> list[str]:
    found = []
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if not isinstance(node, ast.Call):
            continue
        f = node.func
        if isinstance(f, ast.Name) and f.id in _FORBIDDEN_NAMES:
            found.append(f"{path.name}:{node.lineno} {f.id}()")
        safe_loader = any(k.arg == "Loader" and isinstance(k.value, ast.Attribute) and k.value.attr in _SAFE_LOADERS
                          for k in node.keywords)
        if (isinstance(f, ast.Attribute) and isinstance(f.value, ast.Name) and (f.value.id, f.attr) in _FORBIDDEN_ATTRS
                and not (f.attr == "load" and safe_loader)):
            found.append(f"{path.name}:{node.lineno} {f.value.id}.{f.attr}()")
        if any(k.arg == "shell" and not (isinstance(k.value, ast.Constant) and k.value.value is False)
               for k in node.keywords):
            found.append(f"{path.name}:{node.lineno} shell=")
    return found


def test_the_scanner_finds_what_it_looks_for(tmp_path):
    # the check below must be able to fail: a file with each kind of call is flagged
    probe = tmp_path / "probe.py"
    probe.write_text("import yaml, os, subprocess\neval('1')\nexec('x = 1')\nyaml.load(s)\nos.system('true')\n"
                     "subprocess.run('true', shell=True)\nyaml.safe_load(s)\nyaml.load(s, Loader=yaml.CSafeLoader)\n"
                     "yaml.load(s, Loader=yaml.FullLoader)\n")
    assert [c.split(" ", 1)[1] for c in _dangerous_calls(probe)] == ["eval()", "exec()", "yaml.load()",
                                                                     "os.system()", "shell=", "yaml.load()"]


def test_no_value_is_ever_evaluated():
    found = [call for path in _python_files() for call in _dangerous_calls(path)]
    assert found == []


def test_rule_files_run_scripts_only():
    texts = {p.name: p.read_text() for p in [REPO / "Snakefile", *sorted((REPO / "rules").glob("*.smk"))]}
    for name, text in texts.items():
        code = "\n".join(line.split("#", 1)[0] for line in text.splitlines())
        assert not re.search(r"\b(eval|exec|compile|__import__)\s*\(", code), name
        assert not re.search(r"\byaml\.(load|unsafe_load|full_load)\s*\(", code), name
        assert not re.search(r"^\s+(shell|run|wrapper|notebook|cwl):", code, re.MULTILINE), name
    scripts = re.findall(r'^\s+script:\s*\n\s+"([^"]+)"', "\n".join(texts.values()), re.MULTILINE)
    rules = re.findall(r"^rule (\w+):", "\n".join(texts.values()), re.MULTILINE)
    # every rule but 'all' runs one script of rules/scripts/
    assert len(scripts) == len(rules) - 1 >= 4 and all(s.startswith("scripts/") for s in scripts), (rules, scripts)


# --------------------------------------------------------------------------------------------------------------- #
# outputs stay below the outdir

BASE = {"target": {"ephemeris": "eph.ecsv"}, "species": ["HCN"]}


@pytest.mark.parametrize("cube_id", ["../x", "../../etc/x", "a/../../b", "/abs", "..", ".", ".hidden", "a/b",
                                     "a\\b", "-rf", "_x", "x y", "ä", ""])
def test_cube_ids_with_path_characters_are_refused(cube_id):
    with pytest.raises(ConfigError, match=r"cubes\[0\]\.id = .* is not valid"):
        validate_config({**BASE, "cubes": [{"path": "a.fits", "id": cube_id}]})


@pytest.mark.parametrize("path", ["../../evil name.fits", "data/.x.fits", "data/ä.fits", "data/-x.fits"])
def test_ids_from_file_names_with_path_characters_are_refused(path):
    with pytest.raises(ConfigError, match=r"cubes\[0\]: the id .* \(from the file name\) is not usable in file names"):
        validate_config({**BASE, "cubes": [{"path": path}]})


@pytest.mark.parametrize("cube_id", ["c1", "e1_hcn", "E2.co-b", "7"])
def test_plain_ids_are_accepted(cube_id):
    config = validate_config({**BASE, "cubes": [{"path": "a.fits", "id": cube_id}]})
    assert config["cubes"][0]["id"] == cube_id


def test_epoch_labels_with_path_characters_are_refused():
    with pytest.raises(ConfigError, match=r"cubes\[0\]\.epoch = '\.\./e1' is not valid: it is used in file names"):
        validate_config({**BASE, "cubes": [{"path": "a.fits", "epoch": "../e1"}]})


@pytest.mark.parametrize("column, bad", [("species", "../../HCN"), ("species", "a/b"), ("line_id", "../x")])
def test_catalogue_names_with_path_characters_are_refused(tmp_path, column, bad):
    # species names and line ids become file names (stack/<species>.fits, spectra/<cube>/<line>.fits)
    species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
    lines = QTable.read(DEFAULT_LINES_FILE, format="ascii.ecsv")
    table = species if column == "species" else lines
    table[column] = [bad if i == 0 else v for i, v in enumerate(table[column])]
    species.write(tmp_path / "s.ecsv", format="ascii.ecsv")
    lines.write(tmp_path / "l.ecsv", format="ascii.ecsv")
    with pytest.raises(CatalogueError, match=rf"{re.escape(repr(bad))} .*(not usable in file names|not made of)"):
        load_catalogue(tmp_path / "s.ecsv", tmp_path / "l.ecsv", None)


def test_a_run_creates_files_only_below_the_outdir(tmp_path):
    campaign = tiny_campaign(tmp_path / "campaign")
    outside = tmp_path / "campaign"
    before = {p for p in tmp_path.rglob("*") if p.is_file()}
    cwd_before = set(Path.cwd().iterdir())
    run_workflow(campaign.fresh_config())
    new = {p for p in tmp_path.rglob("*") if p.is_file()} - before
    assert new and all(campaign.outdir in p.parents for p in new), sorted(map(str, new))
    assert set(Path.cwd().iterdir()) == cwd_before
    assert outside.exists()


@pytest.mark.workflow
def test_every_rule_writes_below_the_outdir(tmp_path):
    campaign = tiny_campaign(tmp_path)
    configfile = tmp_path / "campaign.yaml"
    configfile.write_text(yaml.safe_dump(campaign.config))
    run = _snakemake(tmp_path, configfile, "--dry-run")
    assert run.returncode == 0, run.stderr[-2000:]
    paths = [p.strip() for m in re.finditer(r"^\s+(output|log|benchmark): (.+)$", run.stdout, re.MULTILINE)
             for p in m.group(2).split(",")]
    assert len(paths) >= 20
    outdir = campaign.outdir.resolve()
    assert all(outdir in Path(p).resolve().parents for p in paths), [p for p in paths if not p.startswith(str(outdir))]


# --------------------------------------------------------------------------------------------------------------- #
# inputs are only read


class _OpenSpy:
    """Record every file open (builtins.open, io.FileIO, os.open, mmap) with whether it could write."""

    def __init__(self, monkeypatch):
        self.calls: list[tuple[str, bool]] = []
        spy = self
        real_open, real_os_open = builtins.open, os.open

        def record(file, writes):
            if isinstance(file, (str, bytes, os.PathLike)):
                spy.calls.append((os.path.realpath(os.fsdecode(file)), writes))

        def open_(file, mode="r", *args, **kwargs):
            record(file, any(c in mode for c in "wax+"))
            return real_open(file, mode, *args, **kwargs)

        def os_open(path, flags, *args, **kwargs):
            record(path, bool(flags & (os.O_WRONLY | os.O_RDWR | os.O_APPEND | os.O_TRUNC | os.O_CREAT)))
            return real_os_open(path, flags, *args, **kwargs)

        class FileIO(io.FileIO):
            def __init__(self, file, mode="r", *args, **kwargs):
                record(file, any(c in mode for c in "wax+"))
                super().__init__(file, mode, *args, **kwargs)

        class Mmap(mmap.mmap):
            def __new__(cls, fileno, length, *args, **kwargs):
                access = kwargs.get("access", args[2] if len(args) > 2 else mmap.ACCESS_DEFAULT)
                try:
                    name = os.readlink(f"/proc/self/fd/{fileno}")
                except OSError:
                    name = f"fd {fileno}"
                spy.calls.append((name, access not in (mmap.ACCESS_READ, mmap.ACCESS_COPY)))
                return super().__new__(cls, fileno, length, *args, **kwargs)

        monkeypatch.setattr(builtins, "open", open_)
        monkeypatch.setattr(io, "open", open_)
        monkeypatch.setattr(os, "open", os_open)
        monkeypatch.setattr(io, "FileIO", FileIO)
        monkeypatch.setattr(mmap, "mmap", Mmap)

    def opens_of(self, path: Path) -> list[bool]:
        real = os.path.realpath(path)
        return [writes for name, writes in self.calls if name == real]


def _state(path: Path) -> tuple[str, int]:
    return hashlib.sha256(path.read_bytes()).hexdigest(), path.stat().st_mtime_ns


def test_the_spy_sees_a_write(tmp_path, monkeypatch):
    # the check below must be able to fail: opening a file for update is recorded as a write
    from astropy.io import fits
    path = tmp_path / "x.fits"
    fits.PrimaryHDU().writeto(path)
    spy = _OpenSpy(monkeypatch)
    with fits.open(path, mode="update"):
        pass
    assert True in spy.opens_of(path)


def test_inputs_are_opened_read_only_and_left_unchanged(tmp_path, monkeypatch):
    campaign = tiny_campaign(tmp_path)
    inputs = [campaign.cube, campaign.ephemeris, Path(DEFAULT_SPECIES_FILE), Path(DEFAULT_LINES_FILE)]
    before = {p: _state(p) for p in inputs}
    _load_catalogue.cache_clear()                 # the catalogue is loaded once per process: make this run read it
    spy = _OpenSpy(monkeypatch)
    out = run_workflow(campaign.fresh_config())
    monkeypatch.undo()
    assert (out / "limits" / "HCN.ecsv").exists() and (out / "geometry" / f"{CUBE_ID}.ecsv").exists()
    for path in inputs:
        assert _state(path) == before[path], path                 # same bytes, same modification time
        opens = spy.opens_of(path)
        assert opens, f"{path} was never seen opened (the spy missed it)"
        assert not any(opens), f"{path} was opened for writing"
