"""Rule 'limits': thin wrapper around pipeline.workflow.limits.run_join."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import limits
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    limits.run_join(list(snakemake.input.species), settings, snakemake.output.ecsv, snakemake.output.json,
                    list(snakemake.input.geometry), snakemake.output.activity)
