"""Rule 'injection_epoch': thin wrapper around pipeline.workflow.injection.run_epoch."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import injection
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    injection.run_epoch(list(snakemake.params.subcubes), snakemake.wildcards.species, snakemake.wildcards.epoch,
                        settings, snakemake.output[0], list(snakemake.input.bands), snakemake.input.stack_inputs,
                        water_path=snakemake.input.water[0] if snakemake.input.water else None)
