"""Rule 'budget': thin wrapper around pipeline.workflow.budget.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import budget
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    budget.run(snakemake.input.limits, list(snakemake.input.geometry), settings, snakemake.output.ecsv,
               snakemake.output.json, snakemake.output.exclusion, dust_path=snakemake.input.dust,
               out_water=snakemake.output.water, out_zeta=snakemake.output.zeta)
end_of_job()
