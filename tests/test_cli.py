"""The campaign command line: new, add, check, run, help and exit codes."""

import shutil
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import pytest
import yaml
from astropy.time import Time

import pipeline
from pipeline import cli
from pipeline.cli import budget_template, group_epochs, main
from pipeline.runner import ProgressReader, log_excerpt, snakemake_command, workflow_root
from pipeline.settings import validate_config
from synthetic_cubes import small_scenario, write_scenario


def fill_budget(text: str, acceleration: str = "[2.4e-6, 3e-7]", radius: str = "[0.15, 0.6]") -> str:
    """What a user does with the commented budget section 'gasledger new' writes: uncomment 'budget:', the
    acceleration and the nucleus radius, and put values in place of the placeholders."""
    out = []
    for ln in text.splitlines(keepends=True):
        if ln.startswith(("# budget:", "#   acceleration_m_s2:", "#   nucleus:", "#     radius_km:")):
            ln = ln[2:].replace("[VALUE, SIGMA]", acceleration).replace("[MIN, MAX]", radius)
        out.append(ln)
    return "".join(out)


@pytest.fixture(scope="module")
def cubes(tmp_path_factory):
    root = tmp_path_factory.mktemp("cli")
    sc = replace(small_scenario(), npix=24, epochs=small_scenario().epochs[:2], planned=())
    write_scenario(sc, root / "data", progress=lambda s: None)
    return root / "data"


def test_new_finds_the_lines_each_cube_covers(cubes, tmp_path, capsys):
    out = tmp_path / "c.yaml"
    rc = main(["new", str(cubes), "--ephemeris", str(cubes / "ephemeris.ecsv"), "--species", "HCN", "CO", "CH3OH",
               "--observatory", "-106.4", "28.9", "2400", "-o", str(out)])
    text = capsys.readouterr().out
    assert rc == 0
    out.write_text(fill_budget(out.read_text()))
    assert "e1_hcn.fits: HCN_265886" in text and "e1_co.fits: CO_230538" in text
    assert "CH3OH_241767" in text and "CH3OH_241700" not in text       # outside the small window at its Doppler shift
    config = yaml.safe_load(out.read_text())
    assert "e1_ir_long.fits: CO_v1-0" in text                               # an infrared cube lists its bands
    assert len(config["cubes"]) == 8 and config["species"] == ["HCN", "CO", "CH3OH"]
    # the infrared cubes come from the (fictional) spacecraft: new says the folder holds two telescopes
    assert "note: the cubes come from 2 telescopes" in text
    assert main(["check", str(out)]) == 0
    text = capsys.readouterr().out
    assert "no problems found" in text
    assert text.count("mid-time from DATE-OBS/DATE-END") == 6                  # each cube says where its time came from
    assert text.count("mid-time from EXPMID") == 2                             # the space IFU products' own card
    assert text.count("TELESCOP = 'Lantern Space Telescope (fictional)'") == 2
    assert "note: cube e1_ir_short covers no band of HCN, CO, CH3OH; it serves only the dust continuum" in text
    # the generator's own campaign gives those cubes their spacecraft and its ephemeris: no note, no problem
    assert main(["check", str(cubes / "campaign.yaml")]) == 0
    text = capsys.readouterr().out
    assert "TELESCOP" not in text and "no problems found" in text
    assert text.count("observer the spacecraft 'Lantern Space Telescope (fictional)'") == 2


def test_add_appends_and_refuses_duplicates(cubes, tmp_path, capsys):
    out = tmp_path / "c.yaml"
    assert main(["new", str(cubes), "--ephemeris", str(cubes / "ephemeris.ecsv"), "--species", "HCN",
                 "--pattern", "e1_*.fits", "-o", str(out)]) == 0
    new = tmp_path / "e5_hcn.fits"
    shutil.copy(cubes / "e2_hcn.fits", new)
    assert main(["add", str(out), str(new), "--epoch", "e5"]) == 0
    config = yaml.safe_load(out.read_text())
    assert config["cubes"][-1] == {"path": str(new), "id": "e5_hcn", "epoch": "e5"}
    assert main(["add", str(out), str(new)]) == 2
    assert "already in the campaign" in capsys.readouterr().err


def test_check_reports_problems_with_exit_1(cubes, tmp_path, capsys):
    out = tmp_path / "c.yaml"
    assert main(["new", str(cubes), "--ephemeris", str(cubes / "ephemeris.ecsv"), "--species", "HCN", "H2CO",
                 "--pattern", "e1_*.fits", "-o", str(out)]) == 0
    capsys.readouterr()
    assert main(["check", str(out)]) == 1
    assert "species 'H2CO' has no line or band in any cube" in capsys.readouterr().out


def test_bad_input_exit_2_and_help(tmp_path, capsys):
    assert main(["check", str(tmp_path / "missing.yaml")]) == 2
    assert "does not exist" in capsys.readouterr().err
    for command in ([], ["new"], ["add"], ["check"]):
        run = subprocess.run([sys.executable, "-m", "pipeline.cli", *command, "--help"], capture_output=True,
                             text=True)
        assert run.returncode == 0 and "usage: gasledger" in run.stdout


def test_add_keeps_every_comment(cubes, tmp_path):
    """'add' on a commented, hand-laid-out file changes nothing but the new entry (byte-compared)."""
    out = tmp_path / "c.yaml"
    assert main(["new", str(cubes), "--ephemeris", str(cubes / "ephemeris.ecsv"), "--species", "HCN",
                 "--pattern", "e1_*.fits", "-o", str(out)]) == 0
    text = out.read_text()
    text = text.replace("cubes:\n", "cubes:   # the first night\n", 1).replace("species:\n", "# what we look for\nspecies:\n")
    text = "# my campaign, my notes\n" + fill_budget(text)
    out.write_text(text)
    new = tmp_path / "e5_hcn.fits"
    shutil.copy(cubes / "e2_hcn.fits", new)
    assert main(["add", str(out), str(new), "--epoch", "e5"]) == 0
    after = out.read_text()
    added = f"- path: {new}\n  id: e5_hcn\n  epoch: e5\n"
    assert added in after
    assert after.replace(added, "", 1) == text
    assert "# the first night" in after and "#   interval_days: 30" in after


def test_new_groups_epochs_and_writes_absolute_paths(cubes, tmp_path, monkeypatch, capsys):
    """Relative arguments become absolute paths (the file works from any folder); the cubes of one night share
    an epoch label, labelled in time order; without --observatory new says what it assumed."""
    monkeypatch.chdir(cubes.parent)
    out = tmp_path / "c.yaml"
    assert main(["new", cubes.name, "--ephemeris", f"{cubes.name}/ephemeris.ecsv", "--species", "hcn", "co",
                 "--pattern", "e*_[hc]*.fits", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    config = yaml.safe_load(out.read_text())
    assert config["species"] == ["HCN", "CO"]                      # spelt as in the catalogue
    assert all(Path(c["path"]).is_absolute() and Path(c["path"]).is_file() for c in config["cubes"])
    assert Path(config["target"]["ephemeris"]).is_absolute() and Path(config["outdir"]) == tmp_path / "results"
    epochs = {c["id"]: c["epoch"] for c in config["cubes"]}
    assert epochs == {"e1_hcn": "e1", "e1_co": "e1", "e1_ch3oh": "e1", "e2_hcn": "e2", "e2_co": "e2",
                      "e2_ch3oh": "e2"}
    assert "no --observatory given" in text and "geocentre" in text and config["observatory"] == "geocentre"
    assert f"gasledger run {out}" in text


def test_group_epochs_by_gap():
    t = {"a": Time("2031-03-10T04:00"), "b": Time("2031-03-10T09:00"), "c": Time("2031-03-09T23:30"),
         "d": Time("2031-03-11T03:00"), "e": Time("2031-03-14T03:00")}
    assert group_epochs(t) == {"c": "e1", "a": "e1", "b": "e1", "d": "e2", "e": "e3"}
    assert group_epochs(t, gap_hours=4.75) == {"c": "e1", "a": "e1", "b": "e2", "d": "e3", "e": "e4"}
    assert group_epochs(t, gap_hours=100) == dict.fromkeys(t, "e1")
    assert group_epochs({}) == {}


def test_budget_template_is_comments_and_fills_in():
    """The commented budget section leaves the file's content unchanged; filled in as its text says, it is a valid
    budget section (and '2.4e-6' reads as a number)."""
    base = {"campaign": "x", "outdir": "r", "target": {"ephemeris": "e.ecsv"}, "cubes": [{"path": "a.fits"}],
            "species": ["HCN"]}
    text = yaml.safe_dump(base, sort_keys=False) + budget_template()
    assert yaml.safe_load(text) == base
    assert all(ln.startswith("#") for ln in budget_template().splitlines() if ln.strip())
    assert "acceleration_m_s2: [VALUE, SIGMA]" in text and "[m/s^2]" in text and "radius_km: [MIN, MAX]" in text
    filled = validate_config(yaml.safe_load(fill_budget(text)))
    assert filled["budget"]["acceleration_m_s2"] == [2.4e-6, 3e-7]
    assert filled["budget"]["nucleus"]["radius_km"] == [0.15, 0.6]
    # the defaults shown are the schema's
    assert f"momentum_efficiency: {filled['budget']['momentum_efficiency']}" in text


def test_check_flags_budget_and_uncovered_cubes(cubes, tmp_path, capsys):
    out = tmp_path / "c.yaml"
    assert main(["new", str(cubes), "--ephemeris", str(cubes / "ephemeris.ecsv"), "--species", "HCN",
                 "--pattern", "e1_[hc]*.fits", "--observatory", "-106.4", "28.9", "2400", "-o", str(out)]) == 0
    capsys.readouterr()
    assert main(["check", str(out)]) == 1
    text = capsys.readouterr().out
    assert "no verdict will be computed" in text and "budget.acceleration_m_s2" in text
    assert "set budget.nucleus.radius_km" in text
    assert "cube e1_ch3oh" in text and "covers no line of the listed species (HCN)" in text
    assert "cube e1_co " in text and "cube e1_hcn " not in text
    out.write_text(fill_budget(out.read_text(), radius="[0.1, 1.0]"))            # the default range, given anyway
    assert main(["check", str(out)]) == 1
    text = capsys.readouterr().out
    assert "no verdict will be computed" not in text and "schema's default range 0.1-1 km" in text


def test_version_and_run_arguments(cubes, tmp_path, monkeypatch, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0 and capsys.readouterr().out.strip() == f"gasledger {pipeline.__version__}"
    seen = {}

    def fake_run(command, directory, verbose=False):
        seen.update(command=command, directory=directory, verbose=verbose)
        return 0, ProgressReader()

    monkeypatch.setattr(cli, "run_workflow", fake_run)
    campaign = cubes / "campaign.yaml"
    assert main(["run", str(campaign), "--cores", "3", "--directory", str(tmp_path), "--", "--dry-run",
                 "--forceall"]) == 0
    cmd = seen["command"]
    assert cmd[:3] == [sys.executable, "-m", "snakemake"] and seen["directory"] == tmp_path.resolve()
    assert cmd[cmd.index("--snakefile") + 1] == str(workflow_root() / "Snakefile")
    assert cmd[cmd.index("--configfile") + 1] == str(campaign.resolve())
    assert cmd[cmd.index("--directory") + 1] == str(tmp_path.resolve())
    assert cmd[cmd.index("--cores") + 1] == "3" and cmd[-2:] == ["--dry-run", "--forceall"]
    i = cmd.index("--rerun-triggers")
    assert cmd[i + 1:i + 5] == ["mtime", "params", "input", "code"]
    # a profile decides the cores unless they are given
    assert "--cores" not in snakemake_command(campaign, profile="profiles/slurm")
    assert snakemake_command(campaign)[-2:] == ["--cores", "all"]
    # the campaign is read before Snakemake starts: a missing file is exit 2, with one sentence
    assert main(["run", str(tmp_path / "nope.yaml")]) == 2
    assert "does not exist" in capsys.readouterr().err
    with pytest.raises(SystemExit) as stop:
        main(["check", str(campaign), "--", "--dry-run"])
    assert stop.value.code == 2


#: Snakemake's output for two jobs (one with wildcards), as it prints it (9.x), then a failed job.
SNAKEMAKE_LINES = """\
Building DAG of jobs...
Job stats:
job        count
-------  -------
geometry       1
total          2

[Sat Dec  5 00:31:10 2026]
localrule geometry:
    input: data/e1_hcn.fits, data/ephemeris.ecsv
    output: results/geometry/e1_hcn.ecsv
    log: results/logs/geometry/e1_hcn.log
    jobid: 7
    wildcards: cube=e1_hcn
    resources: tmpdir=/tmp, runtime=10
[Sat Dec  5 00:31:10 2026]
rule budget:
    log: results/logs/budget.log
    jobid: 3
    resources: tmpdir=/tmp
Select jobs to execute...
[Sat Dec  5 00:31:12 2026]
Finished jobid: 7 (Rule: geometry)
1 of 12 steps (8%) done
[Sat Dec  5 00:31:30 2026]
Error in rule budget:
    message: None
    jobid: 3
    log: results/logs/budget.log (check log file(s) for error details)
Shutting down, this might take some time.
"""


def test_progress_lines_from_snakemake_output():
    times = iter(range(0, 1000, 2))         # each line read 2 s after the one before
    reader = ProgressReader(clock=lambda: float(next(times)))
    shown = [s for s in (reader.feed(ln + "\n") for ln in SNAKEMAKE_LINES.splitlines()) if s is not None]
    reader.finish()
    # one line per finished job: step count, rule, wildcards, the job's time and the run's
    assert shown == ["[ 1 of 12 steps] geometry cube=e1_hcn  (30.0 s; total 0:46)"]
    assert [(j.rule, j.jobid, j.log) for j in reader.failed] == [("budget", "3", "results/logs/budget.log")]
    assert reader.jobs["7"].wildcards == "cube=e1_hcn" and not reader.nothing_to_do
    assert reader.running == {} and reader.status() is None          # geometry finished, budget failed
    running = ProgressReader(clock=lambda: 75.0)
    for ln in SNAKEMAKE_LINES.splitlines()[7:14]:                     # the geometry job's block, still open
        running.feed(ln + "\n")
    assert running.status() == "running: geometry cube=e1_hcn (0:00)"
    nothing = ProgressReader()
    assert nothing.feed("Nothing to be done (all requested files are present and up to date).\n") is not None
    assert nothing.nothing_to_do


def test_log_excerpt_keeps_the_error_lines(tmp_path):
    log = tmp_path / "budget.log"
    log.write_text("2031-03-10 04:00:00,000 INFO gasledger: read 4 tables\n"
                   "2031-03-10 04:00:01,000 ERROR gasledger: budget: something named by its key\n")
    assert log_excerpt(log) == ["2031-03-10 04:00:01,000 ERROR gasledger: budget: something named by its key"]
    log.write_text("line\nTraceback (most recent call last):\n  File \"x.py\", line 1\nValueError: boom\n")
    assert log_excerpt(log)[-1] == "ValueError: boom" and log_excerpt(log)[0].startswith("Traceback")
    assert log_excerpt(tmp_path / "missing.log") == []


def test_run_workflow_prints_progress_and_the_failing_job(tmp_path):
    """run_workflow on a stand-in for Snakemake (a script printing its lines): one progress line per finished job;
    the failed job with its log's error line and the log's absolute path; the exit status passed on."""
    import io

    from pipeline.runner import run_workflow

    log = tmp_path / "results" / "logs" / "budget.log"
    log.parent.mkdir(parents=True)
    log.write_text("2031-03-10 04:00:01,000 ERROR gasledger: budget: a sentence naming the key\n")
    script = tmp_path / "fake_snakemake.py"
    script.write_text(f"import sys\nsys.stdout.write({SNAKEMAKE_LINES!r})\nsys.exit(1)\n")
    out = io.StringIO()
    code, reader = run_workflow([sys.executable, str(script)], directory=tmp_path, out=out)
    lines = out.getvalue().splitlines()
    assert code == 1 and lines[0].startswith("[ 1 of 12 steps] geometry cube=e1_hcn  (")
    assert lines[1:4] == ["failed: budget", "  2031-03-10 04:00:01,000 ERROR gasledger: budget: a sentence naming the key",
                          f"  log: {log}"]
    assert not any("jobid" in ln or "Building DAG" in ln for ln in lines)
    verbose = io.StringIO()
    assert run_workflow([sys.executable, str(script)], directory=tmp_path, verbose=True, out=verbose)[0] == 1
    assert verbose.getvalue() == SNAKEMAKE_LINES


def test_workflow_found_beside_the_package_or_refused_in_one_sentence(tmp_path, monkeypatch):
    root = workflow_root()
    assert (root / "Snakefile").is_file() and (root / "config" / "schema.yaml").is_file()
    (tmp_path / "pipeline").mkdir()
    monkeypatch.setattr(pipeline, "__file__", str(tmp_path / "pipeline" / "__init__.py"))   # as from a wheel
    with pytest.raises(ValueError, match=r"the workflow \(Snakefile and rules/\) was not found next to the "
                                         r"installed package in .*; expected a source checkout"):
        workflow_root()
