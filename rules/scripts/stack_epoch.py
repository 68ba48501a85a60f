"""Rule 'stack_epoch': thin wrapper around pipeline.workflow.stack.run_epoch."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import stack
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    stack.run_epoch(list(snakemake.params.spectra) + list(snakemake.input.bands), snakemake.wildcards.species,
                    snakemake.wildcards.epoch, settings, snakemake.output[0],
                    water_path=snakemake.input.water[0] if snakemake.input.water else None)
