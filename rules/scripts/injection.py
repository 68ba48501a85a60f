"""Rule 'injection': thin wrapper around pipeline.workflow.injection.run."""
from pipeline.workflow import injection
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    injection.run(list(snakemake.input.subcubes), snakemake.wildcards.species, snakemake.input.limits,  # noqa: F821
                  snakemake.input.budget, snakemake.config, snakemake.output[0],  # noqa: F821
                  list(snakemake.input.bands))  # noqa: F821
