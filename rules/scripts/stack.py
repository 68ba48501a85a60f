"""Rule 'stack': thin wrapper around pipeline.workflow.stack.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import stack
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    stack.run(list(snakemake.input.epochs), snakemake.wildcards.species, settings, snakemake.output[0])
