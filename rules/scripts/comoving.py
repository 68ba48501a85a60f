"""Rule 'comoving': thin wrapper around pipeline.workflow.comoving.run."""
from pipeline.workflow import comoving
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    comoving.run(snakemake.input.cube, snakemake.input.geometry, snakemake.wildcards.line,  # noqa: F821
                 snakemake.config, snakemake.output[0], snakemake.params.spectral_response)  # noqa: F821
