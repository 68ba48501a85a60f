"""Rule 'limits_species': thin wrapper around pipeline.workflow.limits.run_species."""
from pipeline.workflow import limits
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    limits.run_species(snakemake.input[0], snakemake.config, snakemake.output[0])  # noqa: F821
