"""Rule 'forecast': thin wrapper around pipeline.workflow.forecast.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import forecast
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    forecast.run(snakemake.input.budget, settings, snakemake.output[0])
end_of_job()
