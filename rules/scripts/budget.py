"""Rule 'budget': thin wrapper around pipeline.stages.budget.run."""
from pipeline.stages import budget
from pipeline.stages.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    budget.run(snakemake.input.limits, list(snakemake.input.geometry), snakemake.config,  # noqa: F821
               snakemake.output.ecsv, snakemake.output.json, snakemake.output.exclusion,  # noqa: F821
               dust_path=snakemake.input.dust)  # noqa: F821
