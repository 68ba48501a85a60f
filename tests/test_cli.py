"""The campaign command line: new, add, check, help and exit codes."""

import shutil
import subprocess
import sys
from dataclasses import replace

import pytest
import yaml

from pipeline.cli import main
from synthetic_cubes import small_scenario, write_scenario


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
    assert text.count("note: cube e1_ir_") == 2 and "TELESCOP = 'Lantern Space Telescope (fictional)'" in text
    # the generator's own campaign gives those cubes their spacecraft and its ephemeris: no note, no problem
    assert main(["check", str(cubes / "campaign.yaml")]) == 0
    text = capsys.readouterr().out
    assert "note:" not in text and "no problems found" in text
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
