"""Rule 'extract': thin wrapper around pipeline.stages.extract.run."""
from pipeline.stages import extract
from pipeline.stages.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    extract.run(snakemake.input[0], snakemake.config, snakemake.output[0])  # noqa: F821
