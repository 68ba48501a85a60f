"""Benchmark: the workflow's total CPU against the same computation done in one process (its floor).

The floor is what a single hand-written script would reach: every job of the campaign's job graph, in topological
order, run by calling its rule script in one Python process (each script reads a ``snakemake`` object carrying the
job's real input, output, params, wildcards, log, threads and resources). The workflow is the same campaign through
``gasledger run --cores 1`` (python -m pipeline.cli): its CPU is the children's rusage around it, so it includes
the runner, Snakemake's own process and every job's interpreter. This prints, measured in the same run:

- jobs run, the one-process loop's CPU and wall (imports happen once, on first use, and count), the workflow's CPU
  and wall, and the ratio workflow CPU / one-process CPU (the target for the demo is at most 1.3);
- where the gap lies: Snakemake's own process (and the runner) against the jobs' extra cost (the per-job fixed
  cost: interpreter start, imports, settings and catalogue read again, teardown), both from the jobs' benchmark
  files (their ``cpu_time``, which Snakemake samples with psutil, once a second at best, so it misses a job's last
  moments and more on a busy machine) and from every Python process's own rusage recorded at its exit (a
  ``sitecustomize`` hook put first on the workflow's PYTHONPATH; what a job spends after that hook, its
  interpreter's teardown, is the workflow's CPU minus everything recorded, and is shown apart);
- a table per rule: jobs, one-process CPU, workflow CPU (benchmark files, and the jobs' own rusage at exit), extra
  per job;
- whether the two runs agree: limits.ecsv and budget.ecsv compared value by value (table metadata ignored, each
  run's output folder written the same in text cells), "identical" or the differences.

The job graph comes from Snakemake's Python API (snakemake 9) in a child process: it is the only way to get each
job's params as Snakemake evaluates them (the settings JSON every step parses), which no dry-run listing prints.
The one-process loop runs in a second, fresh child so that no module imported before it hides its import cost.

    .venv/bin/python benchmarks/one_process.py [--config config/config.yaml] [--directory DIR] [--small N]
        [--skip-workflow] [--keep DIR]

The demo (config/config.yaml, cubes from 'make demo') takes about 1 + 7 minutes on a 2-core machine. Both runs
use the code of the tree this file is in (its folder is put first on the children's PYTHONPATH): run a copy of a
commit (git archive) to measure it while the working tree changes. From another script: ``measure_floor(config,
folder)`` returns the numbers (``.ratio``), ``print_floor(result)`` prints them.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import warnings
from collections import defaultdict
from dataclasses import asdict, dataclass, field
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
MAIN_TABLES = ("limits.ecsv", "budget.ecsv")
CPU_LOG_VARIABLE = "GASLEDGER_BENCH_CPU_LOG"

# Written to <root>/hook/sitecustomize.py and put first on the workflow's PYTHONPATH: every Python process of the
# workflow (runner, Snakemake, each job) records its own CPU (user + system) and argv when it exits.
SITECUSTOMIZE = f'''"""Written by benchmarks/one_process.py: record this process's CPU and argv at exit."""
import atexit
import os


def _record_cpu():
    import json
    import resource
    import sys

    folder = os.environ.get("{CPU_LOG_VARIABLE}")
    if not folder:
        return
    usage = resource.getrusage(resource.RUSAGE_SELF)
    record = {{"pid": os.getpid(), "argv": list(sys.argv), "cpu": usage.ru_utime + usage.ru_stime}}
    with open(os.path.join(folder, f"{{os.getpid()}}.json"), "w", encoding="utf-8") as fh:
        json.dump(record, fh)


atexit.register(_record_cpu)
'''


# ------------------------------------------------------------------------------------------------------------------
# The campaign copy


def _absolute(path: str | None, base: Path) -> str | None:
    if path is None:
        return None
    p = Path(path).expanduser()
    return str(p if p.is_absolute() else (base / p).resolve())


def campaign_copy(config_path: str | Path, outdir: Path, target: Path, directory: str | Path | None = None) -> Path:
    """The campaign ``config_path`` written to ``target`` with every input path made absolute (relative ones are read
    from ``directory``, default the current folder, as ``gasledger run`` does) and ``outdir`` as its output folder."""
    import yaml

    base = Path(directory if directory is not None else Path.cwd()).resolve()
    config = yaml.safe_load(Path(config_path).read_text(encoding="utf-8"))
    config["outdir"] = str(outdir)
    target_section = config.get("target") or {}
    if target_section.get("ephemeris") is not None:
        target_section["ephemeris"] = _absolute(target_section["ephemeris"], base)
    if isinstance(config.get("observatory"), dict) and config["observatory"].get("states") is not None:
        config["observatory"]["states"] = _absolute(config["observatory"]["states"], base)
    for cube in config.get("cubes", []):
        cube["path"] = _absolute(cube["path"], base)
        if cube.get("ephemeris") is not None:
            cube["ephemeris"] = _absolute(cube["ephemeris"], base)
        if isinstance(cube.get("observatory"), dict) and cube["observatory"].get("states") is not None:
            cube["observatory"]["states"] = _absolute(cube["observatory"]["states"], base)
    catalogue = config.get("catalogue") or {}
    for key in ("species_file", "lines_file", "bands_file"):
        if catalogue.get(key) is not None:
            catalogue[key] = _absolute(catalogue[key], base)
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_text(yaml.safe_dump(config, sort_keys=False), encoding="utf-8")
    return target


def small_campaign(n_epochs: int, folder: Path) -> Path:
    """The small invented scenario of benchmarks/campaign.py with ``n_epochs`` epochs, written below ``folder``."""
    if str(REPO) not in sys.path:
        sys.path.insert(0, str(REPO))
    from benchmarks.campaign import scenario_of
    from pipeline.offline import future_time_tolerated
    from synthetic_cubes import write_scenario

    with future_time_tolerated(), warnings.catch_warnings():  # the invented epochs lie beyond the leap-second table
        warnings.filterwarnings("ignore", message=".*dubious year")
        return write_scenario(scenario_of(n_epochs), folder, results=str(folder / "results"), progress=lambda _: None)


# ------------------------------------------------------------------------------------------------------------------
# The job graph (child process 1)


def _named(items) -> dict:
    """A Snakemake Namedlist as plain JSON: its items and the (start, end) of each name."""
    values = []
    for v in items:
        values.append(v if isinstance(v, (int, float, bool, list, dict)) or v is None else str(v))
    return {"items": values, "names": {k: list(v) for k, v in items._names.items()}}


def _params(params) -> dict:
    out = _named(params)
    for i, v in enumerate(params):
        try:
            json.dumps(v)
            out["items"][i] = v
        except TypeError:
            msg = f"a param of type {type(v).__name__} cannot be handed to the one-process run: {v!r}"
            raise TypeError(msg) from None
    return out


def dump_jobs(config: Path, workdir: Path, out: Path, cores: int = 1) -> None:
    """Build the job graph of the project's Snakefile for ``config`` (every job, as with --forceall) with Snakemake's
    Python API and write each job, in topological order, as JSON to ``out``.

    Snakemake's API returns no job list; this does what its own ``printdag`` does (prepare the DAG, build it) and
    reads the jobs' evaluated fields.
    """
    from snakemake.api import SnakemakeApi
    from snakemake.settings.types import ConfigSettings, DAGSettings, OutputSettings, Quietness, ResourceSettings

    t0 = time.perf_counter()
    with SnakemakeApi(OutputSettings(quiet={Quietness.ALL})) as api:
        workflow_api = api.workflow(resource_settings=ResourceSettings(cores=cores),
                                    config_settings=ConfigSettings(configfiles=[config]),
                                    snakefile=REPO / "Snakefile", workdir=workdir)
        workflow_api.dag(DAGSettings(targets={"all"}, forceall=True))
        workflow = workflow_api._workflow
        workflow._prepare_dag(forceall=True, ignore_incomplete=True, lock_warn_only=True)
        workflow._build_dag()
        jobs = []
        for level in workflow.dag.toposorted():
            for job in sorted(level, key=lambda j: (j.rule.name, sorted(j.wildcards_dict.items()))):
                rule = job.rule
                script = None
                if rule.script is not None:
                    script = str(Path(rule.basedir.get_path_or_uri(secret_free=True)) / rule.script)
                elif not rule.norun:
                    msg = f"rule {rule.name} is not a script rule; the one-process run calls rule scripts only"
                    raise ValueError(msg)
                jobs.append({
                    "rule": rule.name, "script": script, "wildcards": _named(job.wildcards),
                    "input": _named(job.input), "output": _named(job.output), "log": _named(job.log),
                    "params": _params(job.params), "threads": job.threads,
                    "resources": _named(job.resources),
                    "benchmark": None if job.benchmark is None else str(job.benchmark),
                })
    cpu = resource.getrusage(resource.RUSAGE_SELF)
    out.write_text(json.dumps({"jobs": jobs, "seconds": time.perf_counter() - t0,
                               "cpu": cpu.ru_utime + cpu.ru_stime}), encoding="utf-8")


# ------------------------------------------------------------------------------------------------------------------
# The one-process loop (child process 2)


class Namedlist(list):
    """A list whose named items are also attributes (a name covers one item or a slice), like Snakemake's."""

    def __init__(self, record: dict) -> None:
        super().__init__(record["items"])
        self._names = {k: tuple(v) for k, v in record["names"].items()}

    def _value(self, name: str):
        start, end = self._names[name]
        if end is None:
            return self[start]
        return list.__getitem__(self, slice(start, end))

    def __getattr__(self, name: str):
        if name.startswith("_") or name not in self._names:
            raise AttributeError(name)
        return self._value(name)

    def __getitem__(self, key):
        if isinstance(key, str):
            return self._value(key)
        return super().__getitem__(key)

    def get(self, key: str, default=None):
        return self._value(key) if key in self._names else default

    def keys(self):
        return self._names.keys()

    def items(self):
        return ((k, self._value(k)) for k in self._names)


class FakeSnakemake:
    """The ``snakemake`` object a rule script reads, built from one job's record."""

    def __init__(self, job: dict, config: dict | None = None) -> None:
        self.rule = job["rule"]
        self.input = Namedlist(job["input"])
        self.output = Namedlist(job["output"])
        self.params = Namedlist(job["params"])
        self.wildcards = Namedlist(job["wildcards"])
        self.log = Namedlist(job["log"])
        self.resources = Namedlist(job["resources"])
        self.threads = job["threads"]
        self.config = config or {}
        self.bench_iteration = None
        self.scriptdir = str(Path(job["script"]).parent)


#: Stage functions whose CPU the one-process loop adds up, by what they are (inside the jobs that call them).
TIMED_STEPS = {"injection": (("pipeline.workflow.injection", "run_epoch"), ("pipeline.workflow.injection", "run"))}


def _time_steps() -> dict[str, float]:
    """Wrap the :data:`TIMED_STEPS` functions (in their modules, which the stages call them through) so that each
    call adds its CPU (this process's rusage) to the returned mapping."""
    import functools
    import importlib

    totals = dict.fromkeys(TIMED_STEPS, 0.0)

    def cpu() -> float:
        usage = resource.getrusage(resource.RUSAGE_SELF)
        return usage.ru_utime + usage.ru_stime

    for what, functions in TIMED_STEPS.items():
        for module_name, name in functions:
            module = importlib.import_module(module_name)
            original = getattr(module, name)

            @functools.wraps(original)
            def timed(*args, _original=original, _what=what, **kwargs):
                start = cpu()
                try:
                    return _original(*args, **kwargs)
                finally:
                    totals[_what] += cpu() - start

            setattr(module, name, timed)
    return totals


def run_jobs(jobs_file: Path, workdir: Path, out: Path) -> int:
    """Run every script job of ``jobs_file`` in this process, in order, in ``workdir``; write each job's CPU and wall
    and the loop's totals to ``out``. Returns 1 (after writing what ran) when a job fails."""
    import logging
    import runpy

    jobs = [j for j in json.loads(jobs_file.read_text(encoding="utf-8"))["jobs"] if j["script"] is not None]
    steps = _time_steps()
    here = Path.cwd()
    os.chdir(workdir)
    records, failed = [], None
    usage0, wall0 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
    try:
        for job in jobs:
            for name in ("output", "log"):
                for path in job[name]["items"]:
                    Path(path).parent.mkdir(parents=True, exist_ok=True)
            u0, w0 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
            try:
                runpy.run_path(job["script"], init_globals={"snakemake": FakeSnakemake(job)}, run_name="__main__")
            except SystemExit as exc:
                if exc.code not in (None, 0):
                    failed = job
            finally:
                root = logging.getLogger()          # each script opens its own log file: close it
                for handler in list(root.handlers):
                    root.removeHandler(handler)
                    handler.close()
            u1, w1 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
            records.append({"rule": job["rule"], "wildcards": job["wildcards"]["items"],
                            "cpu": (u1.ru_utime + u1.ru_stime) - (u0.ru_utime + u0.ru_stime), "wall": w1 - w0})
            if failed is not None:
                break
    finally:
        usage1, wall1 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
        os.chdir(here)
        out.write_text(json.dumps({
            "jobs": records, "wall": wall1 - wall0, "steps": steps,
            "cpu": (usage1.ru_utime + usage1.ru_stime) - (usage0.ru_utime + usage0.ru_stime),
            "failed": None if failed is None else {"rule": failed["rule"], "log": failed["log"]["items"]},
        }), encoding="utf-8")
    return 1 if failed is not None else 0


# ------------------------------------------------------------------------------------------------------------------
# The workflow run and its accounting


def benchmark_cpu(outdir: Path, rule_of: dict[str, str]) -> dict[str, list[float]]:
    """Per rule, the ``cpu_time`` of each job's Snakemake benchmark file below ``outdir/benchmarks``; ``rule_of``
    gives a file's rule from its path below ``outdir`` (else its first folder or its stem is taken as the rule)."""
    import csv

    per_rule: dict[str, list[float]] = defaultdict(list)
    for path in sorted((outdir / "benchmarks").rglob("*.tsv")):
        rel = path.relative_to(outdir)
        with path.open(encoding="utf-8") as fh:
            rec = list(csv.DictReader(fh, delimiter="\t"))[-1]
        value = rec.get("cpu_time", "NA")
        rule = rule_of.get(str(rel), rel.parts[1].removesuffix(".tsv"))
        per_rule[rule].append(float(value) if value not in ("NA", "") else 0.0)
    return dict(per_rule)


def process_cpu(folder: Path, script_rules: dict[str, str]) -> dict[str, list[float]]:
    """Per rule, each job process's own CPU recorded at its exit by the sitecustomize hook; Snakemake's process
    under '(snakemake)', the runner under '(runner)', any other Python process under '(other)'."""
    per: dict[str, list[float]] = defaultdict(list)
    for path in sorted(folder.glob("*.json")):
        rec = json.loads(path.read_text(encoding="utf-8"))
        first = Path(rec["argv"][0]).name if rec["argv"] else ""
        joined = " ".join(rec["argv"])
        rule = next((r for name, r in script_rules.items() if first.endswith("." + name) or first == name), None)
        if rule is None:
            if "snakemake" in joined and first in ("__main__.py", "snakemake", "-m"):
                rule = "(snakemake)"
            elif "pipeline" in joined or first in ("cli.py", "gasledger"):
                rule = "(runner)"
            else:
                rule = "(other)"
        per[rule].append(rec["cpu"])
    return dict(per)


def run_through_workflow(config: Path, workdir: Path, cpu_log: Path, log: Path,
                         cores: int = 1) -> tuple[float, float, int]:
    """CPU (children's rusage) and wall of ``gasledger run`` on ``config``, and its exit status."""
    hook = cpu_log.parent / "hook"
    hook.mkdir(parents=True, exist_ok=True)
    (hook / "sitecustomize.py").write_text(SITECUSTOMIZE, encoding="utf-8")
    cpu_log.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(hook), str(REPO), env.get("PYTHONPATH")) if p)
    env[CPU_LOG_VARIABLE] = str(cpu_log)
    before, t0 = resource.getrusage(resource.RUSAGE_CHILDREN), time.perf_counter()
    with log.open("w", encoding="utf-8") as fh:
        run = subprocess.run([sys.executable, "-m", "pipeline.cli", "run", str(config), "--cores", str(cores),
                              "--directory", str(workdir)], cwd=workdir, env=env, stdout=fh, stderr=subprocess.STDOUT)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    return cpu, wall, run.returncode


# ------------------------------------------------------------------------------------------------------------------
# The comparison


def compare_tables(a: Path, b: Path, names=MAIN_TABLES) -> list[str]:
    """Differences between the tables ``names`` of output folders ``a`` and ``b``, value by value (table metadata
    ignored; in text cells each folder's own path is written the same). Empty when they agree."""
    import numpy as np
    from astropy.table import Table

    def cells(column, folder: Path):
        if hasattr(column, "jd1"):                       # a Time column: its two-part Julian dates, exactly
            data = np.stack([np.asarray(column.jd1), np.asarray(column.jd2)], axis=-1)
            mask = np.broadcast_to(np.asarray(getattr(column, "mask", False))[..., None], data.shape)
            return data, mask
        values = getattr(column, "value", column)          # a Quantity column: its numbers (units compared apart)
        data, mask = np.ma.getdata(values), np.ma.getmaskarray(values)
        if data.dtype.kind in "US":
            data = np.array([str(v).replace(str(folder), "<outdir>") for v in data.ravel()]).reshape(data.shape)
        elif data.dtype.kind == "O":
            data = np.array([json.dumps(v, default=str).replace(str(folder), "<outdir>") for v in data.ravel()])
        return data, mask

    diffs = []
    for name in names:
        pa, pb = a / name, b / name
        if not (pa.is_file() and pb.is_file()):
            diffs.append(f"{name}: missing in {'one-process' if not pa.is_file() else 'workflow'} output")
            continue
        with warnings.catch_warnings():                 # invented epochs beyond the leap-second table
            warnings.filterwarnings("ignore", message=".*dubious year")
            ta, tb = Table.read(pa, format="ascii.ecsv"), Table.read(pb, format="ascii.ecsv")
        if ta.colnames != tb.colnames:
            diffs.append(f"{name}: columns differ: {sorted(set(ta.colnames) ^ set(tb.colnames))}")
        if len(ta) != len(tb):
            diffs.append(f"{name}: {len(ta)} rows against {len(tb)}")
            continue
        for col in (c for c in ta.colnames if c in tb.colnames):
            (da, ma), (db, mb) = cells(ta[col], a), cells(tb[col], b)
            if da.shape != db.shape or not np.array_equal(ma, mb):
                diffs.append(f"{name}: column {col}: shape or masked cells differ")
                continue
            if str(getattr(ta[col], "unit", None)) != str(getattr(tb[col], "unit", None)):
                diffs.append(f"{name}: column {col}: unit {ta[col].unit} against {tb[col].unit}")
            if da.dtype.kind in "fc":
                same = np.isclose(da, db, rtol=0, atol=0, equal_nan=True) | ma
                if not same.all():
                    valid = ~same
                    rel = np.abs(da[valid] - db[valid]) / np.maximum(np.abs(db[valid]), np.finfo(float).tiny)
                    diffs.append(f"{name}: column {col}: {int(valid.sum())} of {da.size} values differ "
                                 f"(largest relative difference {np.nanmax(rel):.3g})")
            else:
                same = (da == db) | ma
                if not np.all(same):
                    diffs.append(f"{name}: column {col}: {int(np.size(same) - np.count_nonzero(same))} of "
                                 f"{da.size} values differ")
    return diffs


# ------------------------------------------------------------------------------------------------------------------
# The measurement


@dataclass
class FloorResult:
    """What :func:`measure_floor` measured (CPU and wall in seconds)."""

    jobs: int
    graph_cpu: float
    graph_wall: float
    one_cpu: float
    one_wall: float
    one_per_rule: dict[str, list[float]]
    steps: dict[str, float] = field(default_factory=dict)
    cores: int = 1
    workflow_cpu: float | None = None
    workflow_wall: float | None = None
    tsv_per_rule: dict[str, list[float]] = field(default_factory=dict)
    process_per_rule: dict[str, list[float]] = field(default_factory=dict)
    differences: list[str] | None = None

    @property
    def ratio(self) -> float | None:
        """Workflow CPU / one-process CPU."""
        return None if self.workflow_cpu is None else self.workflow_cpu / self.one_cpu


def _child(args: list[str], what: str) -> None:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    run = subprocess.run([sys.executable, str(Path(__file__).resolve()), *args], env=env, capture_output=True,
                         text=True)
    if run.returncode != 0:
        tail = "\n".join((run.stdout + run.stderr).strip().splitlines()[-25:])
        msg = f"{what} failed (exit status {run.returncode}):\n{tail}"
        raise RuntimeError(msg)


def measure_floor(config: str | Path, root: str | Path, directory: str | Path | None = None,
                  skip_workflow: bool = False, cores: int = 1) -> FloorResult:
    """Run the campaign ``config`` in one process and (unless ``skip_workflow``) through the workflow, each into
    its own fresh folder below ``root``, and return the measurements.

    Relative input paths of the campaign are read from ``directory`` (default: the current folder).
    """
    root = Path(root).resolve()
    one_dir, wf_dir = root / "one_process", root / "workflow"
    for d in (one_dir, wf_dir):
        if d.exists():
            shutil.rmtree(d)
        d.mkdir(parents=True)
    one_config = campaign_copy(config, one_dir / "results", one_dir / "campaign.yaml", directory)

    jobs_file, loop_file = root / "jobs.json", root / "one_process.json"
    _child(["--dump-jobs", str(jobs_file), "--config", str(one_config), "--workdir", str(one_dir),
            "--cores", str(cores)],
           "building the job graph")
    graph = json.loads(jobs_file.read_text(encoding="utf-8"))
    try:
        _child(["--run-jobs", str(jobs_file), "--workdir", str(one_dir), "--out", str(loop_file)],
               "the one-process run")
    except RuntimeError:
        if loop_file.is_file() and (failed := json.loads(loop_file.read_text())["failed"]):
            raise RuntimeError(f"the one-process run failed in rule {failed['rule']}; log: {failed['log']}") from None
        raise
    loop = json.loads(loop_file.read_text(encoding="utf-8"))
    one_per_rule: dict[str, list[float]] = defaultdict(list)
    for rec in loop["jobs"]:
        one_per_rule[rec["rule"]].append(rec["cpu"])
    result = FloorResult(jobs=len(loop["jobs"]), graph_cpu=graph["cpu"], graph_wall=graph["seconds"],
                         one_cpu=loop["cpu"], one_wall=loop["wall"], one_per_rule=dict(one_per_rule), cores=cores,
                         steps=loop.get("steps", {}))
    if skip_workflow:
        return result

    wf_config = campaign_copy(config, wf_dir / "results", wf_dir / "campaign.yaml", directory)
    cpu, wall, code = run_through_workflow(wf_config, wf_dir, root / "cpu_log", root / "workflow.log", cores)
    if code != 0:
        tail = "\n".join((root / "workflow.log").read_text().strip().splitlines()[-25:])
        raise RuntimeError(f"the workflow run failed (exit status {code}):\n{tail}")
    script_rules = {Path(j["script"]).name: j["rule"] for j in graph["jobs"] if j["script"] is not None}
    result.workflow_cpu, result.workflow_wall = cpu, wall
    one_results = one_dir / "results"
    rule_of = {str(Path(j["benchmark"]).relative_to(one_results)): j["rule"] for j in graph["jobs"]
               if j["benchmark"] is not None and Path(j["benchmark"]).is_relative_to(one_results)}
    result.tsv_per_rule = benchmark_cpu(wf_dir / "results", rule_of)
    result.process_per_rule = process_cpu(root / "cpu_log", script_rules)
    result.differences = compare_tables(one_dir / "results", wf_dir / "results")
    (root / "result.json").write_text(json.dumps(asdict(result), indent=1), encoding="utf-8")
    return result


def print_floor(r: FloorResult, out=None) -> None:
    """Print the measurements of :func:`measure_floor`."""
    out = out if out is not None else sys.stdout

    def say(text: str = "") -> None:
        print(text, file=out, flush=True)

    say(f"job graph (Snakemake's API, not counted below): {r.graph_cpu:.1f} s CPU, {r.graph_wall:.1f} s wall")
    say(f"jobs run: {r.jobs} in {len(r.one_per_rule)} rules")
    say(f"one process:  CPU {r.one_cpu:8.1f} s   wall {r.one_wall:8.1f} s")
    for what, seconds in r.steps.items():
        of_workflow = (f", {100 * seconds / r.workflow_cpu:.1f} % of the workflow's CPU"
                       if r.workflow_cpu else "")
        say(f"  {what} steps (inside their jobs): {seconds:.1f} s CPU = {100 * seconds / r.one_cpu:.1f} % of the "
            f"one-process CPU{of_workflow}")
    if r.workflow_cpu is None:
        return
    say(f"workflow:     CPU {r.workflow_cpu:8.1f} s   wall {r.workflow_wall:8.1f} s  (gasledger run --cores {r.cores}, "
        f"children's rusage)")
    say(f"ratio workflow CPU / one-process CPU: {r.ratio:.2f}  (target <= 1.3)")

    gap = r.workflow_cpu - r.one_cpu
    tsv_jobs = sum(sum(v) for v in r.tsv_per_rule.values())
    proc_jobs = sum(sum(v) for k, v in r.process_per_rule.items() if not k.startswith("("))
    own = {k: sum(v) for k, v in r.process_per_rule.items() if k.startswith("(")}
    n_jobs = sum(len(v) for v in r.tsv_per_rule.values()) or r.jobs

    def share(x: float) -> str:
        return f"{x:7.1f} s ({100 * x / gap:5.1f} % of the gap)" if gap > 0 else f"{x:7.1f} s"

    say(f"gap (workflow - one process): {gap:.1f} s")
    say("  from the jobs' benchmark files (cpu_time, sampled at most once a second: misses each job's last moments):")
    say(f"    outside the jobs (Snakemake's process, runner, sampling misses): {share(r.workflow_cpu - tsv_jobs)}")
    say(f"    inside the jobs (per-job fixed cost):                             {share(tsv_jobs - r.one_cpu)}  "
        f"= {(tsv_jobs - r.one_cpu) / n_jobs:.2f} s per job")
    if r.process_per_rule:
        jobs_all = r.workflow_cpu - sum(own.values())
        say("  from every Python process's own rusage, recorded at its exit:")
        say(f"    Snakemake's own process:                                          "
            f"{share(own.get('(snakemake)', 0.0))}")
        say(f"    the runner (gasledger run) and any other Python process:          "
            f"{share(own.get('(runner)', 0.0) + own.get('(other)', 0.0))}")
        say(f"    inside the jobs (per-job fixed cost):                             {share(jobs_all - r.one_cpu)}  "
            f"= {(jobs_all - r.one_cpu) / n_jobs:.2f} s per job")
        say(f"      of which after the jobs' exit hook (interpreter teardown, shells): "
            f"{jobs_all - proc_jobs:.1f} s = {(jobs_all - proc_jobs) / n_jobs:.2f} s per job")

    say()
    head = f"{'rule':16s} {'jobs':>5s} {'one-process s':>13s} {'workflow s (tsv)':>16s}"
    if r.process_per_rule:
        head += f" {'workflow s (rusage at exit)':>27s} {'extra per job s':>15s}"
    say(head)
    rules = sorted(set(r.one_per_rule) | set(r.tsv_per_rule), key=lambda k: -sum(r.one_per_rule.get(k, [0.0])))
    for rule in rules:
        one = r.one_per_rule.get(rule, [])
        line = f"{rule:16s} {len(one):5d} {sum(one):13.1f} {sum(r.tsv_per_rule.get(rule, [])):16.1f}"
        if r.process_per_rule:
            proc = r.process_per_rule.get(rule, [])
            extra = (sum(proc) - sum(one)) / len(one) if one else float("nan")
            line += f" {sum(proc):27.1f} {extra:15.2f}"
        say(line)
    total = f"{'total':16s} {r.jobs:5d} {sum(sum(v) for v in r.one_per_rule.values()):13.1f} {tsv_jobs:16.1f}"
    if r.process_per_rule:
        total += f" {proc_jobs:27.1f} {(proc_jobs - r.one_cpu) / r.jobs:15.2f}"
    say(total)
    for name in sorted(own):
        say(f"{name:16s} {len(r.process_per_rule[name]):5d} {'':13s} {'':16s} {own[name]:27.1f}")

    say()
    if r.differences:
        say(f"{', '.join(MAIN_TABLES)}: the two runs differ:")
        for d in r.differences:
            say(f"  {d}")
    else:
        say(f"{', '.join(MAIN_TABLES)}: identical")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--config", default=str(REPO / "config" / "config.yaml"),
                        help="the campaign (default: the demo's; run 'make demo' first)")
    parser.add_argument("--directory", help="folder the campaign's relative paths are read from (default: the "
                                            "current one)")
    parser.add_argument("--small", type=int, metavar="N",
                        help="instead of --config: the small invented scenario of N epochs (benchmarks/campaign.py)")
    parser.add_argument("--skip-workflow", action="store_true", help="the one-process run only")
    parser.add_argument("--cores", type=int, default=1, help="cores of the workflow run (default 1: CPU against CPU)")
    parser.add_argument("--keep", help="keep both runs in this folder (default: a temporary folder, removed)")
    parser.add_argument("--dump-jobs", help=argparse.SUPPRESS)
    parser.add_argument("--run-jobs", help=argparse.SUPPRESS)
    parser.add_argument("--workdir", help=argparse.SUPPRESS)
    parser.add_argument("--out", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)

    if args.dump_jobs:                      # child process 1
        dump_jobs(Path(args.config), Path(args.workdir), Path(args.dump_jobs), args.cores)
        return 0
    if args.run_jobs:                       # child process 2
        return run_jobs(Path(args.run_jobs), Path(args.workdir), Path(args.out))

    root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="gasledger_floor_"))
    root.mkdir(parents=True, exist_ok=True)
    try:
        config = small_campaign(args.small, root / "small_data") if args.small else Path(args.config)
        print(f"campaign: {config}", flush=True)
        result = measure_floor(config, root, directory=args.directory, skip_workflow=args.skip_workflow,
                               cores=args.cores)
        print_floor(result)
        if result.differences:
            return 1
    finally:
        if not args.keep:
            shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
