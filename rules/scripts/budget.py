"""Rule 'budget': thin wrapper around pipeline.workflow.budget.run."""
from pipeline.workflow import budget
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    budget.run(snakemake.input.limits, list(snakemake.input.geometry), snakemake.config,  # noqa: F821
               snakemake.output.ecsv, snakemake.output.json, snakemake.output.exclusion,  # noqa: F821
               dust_path=snakemake.input.dust)  # noqa: F821
