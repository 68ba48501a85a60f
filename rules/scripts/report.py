"""Rule 'report': thin wrapper around pipeline.workflow.report.run."""
from pipeline.workflow import report
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    report.run(snakemake.input, snakemake.output, snakemake.config)  # noqa: F821
