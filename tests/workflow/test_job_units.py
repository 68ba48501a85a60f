"""The three kinds of job (per cube, per epoch, per campaign): what their stage functions promise on their own.

The workflow tests (test_workflow.py) run them for real; these check the parts a workflow run would not show: each
campaign step sees only its own config keys, and an error in one line's steps names the cube and the line.
"""

from __future__ import annotations

import copy
from pathlib import Path

import pytest

from pipeline.errors import ConfigError, CoverageError
from pipeline.settings import Settings, load_config, schema_keys
from pipeline.workflow import campaign, cube

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def demo_settings() -> Settings:
    config = copy.deepcopy(load_config(REPO / "config" / "config.yaml"))
    return Settings.from_config(config)


def test_every_step_key_is_a_config_key():
    top = set(schema_keys())
    for step, keys in campaign.STEP_KEYS.items():
        assert keys, step
        assert {k.partition(".")[0] for k in keys} <= top, step


def test_a_campaign_step_reads_only_its_own_keys(demo_settings):
    dust = campaign.step_settings(demo_settings, "dust")
    assert dust.record["dust"] == demo_settings.record["dust"]
    assert dust.dust.wavelengths.unit == demo_settings.dust.wavelengths.unit
    with pytest.raises(ConfigError, match=r"not given the config key 'coma'"):
        _ = dust.coma
    assert set(dust.record) <= {"outdir", "dust"}
    limits = campaign.step_settings(demo_settings, "limits")
    assert limits.limits.nsigma == demo_settings.limits.nsigma
    with pytest.raises(ConfigError, match=r"not given the config key 'budget'"):
        _ = limits.budget
    # the report reads every key: it gets the job's own settings
    assert campaign.step_settings(demo_settings, "report") is demo_settings


def test_an_error_in_a_lines_steps_names_the_cube_and_the_line(demo_settings):
    settings = demo_settings.with_cube("e1_hcn")
    sub = "results/comoving/e1_hcn/HCN_265886.fits"
    with pytest.raises(CoverageError) as caught:
        with cube._naming_the_line(settings, "HCN_265886", sub):
            raise CoverageError(f"{sub}: all 8 line-free channels of the spectrum hold the same value")
    text = str(caught.value)
    assert text == (f"cube e1_hcn ({settings.cube.path}), line HCN_265886: all 8 line-free channels of the spectrum "
                    "hold the same value")
    assert sub not in text                      # a failed cube job keeps no sub-cube to point at
