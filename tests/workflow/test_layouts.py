"""The file layout does not change the answer: the same invented HCN cubes written as facility pipelines deliver
them (4-D, FREQ descending, a start-only DATE-OBS completed by the config's duration_s, a per-channel BEAMS table)
and in the simple native layout (3-D, FREQ ascending, DATE-OBS/DATE-END, BMAJ/BMIN) give the same rates through
the real workflow.

The noise is drawn from the same seed in the same order in both layouts, so the e1 and e3 cubes hold the same
numbers (only the channel order, the Stokes axis and the time cards differ) and their rates must agree to rounding;
e2's per-channel beams correlate the same noise draws over beams that differ by < 0.1 %, so its rate may move by
a small fraction of its error. Each rate is also checked against the injected truth (2 sigma plus 8 %).
"""

import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable

from synthetic_cubes import small_scenario, write_scenario

REPO = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.workflow


def _scenario():
    """The small scenario's HCN cubes only (three epochs, one per facility-layout variant)."""
    sc = small_scenario()
    return replace(sc, windows=sc.windows[1:2], infrared=(), planned=(),
                   production_rates={"HCN": sc.production_rates["HCN"]})


@pytest.fixture(scope="module")
def limits(tmp_path_factory) -> dict[str, QTable]:
    """limits.ecsv of each layout's run (only the steps up to the limits table)."""
    out = {}
    for layout in ("facility", "native"):
        root = tmp_path_factory.mktemp(layout)
        config = write_scenario(_scenario(), root / "data", results=str(root / "results"), progress=lambda s: None,
                                layout=layout)
        target = root / "results" / "limits.ecsv"
        cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(root),
               "--configfile", str(config), "--cores", "2", str(target)]
        run = subprocess.run(cmd, capture_output=True, text=True, timeout=900)
        assert run.returncode == 0, run.stderr[-4000:]
        out[layout] = QTable.read(target, format="ascii.ecsv")
    return out


def _row(table: QTable, epoch: str, aperture: float):
    sel = table[(table["species"] == "HCN") & (table["epoch"] == epoch) & (table["t_kin_K"].to_value(u.K) == 40.0)
                & np.isclose(table["aperture_km"].to_value(u.km), aperture)]
    assert len(sel) == 1
    return sel[0]


@pytest.mark.parametrize("epoch", ["e1", "e2", "e3", "all"])
@pytest.mark.parametrize("aperture", [1000.0, 3000.0])
def test_layouts_give_the_same_rates(limits, epoch, aperture):
    sc = _scenario()
    truth = sc.production_rates["HCN"]
    rows = {layout: _row(table, epoch, aperture) for layout, table in limits.items()}
    q = {k: r["q"].to_value(1 / u.s) for k, r in rows.items()}
    err = {k: r["q_err"].to_value(1 / u.s) for k, r in rows.items()}
    for layout in rows:
        assert abs(q[layout] - truth) < 2 * err[layout] + 0.08 * truth, (layout, q[layout] / truth)
    if epoch in sc.beam_table_epochs or epoch == "all":
        assert abs(q["facility"] - q["native"]) < 0.1 * err["native"]
        assert err["facility"] == pytest.approx(err["native"], rel=0.02)
    else:                                      # the same numbers in another layout
        assert q["facility"] == pytest.approx(q["native"], rel=1e-5)
        assert err["facility"] == pytest.approx(err["native"], rel=1e-5)
