"""Rule 'dust': thin wrapper around pipeline.workflow.dust.run."""
from pipeline.workflow import dust
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    dust.run(list(snakemake.input.bands), snakemake.config, snakemake.output.afrho, snakemake.output.dust)  # noqa: F821
