"""The path a new user takes, end to end: ``gasledger new`` on a folder of cubes, ``check``, ``run``, the report.

Everything runs as the installed command in a temporary folder outside the repository, on a small invented
campaign (two epochs of the fictional ground array's HCN and CO cubes, from synthetic_cubes). First without a
budget section (what ``new`` writes: the budget commented out): ``check`` says what is missing and the run still
ends with the limits and a report whose budget part says what is missing. Then with the budget filled in as the
commented section says: ``check`` finds no problem and the rerun (only the jobs the budget feeds) gives a report
with the drivers' verdicts.
"""

import html
import json
import re
import shutil
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import astropy.units as u
import pytest

from pipeline.io.tables import read_table
from pipeline.report.verdicts import classify
from synthetic_cubes import small_scenario, write_scenario
from synthetic_cubes.scenario import SpectralWindow

pytestmark = pytest.mark.workflow

REPO = Path(__file__).resolve().parents[2]


def gasledger(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """The installed 'gasledger' command (the module's command line when the script is not installed)."""
    script = Path(sys.executable).parent / "gasledger"
    cmd = [str(script)] if script.is_file() else [sys.executable, "-m", "pipeline.cli"]
    return subprocess.run([*cmd, *args], cwd=cwd, capture_output=True, text=True, timeout=900)


def fill_budget(text: str) -> str:
    """Uncomment 'budget:', the acceleration and the nucleus radius of the section 'new' writes, with values."""
    out = []
    for ln in text.splitlines(keepends=True):
        if ln.startswith(("# budget:", "#   acceleration_m_s2:", "#   nucleus:", "#     radius_km:")):
            ln = ln[2:].replace("[VALUE, SIGMA]", "[2.4e-6, 3e-7]").replace("[MIN, MAX]", "[0.15, 0.6]")
        out.append(ln)
    return "".join(out)


def python_warnings(folder: Path) -> list[str]:
    """The Python warnings the jobs logged (each step's log captures them, pipeline.workflow.common)."""
    return [f"{log.name}: {ln}" for log in (folder / "results" / "logs").rglob("*.log")
            for ln in log.read_text(encoding="utf-8").splitlines() if "py.warnings" in ln]


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    """A folder outside the repository with the cubes in data/: HCN and CO windows at two epochs (no infrared,
    no planned epochs), wide enough for the default velocity window."""
    root = tmp_path_factory.mktemp("user_path")
    assert REPO not in root.parents
    sc = small_scenario()
    sc = replace(sc, epochs=sc.epochs[:2], start_only_epochs=(), infrared=(), planned=(),
                 windows=(SpectralWindow("hcn", ("HCN_265886",), 46.0), SpectralWindow("co", ("CO_230538",), 46.0)),
                 production_rates={"HCN": sc.production_rates["HCN"], "CO": 0.0})
    write_scenario(sc, root / "data", progress=lambda s: None)
    (root / "data" / "campaign.yaml").unlink()          # the user starts from the cubes and the ephemeris only
    shutil.rmtree(root / "results", ignore_errors=True)
    return root


def test_new_check_run_without_and_with_a_budget(folder):
    site = ["--observatory", "-106.4", "28.9", "2400"]
    new = gasledger("new", "data", "--ephemeris", "data/ephemeris.ecsv", "--species", "hcn", "co", *site,
                    "-o", "campaign.yaml", cwd=folder)
    assert new.returncode == 0, new.stderr
    assert "gasledger run campaign.yaml" in new.stdout and new.stderr == ""
    assert "epoch e1:" in new.stdout and "epoch e2:" in new.stdout
    campaign = folder / "campaign.yaml"

    # no budget yet: check names what is missing, the run still ends with a report saying so
    check = gasledger("check", "campaign.yaml", cwd=folder)
    assert check.returncode == 1 and "no verdict will be computed" in check.stdout
    run = gasledger("run", "campaign.yaml", "--cores", "2", cwd=folder)
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-3000:]
    lines = run.stdout.splitlines()
    report = folder / "results" / "report.html"
    assert re.match(r"\[ *1 of \d+ steps\] ", lines[0]) and lines[-1] == f"Report: {report}", run.stdout
    assert all(ln.startswith("[") for ln in lines[:-1]), run.stdout            # one progress line per job, no more
    assert "Warning" not in run.stdout + run.stderr and python_warnings(folder) == []
    summary = json.loads((folder / "results" / "budget.json").read_text())
    assert len(summary["missing"]) == 1 and "budget.acceleration_m_s2" in summary["missing"][0]
    assert len(read_table(folder / "results" / "budget.ecsv")) == 0
    assert len(read_table(folder / "results" / "limits.ecsv")) > 0
    text = report.read_text(encoding="utf-8")
    assert html.escape(summary["missing"][0]) in text

    # the budget filled in as the commented section says: no problem left, a verdict for each driver
    campaign.write_text(fill_budget(campaign.read_text()))
    check = gasledger("check", "campaign.yaml", cwd=folder)
    assert check.returncode == 0 and "no problems found" in check.stdout, check.stdout
    run = gasledger("run", "campaign.yaml", "--cores", "2", cwd=folder)
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-3000:]
    assert run.stdout.splitlines()[-1] == f"Report: {report}" and python_warnings(folder) == []
    assert not any("cube_lines" in ln or "cube_bands" in ln for ln in run.stdout.splitlines())   # only what the budget feeds
    summary = json.loads((folder / "results" / "budget.json").read_text())
    assert summary["missing"] == [] and summary["defaulted"] == []
    budget = read_table(folder / "results" / "budget.ecsv")
    co = budget[(budget["species"] == "CO") & (budget["epoch"] == "all") & (budget["assumption_set"] == "baseline")]
    mass = [m * u.kg for m in summary["assumptions"]["nucleus_mass_kg"]]
    kind = classify(co["q_upper"][0], co["mass_allowed"][0], (mass[0], mass[1]))
    assert kind != "unobserved"
    text = report.read_text(encoding="utf-8")
    assert f'class="verdict v-{kind}"' in text
    assert html.escape("no verdict will be computed") not in text

    # nothing changed: nothing to do
    again = gasledger("run", "campaign.yaml", "--cores", "2", cwd=folder)
    assert again.returncode == 0 and again.stdout.splitlines()[0].startswith("nothing to do")
