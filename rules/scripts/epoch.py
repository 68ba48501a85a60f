"""Rule 'epoch': thin wrapper around pipeline.workflow.epoch.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import epoch
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    plan = [epoch.SpeciesPlan(**entry) for entry in snakemake.params.plan]
    epoch.run(plan, snakemake.wildcards.epoch, settings, snakemake.output.stack, snakemake.output.injection)
end_of_job()
