"""End to end: the real Snakemake workflow on the small invented scenario, in a temporary folder.

The injected rates come from synthetic_cubes (truth.yaml). The generator shares the pipeline's physics, so
this is a consistency check of the whole chain (frames, apertures, noise, stacking, limits, budget, report);
the physics functions have their own external checks in the other test files.

The cubes are written in the layouts facility pipelines deliver (synthetic_cubes, layout 'facility'): the
millimetre epochs each exercise one way of stating time and beam (e1: DATE-OBS/DATE-END and BMAJ/BMIN cards;
e2: a per-channel BEAMS table; e3: a start-only DATE-OBS completed by the config's duration_s), and the
infrared cubes come from a fictional space telescope with its own state table, ephemeris and apertures.
"""

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
import yaml
from astropy.table import QTable

from synthetic_cubes import small_scenario, write_scenario

REPO = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.workflow


def _command(workdir: Path, config: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
            "--configfile", str(config), "--cores", "2", *extra]


def snakemake(workdir: Path, config: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run(_command(workdir, config, *extra), capture_output=True, text=True, timeout=900)


def _dry_run_jobs(root: Path, cfg: dict, path: Path) -> dict[str, int]:
    """Write ``cfg`` to ``path`` and return the rule -> job count of a dry run with it."""
    path.write_text(yaml.safe_dump(cfg))
    dry = snakemake(root, path, "--dry-run")
    assert dry.returncode == 0, dry.stderr[-2000:]
    return _jobs(dry.stdout)


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    root = tmp_path_factory.mktemp("campaign")
    config = write_scenario(small_scenario(), root / "data", results=str(root / "results"), progress=lambda s: None,
                            layout="facility")
    run = snakemake(root, config)
    assert run.returncode == 0, run.stderr[-4000:]
    return root, config


def _limits(root: Path) -> QTable:
    return QTable.read(root / "results" / "limits.ecsv", format="ascii.ecsv")


def _row(table, species, epoch, aperture, t_kin=40.0):
    sel = table[(table["species"] == species) & (table["epoch"] == epoch)
                & (np.isclose(table["aperture_km"].to_value(u.km), aperture))
                & (table["t_kin_K"].to_value(u.K) == t_kin)]
    assert len(sel) == 1
    return sel[0]


def _truth(root: Path, species: str) -> float:
    return yaml.safe_load((root / "data" / "truth.yaml").read_text())["production_rates_per_s"][species]


@pytest.mark.parametrize("aperture", [1000.0, 3000.0])
def test_hcn_recovered(campaign, aperture):
    root, _ = campaign
    truth = _truth(root, "HCN")
    row = _row(_limits(root), "HCN", "all", aperture)   # the injected temperature is 40 K
    q, err = row["q"].to_value(1 / u.s), row["q_err"].to_value(1 / u.s)
    assert row["detected"]
    # "within its stated error": 2 sigma, since a 1-sigma band misses the truth a third of the time by design
    assert abs(q - truth) < 2 * err
    assert abs(q - truth) < 0.15 * truth


def test_detections_quoted_at_the_measured_temperature(campaign):
    """The CH3OH lines measure the temperature (its interval holds the injected 40 K); HCN and CH3OH are quoted
    there, within 2 sigma (statistical and temperature errors in quadrature) plus 10 % of the injected rates."""
    root, _ = campaign
    fits = QTable.read(root / "results" / "temperature.ecsv", format="ascii.ecsv")
    t_all = fits[(fits["species"] == "CH3OH") & (fits["epoch"] == "all")]
    assert len(t_all) and all(r["t_lo_K"].to_value(u.K) <= 40.0 <= r["t_hi_K"].to_value(u.K) for r in t_all)
    table = _limits(root)
    for species in ("HCN", "CH3OH"):
        truth = _truth(root, species)
        quoted = table[(table["species"] == species) & (table["epoch"] == "all") & table["adopted"]]
        assert len(quoted) == 2 and all(quoted["t_origin"] == "measured"), quoted
        for r in quoted:
            q, err = r["q"].to_value(1 / u.s), float(np.hypot(r["q_err"].to_value(1 / u.s), r["q_sys"].to_value(1 / u.s)))
            assert abs(q - truth) < 2 * err + 0.10 * truth, (species, q, err, truth)
    # non-detections with lines are quoted at the sweep's conservative temperature; a species seen only in
    # infrared bands has a Q that does not depend on T
    co = table[(table["species"] == "CO") & table["adopted"]]
    assert len(co) and all(co["t_origin"] == "conservative")
    co2 = table[(table["species"] == "CO2") & table["adopted"]]
    assert len(co2) and all(co2["t_origin"] == "not needed")


#: The millimetre epochs of the small scenario and what each one's files exercise (synthetic_cubes.scenario):
#: where the mid-time comes from, and whether the beams come from a per-channel BEAMS table.
MM_LAYOUTS = {"e1": ("DATE-OBS/DATE-END", False), "e2": ("DATE-OBS/DATE-END", True),
              "e3": ("DATE-OBS + config 'duration_s'", False)}


def test_epochs_exercise_the_layouts(campaign):
    sc = small_scenario()
    assert {e for e, (_, table) in MM_LAYOUTS.items() if table} == set(sc.beam_table_epochs)
    assert {e for e, (source, _) in MM_LAYOUTS.items() if "duration_s" in source} == set(sc.start_only_epochs)


@pytest.mark.parametrize("epoch", sorted(MM_LAYOUTS))
@pytest.mark.parametrize("aperture", [1000.0, 3000.0])
def test_hcn_recovered_per_epoch_layout(campaign, epoch, aperture):
    """HCN from each millimetre epoch alone: within 2 sigma plus 8 % of the truth, whichever way its file states
    the time and the beam."""
    from astropy.io import fits

    root, _ = campaign
    source, beam_table = MM_LAYOUTS[epoch]
    geometry = QTable.read(root / "results" / "geometry" / f"{epoch}_hcn.ecsv", format="ascii.ecsv")
    assert geometry["time_source"][0] == source
    with fits.open(root / "results" / "comoving" / f"{epoch}_hcn" / "HCN_265886.fits") as hdul:
        # a sub-cube carries the channels' own beams on to the extraction when the cube had them
        assert ("BEAMS" in hdul) == beam_table
    truth = _truth(root, "HCN")
    row = _row(_limits(root), "HCN", epoch, aperture)
    q, err = row["q"].to_value(1 / u.s), row["q_err"].to_value(1 / u.s)
    assert row["detected"]
    assert abs(q - truth) < 2 * err + 0.08 * truth, (q / truth, err / truth)


def test_start_only_cube_without_duration_is_refused(campaign, tmp_path):
    """Without duration_s (or time) the geometry step refuses the start-only cube with one sentence naming the
    file, the card it found and the config key that fixes it (pipeline.io.times)."""
    root, config = campaign
    label = small_scenario().start_only_epochs[0]
    cfg = yaml.safe_load(config.read_text())
    cfg["outdir"] = str(tmp_path / "results")
    entry = next(c for c in cfg["cubes"] if c["id"] == f"{label}_hcn")
    del entry["duration_s"]
    path = tmp_path / "no_duration.yaml"
    path.write_text(yaml.safe_dump(cfg))
    run = snakemake(tmp_path, path, str(tmp_path / "results" / "geometry" / f"{label}_hcn.ecsv"))
    assert run.returncode != 0
    sentence = next(line for line in (run.stdout + run.stderr).splitlines() if line.startswith("gasledger: "))
    assert entry["path"] in sentence and "only DATE-OBS" in sentence and "'duration_s'" in sentence, sentence
    assert not (tmp_path / "results" / "geometry" / f"{label}_hcn.ecsv").exists()


@pytest.mark.parametrize("aperture", [1000.0, 3000.0])
def test_ch3oh_within_error(campaign, aperture):
    root, _ = campaign
    truth = _truth(root, "CH3OH")
    row = _row(_limits(root), "CH3OH", "all", aperture)
    q, err = row["q"].to_value(1 / u.s), row["q_err"].to_value(1 / u.s)
    assert abs(q - truth) < 2 * err
    assert row["q_upper"].to_value(1 / u.s) > truth * 0.5


def test_co_limit_above_zero_truth(campaign):
    root, _ = campaign
    co = _limits(root)
    co = co[co["species"] == "CO"]
    assert len(co) > 0
    assert np.all(co["q_upper"].to_value(1 / u.s) > 0)          # the truth is zero
    assert not np.any(co[co["epoch"] == "all"]["detected"])


def test_outputs_contract_and_provenance(campaign):
    root, config = campaign
    table = _limits(root)
    for col in ("species", "epoch", "aperture_km", "t_kin_K", "q", "q_err", "q_upper", "snr", "detected"):
        assert col in table.colnames
    assert table["q_upper"].unit == 1 / u.s
    prov = table.meta["provenance"]
    assert prov["software"] == "gasledger" and prov["inputs"]
    assert all(v.startswith("sha256:") for v in prov["inputs"].values())
    # the record holds the config keys the limits step reads (pipeline.workflow.campaign.STEP_KEYS; the catalogue
    # section is not in this campaign), nothing else, and the code digest
    assert set(prov["config"]) == {"outdir", "limits", "coma", "excitation"}
    assert set(prov["config"]["limits"]) == {"nsigma", "activity_slope"}
    assert prov["config"]["limits"]["nsigma"] == yaml.safe_load(config.read_text()).get("limits", {}).get("nsigma", 3)
    assert len(prov["code"]) == 16
    budget = json.loads((root / "results" / "budget.json").read_text())
    verdicts = {d["species"]: d["verdict"] for d in budget["drivers"]}
    assert all(verdicts[s] != "not observed" for s in ("H2O", "CO2", "CO"))    # the infrared cubes cover them
    html = (root / "results" / "report.html").read_text()
    # campaign, tracers, spectra, budget, sweep, infrared, population diagrams, and per cube its image and spectra
    n_cubes = len(yaml.safe_load(config.read_text())["cubes"])
    assert html.count('class="cube-image"') == n_cubes
    assert html.count("data:image/png;base64,") >= 7 + n_cubes
    assert "peer review" in html and "Infrared bands and dust" in html
    for name in ("stacked_spectra", "mass_budget", "temperature_sweep", "infrared_spectra"):
        assert (root / "results" / "figures" / f"{name}.png").stat().st_size > 10_000


#: Header cards of a FITS HDU that have no business in a table's metadata (astropy puts them there on reading).
FITS_BOOKKEEPING = re.compile(r"^(CHECKSUM|DATASUM|EXTNAME|EXTVER|XTENSION|BITPIX|NAXIS\d*|PCOUNT|GCOUNT|TFIELDS"
                              r"|T(TYPE|FORM|UNIT|DISP|NULL)\d+)$")


def test_every_output_table_explains_its_columns(campaign):
    """Every column of every ECSV the workflow writes has a description; every numeric column has the unit
    pipeline.io.columns names for it ('' there: dimensionless on purpose), so a name has one unit in all tables;
    limits.ecsv carries each epoch's mid-time, r_h and Delta; no FITS card sits in any table's metadata, and no
    job logged a MergeConflictWarning (the dust step stacks tables read from FITS)."""
    from astropy.time import Time

    from pipeline.io.columns import column_spec, table_kind
    from pipeline.io.tables import read_table

    root, _ = campaign
    results = root / "results"
    paths = sorted(results.rglob("*.ecsv"))
    kinds = {table_kind(p) for p in paths}
    assert kinds >= {"geometry", "limits", "activity", "temperature", "budget", "exclusion", "zeta", "water_inferred",
                     "dust", "afrho", "injection", "forecast"}, kinds
    problems = []
    for path in paths:
        table, kind = read_table(path), table_kind(path)
        where = str(path.relative_to(results))
        problems += [f"{where}: FITS card {k} in the meta" for k in table.meta if FITS_BOOKKEEPING.match(str(k))]
        for name in table.colnames:
            col, spec = table[name], column_spec(name, kind)
            if not col.info.description:
                problems.append(f"{where}: column {name} has no description")
            if spec is None:
                problems.append(f"{where}: column {name} is not in pipeline.io.columns")
                continue
            numeric = not isinstance(col, Time) and col.dtype.kind in "fiu"
            unit = getattr(col, "unit", None)
            if spec[0] is None and (numeric or unit is not None):
                problems.append(f"{where}: column {name} is numeric ({unit}) but listed as text, flag or time")
            elif spec[0] == "" and unit is not None and unit != u.dimensionless_unscaled:
                problems.append(f"{where}: column {name} has unit {unit}, listed as dimensionless")
            elif spec[0] and unit != u.Unit(spec[0]):
                problems.append(f"{where}: column {name} has unit {unit}, expected {spec[0]}")
    assert not problems, "\n".join(problems)
    limits = _limits(root)
    for epoch in ("e1", "e2", "e3"):
        geo = [read_table(p)[0] for p in (results / "geometry").glob("*.ecsv")]
        geo = [g for g in geo if g["epoch"] == epoch]
        rows = limits[limits["epoch"] == epoch]
        assert len(rows) and len(geo)
        mid = np.mean([g["time_mid"].mjd for g in geo])
        assert np.allclose(rows["time_mid"].mjd, mid, atol=1e-6)                 # 0.1 s
        assert np.allclose(rows["r_h"].to_value(u.au), np.mean([g["r_h"].to_value(u.au) for g in geo]))
        assert np.allclose(rows["delta"].to_value(u.au), np.mean([g["delta"].to_value(u.au) for g in geo]))
    combined = limits[limits["epoch"] == "all"]
    assert np.all(combined["time_mid"].mask) and np.all(np.isnan(combined["r_h"].value))
    logs = [p for p in (results / "logs").rglob("*.log") if "MergeConflictWarning" in p.read_text()]
    assert not logs, logs


def _jobs(dry_run_stdout: str) -> dict[str, int]:
    """Rule -> job count from the 'Job stats' table of a dry run."""
    counts = {}
    block = dry_run_stdout.split("Job stats:")[-1] if "Job stats:" in dry_run_stdout else ""
    for line in block.splitlines():
        m = re.match(r"^([A-Za-z_]\w*)\s+(\d+)\s*$", line.strip())
        if m and m.group(1) != "total":
            counts[m.group(1)] = int(m.group(2))
    return counts


def test_rerun_with_nothing_changed_runs_nothing(campaign):
    root, config = campaign
    dry = snakemake(root, config, "--dry-run")
    assert dry.returncode == 0, dry.stderr[-2000:]
    assert _jobs(dry.stdout) == {}
    assert "Nothing to be done" in dry.stdout + dry.stderr


def test_new_cube_reruns_only_its_jobs(campaign, tmp_path):
    root, config = campaign
    cfg = yaml.safe_load(config.read_text())
    src = root / "data" / "e1_hcn.fits"
    new = root / "data" / "e4_hcn.fits"
    shutil.copy(src, new)
    cfg["cubes"].append({"path": str(new), "id": "e4_hcn", "epoch": "e4"})
    path = tmp_path / "four.yaml"
    path.write_text(yaml.safe_dump(cfg))
    dry = snakemake(root, path, "--dry-run")
    assert dry.returncode == 0, dry.stderr[-2000:]
    jobs = _jobs(dry.stdout)
    # the new cube's own job (geometry, its HCN line, images), the new epoch's job (its stack inputs and injection
    # measurements) and the campaign's job (the combinations over all epochs: stacks, temperatures, limits, budget,
    # injection-recovery, forecast, report)
    assert jobs == {"cube_lines": 1, "epoch": 1, "campaign": 1, "all": 1}, jobs
    # every job with a cube or an epoch is the new one's: the earlier epochs' per-cube jobs and their injection
    # measurements (cached per epoch) are reused, not rerun
    wildcards = re.findall(r"wildcards: (.*)", dry.stdout)
    per_cube = [w for w in wildcards if "cube=" in w or "epoch=" in w]
    assert len(per_cube) == 2, wildcards
    assert all("cube=e4_hcn" in w or "epoch=e4" in w for w in per_cube), per_cube


def test_report_renders_in_a_real_browser(campaign, tmp_path):
    """The report opened in headless Chromium shows its figures (pixels in the figures' line colours)."""
    import os

    sys.path.insert(0, str(REPO / "tools"))
    import check_report

    if check_report.find_chromium() is None:
        if os.environ.get("CI"):
            pytest.fail("CI must have Chromium (.ci/run installs Debian's chromium)")
        pytest.skip("no Chromium on this machine (Debian: apt-get install chromium); CI installs it")
    root, config = campaign
    png = tmp_path / "report.png"
    check_report.screenshot(root / "results" / "report.html", png)
    assert check_report.figure_pixels(png) >= 3000
    # the campaign figure (each driver's Q per epoch against the push's demand) is the first thing a reader sees:
    # wholly inside a 1400x900 window, and drawn there
    above, why = check_report.campaign_figure_above_fold(root / "results" / "report.html", tmp_path / "fold.png")
    assert above, why
    # one image per cube, in the campaign's order, each named in its alt text and a PNG the page decodes
    cube_ids = [c["id"] for c in yaml.safe_load(config.read_text())["cubes"]]
    images = check_report.cube_images(root / "results" / "report.html")
    assert len(images) == len(cube_ids)
    assert [alt.rsplit(" ", 1)[-1] for alt, _ in images] == cube_ids
    assert all(w > 200 and h > 200 for _, (w, h) in images)


def test_snakemake_report_builds(campaign, tmp_path):
    """Snakemake's own report (figures and tables registered with report()) builds from the finished run."""
    root, config = campaign
    out = tmp_path / "snakemake_report.html"
    run = snakemake(root, config, "--report", str(out))
    assert run.returncode == 0, run.stderr[-2000:]
    assert out.stat().st_size > 100_000


def _run_until(workdir: Path, config: Path, condition, timeout: float = 300) -> bool:
    """Start the workflow, SIGKILL its whole process group as soon as ``condition()`` holds. True if killed."""
    import os
    import signal
    import time

    proc = subprocess.Popen(_command(workdir, config, "--rerun-incomplete"), stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    t0 = time.monotonic()
    try:
        while proc.poll() is None and time.monotonic() - t0 < timeout:
            if condition():
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait()
                return True
            time.sleep(0.05)
        return False
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()


def _all_outputs_complete(results: Path) -> None:
    """Every file under its final name is whole: FITS checksums verify, ECSV tables read."""
    from astropy.io import fits

    for path in results.rglob("*"):
        if path.suffix == ".fits":
            with fits.open(path, checksum=True) as hdul:   # raises/warns on a truncated or altered file
                hdul.verify("exception")
        elif path.suffix == ".ecsv":
            QTable.read(path, format="ascii.ecsv")


def test_killed_runs_resume_to_identical_outputs(campaign):
    """Kill during cube jobs, then during aggregation; each rerun resumes; final tables equal an uninterrupted run."""
    root, config = campaign
    results = root / "results"
    reference = {p.relative_to(results): p.read_bytes() for p in results.rglob("*.ecsv")}
    assert {Path("limits.ecsv"), Path("dust.ecsv")} <= reference.keys()      # the comparison below is not empty
    shutil.rmtree(results)
    shutil.rmtree(root / ".snakemake", ignore_errors=True)
    killed = _run_until(root, config, lambda: len(list((results / "spectra").rglob("*.fits"))) >= 3)
    assert killed
    _all_outputs_complete(results)
    assert snakemake(root, config, "--unlock").returncode == 0
    killed = _run_until(root, config, lambda: (results / "stack").is_dir() and any((results / "stack").iterdir()))
    assert killed
    _all_outputs_complete(results)
    assert snakemake(root, config, "--unlock").returncode == 0
    final = snakemake(root, config, "--rerun-incomplete")
    assert final.returncode == 0, final.stderr[-3000:]
    assert not list(results.rglob("*.part"))                                  # no temporary files left over
    now = {p.relative_to(results): p.read_bytes() for p in results.rglob("*.ecsv")}
    assert now.keys() == reference.keys()
    for name, data in reference.items():
        assert now[name] == data, f"{name} differs from the uninterrupted run"


def test_changing_one_value_reruns_only_what_uses_it(campaign, tmp_path):
    root, config = campaign
    cfg = yaml.safe_load(config.read_text())
    cfg["limits"]["nsigma"] = 2.5
    jobs = _dry_run_jobs(root, cfg, tmp_path / "nsigma.yaml")
    # limits.nsigma is read by the campaign's combinations only: no cube's or epoch's job reruns (the water of the
    # non-LTE excitation in the per-epoch stack inputs has its own threshold)
    assert jobs == {"campaign": 1, "all": 1}, jobs


def test_infrared_rates_limits_and_dust(campaign):
    """The small scenario's infrared cubes (e1, e3, from the fictional spacecraft): H2O recovered, CO2 and CO limits,
    Afrho and colour near truth."""
    root, _ = campaign
    truth = yaml.safe_load((root / "data" / "truth.yaml").read_text())
    table = _limits(root)
    cons = table[table["conservative"]]
    h2o = cons[(cons["species"] == "H2O")]
    assert set(h2o["epoch"]) == {"e1", "e3", "all"}
    assert set(h2o["aperture_km"].to_value(u.km)) == {1000.0}       # the IR cubes' own apertures (small field)
    for row in h2o:   # within 2 sigma plus 8 % (the PSF and pixel grid, see tests/test_bands_stage.py)
        q, err = row["q"].to_value(1 / u.s), row["q_err"].to_value(1 / u.s)
        q_true = truth["production_rates_per_s"]["H2O"]
        assert abs(q - q_true) < 2 * err + 0.08 * q_true, (row["epoch"], q / q_true, err / q_true)
        assert row["detected"] and "H2O_nu3" in row["lines"]
    co2 = cons[(cons["species"] == "CO2") & (cons["epoch"] == "all")]
    assert len(co2) and not np.any(co2["detected"]) and np.all(co2["q_upper"].to_value(1 / u.s) > 0)
    co = cons[(cons["species"] == "CO") & (cons["epoch"] == "all")]
    assert len(co)
    assert all("CO_v1-0" in str(x) and "CO_230538" in str(x) for x in co["lines"])   # lines and band combined
    dust = QTable.read(root / "results" / "dust.ecsv", format="ascii.ecsv")
    row = dust[(dust["epoch"] == "all")][-1]
    assert abs(row["afrho"].to_value(u.cm) / truth["dust"]["afrho_cm"] - 1) < 0.03
    assert np.isfinite(row["slope"]) and row["slope"] > 0
    injection = QTable.read(root / "results" / "injection" / "H2O.ecsv", format="ascii.ecsv")
    ratio = (injection["q_recovered"] / injection["q_injected"]).decompose().value
    assert len(ratio) and np.allclose(ratio, 1.0, rtol=1e-3)   # differenced injection: the chain's self-consistency


def test_the_non_lte_comparison_takes_the_campaigns_own_water(campaign):
    """At e1 and e3 the infrared cubes measure H2O: the millimetre lines' non-LTE comparison there uses that Q(H2O)
    (the inverse-variance mean of the epoch's water bands, which is also the H2O limits row of that epoch and its
    only aperture), and says so; e2 has no water band and takes excitation.q_h2o_per_s, saying why."""
    root, config = campaign
    configured = yaml.safe_load(config.read_text())["excitation"]["q_h2o_per_s"]
    table = _limits(root)
    for epoch in ("e1", "e3"):
        water = table[(table["species"] == "H2O") & (table["epoch"] == epoch) & (table["t_origin"] == "sweep")]
        hcn = table[(table["species"] == "HCN") & (table["epoch"] == epoch)]
        assert len(water) and len(hcn)
        q_water = water["q"][0].to_value(1 / u.s)
        np.testing.assert_allclose(hcn["q_h2o_excitation"].to_value(1 / u.s), q_water, rtol=1e-12)
        assert all(str(x).startswith(f"H2O measured at {epoch}") for x in hcn["q_h2o_from"])
        assert np.all(np.isfinite(hcn["q_nonlte"][hcn["t_origin"] != "not needed"]))
    e2 = table[(table["species"] == "HCN") & (table["epoch"] == "e2")]
    np.testing.assert_allclose(e2["q_h2o_excitation"].to_value(1 / u.s), configured, rtol=1e-12)
    assert all("no H2O band measured at e2" in str(x) for x in e2["q_h2o_from"])
    every = table[(table["species"] == "HCN") & (table["epoch"] == "all")]
    assert np.all(np.isnan(every["q_h2o_excitation"])) and all(str(x).startswith("per epoch:")
                                                                for x in every["q_h2o_from"])
    report = (root / "results" / "report.html").read_text()
    assert "H2O measured at e1" in report and "measured by the campaign at e1" in report


def test_cube_figures_are_read_back_without_their_spectra_when_nothing_they_show_changed(campaign, tmp_path,
                                                                                          monkeypatch):
    """The report's per-cube spectra figures, keyed on their inputs (files, the epoch's quoted rows, settings,
    code): a second report reads no spectra file and gives the same HTML; a changed quoted row of one epoch redraws
    that epoch's cubes only, to the figure an uncached report draws."""
    from pipeline.io import products
    from pipeline.report import cubes_section
    from pipeline.settings import Settings, validate_config

    root, config = campaign
    settings = Settings.from_config(validate_config(yaml.safe_load(config.read_text()), source=str(config)))
    results = root / "results"
    images = sorted(str(p) for p in (results / "figures" / "cubes").glob("*.png"))
    spectra = sorted(str(p) for p in (results / "spectra").glob("*/*.fits"))
    bands = sorted(str(p) for p in (results / "bands").glob("*.fits"))
    limits = _limits(root)
    cache = tmp_path / "cache"
    first = cubes_section.cubes_section(settings, images, spectra, bands, limits, cache=cache)
    read = []
    original = products.LineSpectra.from_fits.__func__

    def counting(cls, source):
        if isinstance(source, (str, Path)):           # a file read (from_fits also takes an open HDU list)
            read.append(str(source))
        return original(cls, source)

    monkeypatch.setattr(cubes_section.LineSpectra, "from_fits", classmethod(counting))
    assert cubes_section.cubes_section(settings, images, spectra, bands, limits, cache=cache) == first
    assert read == []
    changed = limits.copy()
    pick = (changed["epoch"] == "e2") & changed["adopted"] & (changed["species"] == "HCN")
    changed["q"][pick] = changed["q"][pick] * 1.5
    redrawn = cubes_section.cubes_section(settings, images, spectra, bands, changed, cache=cache)
    # only the cubes of e2 that show an HCN line are read again: another species' figure draws none of HCN's rows
    hcn_lines = {ln.line_id for ln in settings.catalogue().lines if ln.species == "HCN"}
    showing_hcn = {Path(p).parent.name for p in spectra if "/e2_" in p and Path(p).stem in hcn_lines}
    e2_cubes = {Path(p).parent.name for p in spectra if "/e2_" in p}
    assert showing_hcn and showing_hcn != e2_cubes
    assert {Path(p).parent.name for p in read} == showing_hcn
    assert redrawn != first
    uncached = cubes_section.cubes_section(settings, images, spectra, bands, changed)
    assert redrawn == uncached
    # made on two processes: the same section (figures are independent and written with fixed metadata)
    assert cubes_section.cubes_section(settings, images, spectra, bands, changed, workers=2) == uncached


def test_line_fits_are_read_back_from_the_memo_as_fitting_gives_them(campaign, tmp_path, monkeypatch):
    """A species' limits run again with the memo of its line-profile fits (.cache/memo) fits nothing again and
    writes the same table as the run that fitted (and as the workflow's own run)."""
    from pipeline.rates import detections
    from pipeline.settings import Settings, validate_config
    from pipeline.workflow import limits

    root, config = campaign
    record = validate_config(yaml.safe_load(config.read_text()), source=str(config))
    record["outdir"] = str(tmp_path / "out")
    settings = Settings.from_config(record)
    results = root / "results"
    args = (str(results / "stack" / "HCN.fits"), settings)
    limits.run_species(*args, str(tmp_path / "fitted.ecsv"), str(results / "temperature.ecsv"))
    assert (tmp_path / "out" / ".cache" / "memo" / "line-fits-HCN.json").is_file()

    def refuse(*_args, **_kwargs):
        raise AssertionError("a line was fitted again")

    monkeypatch.setattr(detections, "fit_line", refuse)
    limits.run_species(*args, str(tmp_path / "memo.ecsv"), str(results / "temperature.ecsv"))
    fitted, kept = (QTable.read(tmp_path / f"{n}.ecsv", format="ascii.ecsv") for n in ("fitted", "memo"))
    workflow = QTable.read(results / "limits" / "HCN.ecsv", format="ascii.ecsv")
    assert np.isfinite(fitted["q_fit"].value).sum() > 0
    for table in (kept, workflow):
        assert table.colnames == fitted.colnames
        for name in fitted.colnames:
            a, b = np.asarray(fitted[name]), np.asarray(table[name])
            assert (np.array_equal(a, b, equal_nan=True) if a.dtype.kind == "f"
                    else list(map(str, a)) == list(map(str, b))), name


def test_infrared_geometry_is_the_spacecraft_s(campaign):
    """The infrared cubes' geometry comes from the spacecraft's ephemeris (about 1.5 million km from the ground
    site's), their mid-time from the space IFU's explicit EXPMID with its begin/end pair."""
    from pipeline.geometry.ephemeris import read_ephemeris
    from pipeline.offline import future_time_tolerated

    root, _ = campaign
    data = root / "data"
    with future_time_tolerated():
        craft = read_ephemeris(data / "ephemeris_spacecraft.ecsv")
        site = read_ephemeris(data / "ephemeris.ecsv")
    assert craft.observer == {"spacecraft": small_scenario().spacecraft["name"]}
    for label in ("e1", "e3"):
        ir = QTable.read(root / "results" / "geometry" / f"{label}_ir_short.ecsv", format="ascii.ecsv")
        mm = QTable.read(root / "results" / "geometry" / f"{label}_hcn.ecsv", format="ascii.ecsv")
        assert ir["time_source"][0].startswith("EXPMID")
        with future_time_tolerated():
            seen = craft.at(ir["time_mid"])
            ground = site.at(ir["time_mid"])
        assert abs(ir["delta"][0] - seen["delta"][0]).to_value(u.km) < 1.0
        # the two observers lie ~1.5e6 km apart: the range differs by up to that, never by less than ~1e4 km here
        assert 1e4 < abs(seen["delta"][0] - ground["delta"][0]).to_value(u.km) < 1.6e6
        assert abs(mm["delta"][0] - ground["delta"][0]).to_value(u.km) < 1e3
