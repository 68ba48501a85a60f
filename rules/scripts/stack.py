"""Rule 'stack': thin wrapper around pipeline.stages.stack.run."""
from pipeline.stages import stack
from pipeline.stages.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    stack.run(list(snakemake.input.spectra) + list(snakemake.input.bands), snakemake.wildcards.species, snakemake.config,  # noqa: F821
              snakemake.output[0])  # noqa: F821
