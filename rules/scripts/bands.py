"""Rule 'bands': thin wrapper around pipeline.workflow.bands.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import bands
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    bands.run(snakemake.input.geometry, list(snakemake.params.bands), settings, snakemake.output[0])
