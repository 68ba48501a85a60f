"""Rule 'extract': thin wrapper around pipeline.workflow.extract.run."""
from pipeline.workflow import extract
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    extract.run(snakemake.input[0], snakemake.config, snakemake.output[0])  # noqa: F821
