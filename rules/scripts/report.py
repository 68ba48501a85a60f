"""Rule 'report': thin wrapper around pipeline.stages.report.run."""
from pipeline.stages import report
from pipeline.stages.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    report.run(snakemake.input, snakemake.output, snakemake.config)  # noqa: F821
