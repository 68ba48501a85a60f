"""Rule 'dust': thin wrapper around pipeline.workflow.dust.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import dust
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    dust.run(list(snakemake.input.bands), settings, snakemake.output.afrho, snakemake.output.dust)
end_of_job()
