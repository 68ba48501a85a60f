"""A few bad inputs through the real ``snakemake`` command line, on one cube of the small invented scenario.

Two are refused while Snakemake builds the job graph (a misspelt config key, a truncated cube), two inside a
job (an ephemeris that does not cover the cube's time: the geometry job; a constant cube: the extract job). Each
must exit non-zero with one line ``gasledger: <sentence>`` on stderr and write no output for the failing job
(only its log); a refused job graph writes nothing below the outdir at all.
"""

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml
from astropy.io import fits
from astropy.table import QTable
from astropy.time import Time

from synthetic_cubes import small_scenario, write_scenario

REPO = Path(__file__).resolve().parents[2]
CUBE = "e1_hcn"
LINE = "HCN_265886"
pytestmark = pytest.mark.workflow


@pytest.fixture(scope="module")
def scenario(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("scenario")
    write_scenario(small_scenario(), root, results=str(root / "results"), progress=lambda s: None)
    return root


@pytest.fixture
def campaign(scenario, tmp_path):
    """A one-cube, one-species copy of the scenario in a fresh folder: (workdir, config dict, cube, ephemeris)."""
    data = tmp_path / "data"
    data.mkdir()
    cube = Path(shutil.copy(scenario / f"{CUBE}.fits", data / f"{CUBE}.fits"))
    eph = Path(shutil.copy(scenario / "ephemeris.ecsv", data / "ephemeris.ecsv"))
    config = yaml.safe_load((scenario / "campaign.yaml").read_text())
    config["outdir"] = str(tmp_path / "results")
    config["target"]["ephemeris"] = str(eph)
    config["cubes"] = [{"path": str(cube), "id": CUBE, "epoch": "e1"}]
    config["species"] = ["HCN"]
    budget = config.get("budget", {})                  # a tracer must be a measured species: keep HCN's only
    budget["water_from_tracers"] = [t for t in budget.get("water_from_tracers", []) if t["species"] == "HCN"]
    return tmp_path, config, cube, eph


def snakemake(workdir: Path, config: dict) -> subprocess.CompletedProcess:
    path = workdir / "campaign.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
           "--configfile", str(path), "--cores", "2"]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=600)


def files_below(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*") if p.is_file()) if folder.exists() else []


def gasledger_sentence(run: subprocess.CompletedProcess) -> str:
    """The one 'gasledger: ...' line of stderr (Snakemake's own lines around it are left aside)."""
    lines = [ln for ln in run.stderr.splitlines() if ln.startswith("gasledger: ")]
    assert len(lines) == 1, run.stderr[-3000:]
    sentence = lines[0].removeprefix("gasledger: ")
    assert not re.search(r"[.!?]\s+[A-Z]", sentence), sentence        # one sentence
    return sentence


def test_misspelt_key_refused_before_any_job(campaign):
    workdir, config, _, _ = campaign
    config["apertures_kms"] = config.pop("apertures_km")
    run = snakemake(workdir, config)
    assert run.returncode == 1, run.stderr[-2000:]
    sentence = gasledger_sentence(run)
    assert re.match(r"config: unknown key 'apertures_kms' under \(top level\) \(misspelt\?\); allowed keys there: "
                    r".*apertures_km,", sentence), sentence
    assert not Path(config["outdir"]).exists()


def test_truncated_cube_refused_before_any_job(campaign):
    workdir, config, cube, _ = campaign
    data = cube.read_bytes()
    cube.write_bytes(data[: len(data) // 3])
    run = snakemake(workdir, config)
    assert run.returncode == 1, run.stderr[-2000:]
    sentence = gasledger_sentence(run)
    assert re.match(rf"{re.escape(str(cube))}: the FITS file is truncated \({len(data) // 3} bytes, but its header "
                    rf"\(BITPIX, NAXISn\) announces {len(data)} bytes\); expected a complete file", sentence), sentence
    assert not Path(config["outdir"]).exists()


def test_ephemeris_not_covering_the_cube_fails_its_cube_job(campaign):
    workdir, config, cube, eph = campaign
    table = QTable.read(eph, format="ascii.ecsv")
    start = fits.getheader(cube)["DATE-OBS"]
    table[table["time"] > start].write(eph, format="ascii.ecsv", overwrite=True)   # begins after the exposure
    run = snakemake(workdir, config)
    assert run.returncode != 0
    sentence = gasledger_sentence(run)
    # (DATE-OBS is the start of the track with fractional seconds, as ground-array pipelines write it)
    assert re.match(rf"cube {CUBE} \({re.escape(str(cube))}\): time {re.escape(Time(start, scale='utc').isot)} "
                    rf"lies outside the ephemeris "
                    rf"{re.escape(str(eph))} \(which spans .*\); expected a table covering the whole exposure",
                    sentence), sentence
    out = Path(config["outdir"])
    assert not (out / "geometry" / f"{CUBE}.ecsv").exists()
    # only the failing job's log (and the input-checksum cache of the provenance records, if any)
    assert [p for p in files_below(out) if not p.startswith(".checksums/")] == [f"logs/cube/{CUBE}.log"]


def test_constant_cube_fails_its_cube_job(campaign):
    workdir, config, cube, _ = campaign
    with fits.open(cube) as hdul:
        header = hdul[0].header.copy()
        shape = hdul[0].data.shape
    for card in ("CHECKSUM", "DATASUM"):
        header.remove(card, ignore_missing=True)
    fits.PrimaryHDU(np.full(shape, 0.02, dtype=np.float32), header=header).writeto(cube, overwrite=True)
    run = snakemake(workdir, config)
    assert run.returncode != 0
    sentence = gasledger_sentence(run)
    assert re.match(rf"cube {CUBE} \({re.escape(str(cube))}\), line {LINE}: all \d+ line-free channels of the spectrum hold the same value "
                    r"\([-+0-9.e]+\): the data are constant and carry no noise to measure; expected noisy data",
                    sentence), sentence
    out = Path(config["outdir"])
    written = files_below(out)
    # the cube's job failed whole: none of its products (geometry, sub-cubes, spectra, images) is left, only its
    # log, and no temporary file anywhere
    assert [p for p in written if not p.startswith(".checksums/")] == [f"logs/cube/{CUBE}.log"], written


def gasledger_run(workdir: Path, config: dict) -> subprocess.CompletedProcess:
    path = workdir / "campaign.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    cmd = [sys.executable, "-m", "pipeline.cli", "run", str(path), "--cores", "2", "--directory", str(workdir)]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=600)


def test_gasledger_run_refuses_a_misspelt_key_before_snakemake(campaign):
    workdir, config, _, _ = campaign
    config["apertures_kms"] = config.pop("apertures_km")
    run = gasledger_run(workdir, config)
    assert run.returncode == 2 and run.stdout == "", run.stdout[-2000:]
    assert run.stderr.startswith("gasledger: ") and "unknown key 'apertures_kms'" in run.stderr
    assert len(run.stderr.splitlines()) == 1
    assert not Path(config["outdir"]).exists()


def test_gasledger_run_names_the_failing_job_its_error_and_log(campaign):
    """A job failing under 'gasledger run': the rule and cube, the log's error sentence and the log's absolute path,
    exit 1; no Snakemake job blocks on the console."""
    workdir, config, cube, eph = campaign
    table = QTable.read(eph, format="ascii.ecsv")
    table[table["time"] > fits.getheader(cube)["DATE-OBS"]].write(eph, format="ascii.ecsv", overwrite=True)
    run = gasledger_run(workdir, config)
    assert run.returncode == 1, run.stdout[-3000:]
    lines = run.stdout.splitlines()
    assert f"failed: cube_lines (cube={CUBE})" in lines, run.stdout
    log = Path(config["outdir"]) / "logs" / "cube" / f"{CUBE}.log"
    assert f"  log: {log}" in lines
    assert any(" ERROR " in ln and "lies outside the ephemeris" in ln for ln in lines), run.stdout
    assert not any(ln.lstrip().startswith(("jobid:", "input:", "reason:")) for ln in lines), run.stdout
