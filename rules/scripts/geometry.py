"""Rule 'geometry': thin wrapper around pipeline.workflow.geometry.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import geometry
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    geometry.run(settings, snakemake.output[0])
