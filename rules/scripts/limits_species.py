"""Rule 'limits_species': thin wrapper around pipeline.workflow.limits.run_species."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import limits
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    limits.run_species(snakemake.input.stack, settings, snakemake.output[0], snakemake.input.temperature)
