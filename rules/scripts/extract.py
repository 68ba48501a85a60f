"""Rule 'extract': thin wrapper around pipeline.workflow.extract.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import extract
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    extract.run(snakemake.input.subcube, settings, snakemake.output[0])
