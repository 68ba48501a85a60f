"""Rule 'comoving': thin wrapper around pipeline.workflow.comoving.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import comoving
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    comoving.run(snakemake.input.geometry, snakemake.wildcards.line, settings, snakemake.output[0])
