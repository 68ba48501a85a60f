"""Rule 'report': thin wrapper around pipeline.workflow.report.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import report
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    report.run(snakemake.input, snakemake.output, settings, list(snakemake.params.line_spectra),
               workers=snakemake.threads)
end_of_job()
