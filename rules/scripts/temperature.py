"""Rule 'temperature': thin wrapper around pipeline.workflow.temperature.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import temperature
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    temperature.run(list(snakemake.input.stacks), settings, snakemake.output[0])
