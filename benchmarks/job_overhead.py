"""Benchmark: what a workflow job pays before it does any work, and what building the job graph costs.

Every Snakemake job starts a fresh interpreter that runs Snakemake's script preamble and imports its stage modules
(rules/scripts/<rule>.py import pipeline.workflow.<stage>; the cube jobs import their kind's stages inside their
run); on a cluster every job also re-parses the workflow. This prints, in one run, medians of:

- the bare interpreter start (``python -c pass``: the baseline) and each rule's job imports (the preamble's and its
  stages'), as seconds and as the cost beyond the baseline (the fixed cost per job; the target is at most 0.5 s);
- the slowest imports of the slowest job (``python -X importtime``), to show where that cost comes from;
- the graph builder's own work (config validation, settings, catalogue, cube spectral ranges) for a campaign of
  N cubes, with a cold and a warm cube index (pipeline.io.cube_index), against Snakemake's import alone.

    .venv/bin/python benchmarks/job_overhead.py [--repeat 3] [--cubes 111] [--config config/config.yaml]
"""

from __future__ import annotations

import argparse
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
#: What Snakemake's script preamble imports in every job before the script runs (snakemake 9).
PREAMBLE = ("from snakemake.logging import logger; from snakemake.iocontainers import Snakemake; "
            "from snakemake.shell import shell")
#: Stage modules a rule's job imports inside its run (after the script's own imports): the cube jobs import only
#: their kind's stages, the combinations only their own.
LAZY = {"cube_lines": ("comoving", "extract"), "cube_bands": ("bands",), "limits": ("limits", "stack", "temperature"),
        "injection": ("injection",)}


def job_imports() -> dict[str, str]:
    """Each rule's job as the imports it makes before its work: the preamble, its script's pipeline.workflow
    modules (``from pipeline.workflow import X``) and the stages it imports lazily."""
    jobs = {}
    for script in sorted((REPO / "rules" / "scripts").glob("*.py")):
        modules = re.findall(r"^from pipeline\.workflow import (\w+)$", script.read_text(), flags=re.M)
        modules += list(LAZY.get(script.stem, ()))
        jobs[script.stem] = PREAMBLE + "; " + "; ".join(f"import pipeline.workflow.{m}" for m in modules)
    return jobs


def wall(code: str, repeat: int) -> float:
    """Median wall time (s) of a fresh interpreter running ``code``."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], check=True, cwd=REPO)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def slowest_imports(code: str, n: int = 8) -> list[tuple[float, str]]:
    """The ``n`` outside packages whose import costs most when running ``code`` (largest cumulative s in
    ``python -X importtime``)."""
    run = subprocess.run([sys.executable, "-X", "importtime", "-c", code], capture_output=True,
                         text=True, check=True, cwd=REPO)
    by_package: dict[str, float] = {}
    for line in run.stderr.splitlines():
        parts = line.split("|")
        if not line.startswith("import time:") or len(parts) != 3:
            continue
        try:
            seconds = int(parts[1].strip()) / 1e6
        except ValueError:
            continue
        root = parts[2].strip().split(".")[0]
        if root != "pipeline":
            by_package[root] = max(by_package.get(root, 0.0), seconds)
    return sorted(((t, name) for name, t in by_package.items()), reverse=True)[:n]


# The campaign file is parsed before the clock starts: Snakemake parses its --configfile itself, before common.smk.
GRAPH_CODE = """
import sys, time, yaml
config = yaml.safe_load(open(sys.argv[1]))
t0 = time.perf_counter()
from pipeline.catalogue.coverage import bands_for_cube, lines_for_cube
from pipeline.io.cube_index import cube_spans
from pipeline.settings import check_inputs_exist, graph_settings, validate_config
t1 = time.perf_counter()
validate_config(config, source="config")
check_inputs_exist(config, source="config")
settings = graph_settings(config)
catalogue = settings.catalogue()
spans = cube_spans({c.cube_id: (c.path, c.beam_arcsec) for c in settings.cubes}, sys.argv[2])
lines = {k: lines_for_cube(s, catalogue, config["species"]) for k, s in spans.items()}
bands = {k: bands_for_cube(s, catalogue, config["species"]) for k, s in spans.items()}
t2 = time.perf_counter()
print(t1 - t0, t2 - t1)
"""


def graph_cost(config: Path, index: Path, repeat: int) -> tuple[float, float]:
    """Median (imports, work) seconds of the graph builder's own part."""
    out = []
    for _ in range(repeat):
        run = subprocess.run([sys.executable, "-c", GRAPH_CODE, str(config), str(index)], capture_output=True,
                             text=True, check=True)
        out.append(tuple(float(x) for x in run.stdout.split()))
    return statistics.median(o[0] for o in out), statistics.median(o[1] for o in out)


def campaign_of(config_path: Path, n_cubes: int, folder: Path) -> Path:
    """The campaign ``config_path`` with its cubes repeated (new ids, same files) up to ``n_cubes`` entries."""
    import yaml

    config = yaml.safe_load(config_path.read_text())
    base = config["cubes"]
    cubes = []
    for k in range(n_cubes):
        entry = dict(base[k % len(base)])
        entry["id"] = f"{entry.get('id', Path(entry['path']).stem)}_r{k}"
        entry["epoch"] = f"r{k // len(base)}"
        cubes.append(entry)
    config["cubes"] = cubes
    out = folder / "campaign.yaml"
    out.write_text(yaml.safe_dump(config, sort_keys=False))
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--cubes", type=int, default=111)
    parser.add_argument("--config", default=str(REPO / "config" / "config.yaml"),
                        help="a campaign whose cube files exist, paths relative to the current folder (the demo's: "
                             "run 'make demo' first)")
    args = parser.parse_args(argv)

    base = wall("pass", args.repeat)
    print(f"interpreter start (baseline): {base:.3f} s")
    print(f"{'rule (imports of its job)':28s} {'import s':>9s} {'beyond baseline s':>18s}")
    costs = {}
    jobs = job_imports()
    for rule, code in jobs.items():
        t = wall(code, args.repeat)
        costs[rule] = t - base
        print(f"{rule:28s} {t:9.3f} {t - base:18.3f}")
    worst = max(costs, key=costs.get)
    print(f"fixed cost per job: median {statistics.median(costs.values()):.3f} s, worst {costs[worst]:.3f} s "
          f"({worst}); target <= 0.5 s")
    print(f"costliest outside packages imported by the {worst} job (cumulative s):")
    for seconds, name in slowest_imports(jobs[worst]):
        print(f"  {seconds:7.3f}  {name}")

    snake = wall("import snakemake.api", args.repeat) - base
    with tempfile.TemporaryDirectory() as tmp:
        config = campaign_of(Path(args.config), args.cubes, Path(tmp))
        index = Path(tmp) / ".cube_index.json"
        cold = graph_cost(config, Path(tmp) / "none" / ".cube_index.json", 1)   # a fresh index each run: all reads
        graph_cost(config, index, 1)                                             # fill the index
        warm = graph_cost(config, index, args.repeat)
    print(f"graph building for {args.cubes} cubes: imports {warm[0]:.3f} s; work {cold[1]:.3f} s with a cold cube "
          f"index, {warm[1]:.3f} s warm; total beyond Snakemake's own {warm[0] + warm[1]:.3f} s "
          f"(Snakemake's import alone: {snake:.3f} s; ratio {(warm[0] + warm[1]) / snake:.2f}); target <= 0.5 s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
