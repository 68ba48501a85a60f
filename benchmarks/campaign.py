"""Benchmark: what a campaign costs as it grows, and what one new epoch costs.

For each size N (default 3 12 36 epochs) it writes a campaign of N+1 epochs from the small invented scenario
(synthetic_cubes.small_scenario: three millimetre cubes per epoch, the space telescope's infrared cubes at e1 and
e3; epochs one day apart), runs the real workflow on the first N epochs, then appends epoch N+1 and runs again,
and prints, measured in the same run:

- the full run's wall time for N epochs, and the workflow's CPU time (sum of its jobs' cpu_time, Snakemake's
  benchmark files) against that wall time;
- the wall time of the append, against the new epoch's own per-cube jobs (cube_lines, cube_bands: each cube's
  geometry, sub-cubes and spectra or bands, and images; the sum of their run times); the target is a ratio of at
  most 2;
- the append's wall time at size N against that at the first size (the target is at most 1.5: the cost of an
  epoch should not grow with the campaign's history);
- the dry-run time of the finished campaign (nothing to do), against Snakemake's own start on an empty workflow;
- what the append ran, per rule (jobs and summed run time), and how many jobs of the earlier epochs (per cube or
  per epoch: cube_lines, cube_bands, epoch) reran (the target is none);
- with ``--floor``, the workflow's total CPU against the same jobs run in one process (benchmarks/one_process.py)
  for the first size's campaign.

    .venv/bin/python benchmarks/campaign.py [--sizes 3 12 36] [--cores 2] [--keep DIR] [--floor]

Sizes of 12 and 36 epochs take tens of minutes each on a 2-core machine.
"""

from __future__ import annotations

import argparse
import csv
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import astropy.units as u
import yaml
from astropy.time import Time

REPO = Path(__file__).resolve().parents[1]
# the jobs' benchmark folders (benchmarks/<folder>/...): both cube rules write below cube/
PER_CUBE_RULES = ("cube",)
PER_EPOCH_RULES = ("epoch",)


def scenario_of(n_epochs: int):
    """The small scenario with ``n_epochs`` epochs one day apart (no planned epochs)."""
    from synthetic_cubes import small_scenario

    base = small_scenario()
    first = Time(base.epochs[0][1], scale="utc")
    labels = [f"e{k + 1}" for k in range(n_epochs)]
    epochs = tuple((lab, (first + k * u.day).isot) for k, lab in enumerate(labels))
    track = base.track_s[base.epochs[0][0]]
    return replace(base, epochs=epochs, track_s={lab: track for lab in labels},
                   specsys={lab: "TOPOCENT" for lab in labels}, planned=())


def snakemake(workdir: Path, config: Path, cores: int, *extra: str) -> float:
    """Wall time (s) of one Snakemake run of the project's workflow (quiet)."""
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory",
                    str(workdir), "--configfile", str(config), "--cores", str(cores), "--quiet", "all",
                    "--rerun-triggers", "mtime", "params", "input", "code", *extra],
                   check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def benchmark_rows(results: Path) -> list[tuple[str, str, float, float]]:
    """(rule, file stem path, run time s, cpu time s) of every job's Snakemake benchmark file."""
    rows = []
    for path in sorted((results / "benchmarks").rglob("*.tsv")):
        rel = path.relative_to(results / "benchmarks")
        with path.open() as fh:
            rec = list(csv.DictReader(fh, delimiter="\t"))[-1]
        rows.append((rel.parts[0].removesuffix(".tsv"), str(rel.with_suffix("")), float(rec["s"]),
                     float(rec["cpu_time"])))
    return rows


def empty_snakemake_start(tmp: Path) -> float:
    """Wall time of Snakemake's own start and dry run on a workflow with one trivial rule."""
    snakefile = tmp / "Snakefile.empty"
    snakefile.write_text("rule all:\n    output: 'x'\n    shell: 'touch {output}'\n")
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "snakemake", "-s", str(snakefile), "-d", str(tmp), "-n", "--quiet",
                    "--cores", "1"], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def measure(n: int, root: Path, cores: int) -> dict[str, float]:
    from pipeline.offline import future_time_tolerated
    from synthetic_cubes import write_scenario

    data, work = root / f"data_{n}", root / f"work_{n}"
    work.mkdir(parents=True, exist_ok=True)
    with future_time_tolerated():           # the invented epochs lie beyond the bundled leap-second tables
        full_config = write_scenario(scenario_of(n + 1), data, results=str(work / "results"),
                                     progress=lambda _: None)
    config = yaml.safe_load(full_config.read_text())
    new_label = f"e{n + 1}"
    first_n = dict(config, cubes=[c for c in config["cubes"] if c["epoch"] != new_label])
    config_n = root / f"campaign_{n}.yaml"
    config_n.write_text(yaml.safe_dump(first_n, sort_keys=False))
    results = work / "results"

    t_full = snakemake(work, config_n, cores)
    cpu_full = sum(r[3] for r in benchmark_rows(results))
    t_dry = snakemake(work, config_n, cores, "--dry-run")
    before = {r[1]: r[2] for r in benchmark_rows(results)}
    t_append = snakemake(work, full_config, cores)
    new_ids = {c["id"] for c in config["cubes"] if c["epoch"] == new_label}
    after = benchmark_rows(results)
    own = sum(s for rule, stem, s, _ in after if rule in PER_CUBE_RULES and stem.split("/")[1] in new_ids)
    own_epoch = sum(s for rule, stem, s, _ in after if rule in PER_EPOCH_RULES and stem.split("/")[-1] == new_label)
    rerun_old = [stem for rule, stem, s, _ in after
                 if rule in PER_CUBE_RULES + PER_EPOCH_RULES and stem in before and before[stem] != s]
    ran: dict[str, list[float]] = {}
    for rule, stem, s, _ in after:
        if stem not in before or before[stem] != s:
            ran.setdefault(rule, []).append(s)
    return {"full": t_full, "cpu": cpu_full, "dry": t_dry, "append": t_append, "own": own, "own_epoch": own_epoch,
            "old_rerun": float(len(rerun_old)), "ran": ran, "config": config_n}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[3, 12, 36])
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--keep", help="keep the campaigns in this folder")
    parser.add_argument("--floor", action="store_true",
                        help="also run the first size's campaign in one process (benchmarks/one_process.py)")
    args = parser.parse_args(argv)
    root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="gasledger_campaign_"))
    root.mkdir(parents=True, exist_ok=True)
    try:
        base_start = empty_snakemake_start(root)
        print(f"Snakemake's own start and dry run of a one-rule workflow: {base_start:.2f} s")
        header = (f"{'epochs':>6} {'full s':>8} {'CPU/wall':>8} {'dry-run s':>9} {'dry/own start':>13} "
                  f"{'append s':>9} {'its cube jobs s':>15} {'its epoch jobs s':>16} {'append/own':>10} "
                  f"{'append/first':>12} {'old jobs rerun':>14}")
        print(header)
        first_append, measured = None, []
        for n in args.sizes:
            m = measure(n, root, args.cores)
            measured.append((n, m))
            first_append = first_append or m["append"]
            print(f"{n:6d} {m['full']:8.1f} {m['cpu'] / m['full']:8.2f} {m['dry']:9.2f} "
                  f"{m['dry'] / base_start:13.2f} {m['append']:9.1f} {m['own']:15.1f} {m['own_epoch']:16.1f} "
                  f"{m['append'] / m['own']:10.2f} {m['append'] / first_append:12.2f} "
                  f"{int(m['old_rerun']):14d}", flush=True)
        print("\nWhat each append ran (jobs, summed run time s, per rule):")
        for n, m in measured:
            parts = ", ".join(f"{rule} {len(t)} / {sum(t):.1f}" for rule, t in
                              sorted(m["ran"].items(), key=lambda kv: -sum(kv[1])))
            print(f"  {n} epochs: {parts}")
        if args.floor:
            sys.path.insert(0, str(REPO / "benchmarks"))
            from one_process import measure_floor, print_floor

            n, m = measured[0]
            print(f"\nOne-process floor of the {n}-epoch campaign (the workflow with --cores 1):")
            print_floor(measure_floor(m["config"], root / "floor", directory=root))
    finally:
        if not args.keep:
            shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
