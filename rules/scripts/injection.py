"""Rule 'injection': thin wrapper around pipeline.workflow.campaign.run_injections."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import campaign
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    epochs = dict(snakemake.params.epochs)
    campaign.run_injections(epochs, snakemake.input.limits, snakemake.input.budget, settings,
                            dict(zip(epochs, snakemake.output)))
end_of_job()
