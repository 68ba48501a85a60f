"""benchmarks/one_process.py: the stand-in for Snakemake's ``snakemake`` object, the table comparison, and the
one-process run of a tiny campaign (every job of Snakemake's own job graph run, every output it names written).

The reference for the stand-in is Snakemake's Namedlist (snakemake.iocontainers), built here beside it.
"""

import importlib.util
import json
import shutil
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def _module():
    spec = importlib.util.spec_from_file_location("one_process", REPO / "benchmarks" / "one_process.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules["one_process"] = module                     # dataclasses look their module up there
    spec.loader.exec_module(module)
    return module


def test_namedlist_behaves_like_snakemakes():
    from snakemake.iocontainers import Namedlist as SnakemakeNamedlist

    op = _module()
    real = SnakemakeNamedlist(fromdict={"subcube": "a.fits"})
    real.append("b.fits")
    real.append("c.fits")
    real._set_name("catalogue", 1, end=3)
    fake = op.Namedlist(op._named(real))
    assert list(fake) == list(real)
    assert fake.subcube == real.subcube == fake[0]
    assert list(fake.catalogue) == list(real.catalogue) == ["b.fits", "c.fits"]
    assert list(fake.keys()) == list(real.keys())
    assert fake.get("missing", "x") == "x"
    with pytest.raises(AttributeError):
        fake.missing


def test_compare_tables_finds_one_changed_value(tmp_path):
    from astropy.table import Table

    op = _module()
    a, b = tmp_path / "a", tmp_path / "b"
    a.mkdir()
    b.mkdir()
    t = Table({"species": ["HCN", "CO"], "q": [1.0e25, 2.0e26], "file": [f"{a}/x.fits", f"{a}/y.fits"]})
    t.write(a / "limits.ecsv", format="ascii.ecsv")
    t["file"] = [f"{b}/x.fits", f"{b}/y.fits"]              # each run's own folder: written the same
    t.write(b / "limits.ecsv", format="ascii.ecsv")
    assert op.compare_tables(a, b, names=("limits.ecsv",)) == []
    t["q"][1] = 2.0e26 * (1 + 1e-12)
    t.write(b / "limits.ecsv", format="ascii.ecsv", overwrite=True)
    diffs = op.compare_tables(a, b, names=("limits.ecsv",))
    assert len(diffs) == 1 and "column q: 1 of 2 values differ" in diffs[0]


@pytest.mark.workflow
def test_one_process_run_of_a_tiny_campaign_writes_every_output(tmp_path):
    op = _module()
    config = op.small_campaign(1, tmp_path / "data")        # one epoch of the small invented scenario
    result = op.measure_floor(config, tmp_path / "floor", skip_workflow=True)
    graph = json.loads((tmp_path / "floor" / "jobs.json").read_text())
    script_jobs = [j for j in graph["jobs"] if j["script"] is not None]
    assert result.jobs == len(script_jobs) > 0
    assert {j["rule"] for j in script_jobs} == set(result.one_per_rule)
    missing = [p for j in script_jobs for p in j["output"]["items"] if not Path(p).exists()]
    assert missing == []
    results = tmp_path / "floor" / "one_process" / "results"
    assert op.compare_tables(results, results) == []
    shutil.rmtree(tmp_path / "floor")
