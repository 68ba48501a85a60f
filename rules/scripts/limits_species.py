"""Rule 'limits_species': thin wrapper around pipeline.stages.limits.run_species."""
from pipeline.stages import limits
from pipeline.stages.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    limits.run_species(snakemake.input[0], snakemake.config, snakemake.output[0])  # noqa: F821
