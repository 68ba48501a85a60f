"""Rule 'limits': thin wrapper around pipeline.workflow.limits.run_join."""
from pipeline.workflow import limits
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    limits.run_join(list(snakemake.input.species), snakemake.config, snakemake.output.ecsv,  # noqa: F821
                    snakemake.output.json, list(snakemake.input.geometry), snakemake.output.activity)  # noqa: F821
