"""Rule 'injection': thin wrapper around pipeline.workflow.injection.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import injection
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    injection.run(list(snakemake.input.epochs), snakemake.wildcards.species, snakemake.input.limits,
                  snakemake.input.budget, settings, snakemake.output[0])
