"""Rule 'stack': thin wrapper around pipeline.workflow.stack.run."""
from pipeline.workflow import stack
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    stack.run(list(snakemake.input.spectra) + list(snakemake.input.bands), snakemake.wildcards.species, snakemake.config,  # noqa: F821
              snakemake.output[0])  # noqa: F821
