"""Rule 'limits': thin wrapper around pipeline.workflow.campaign.run_limits."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import campaign
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    out, species = snakemake.output, list(snakemake.params.species)
    campaign.run_limits(dict(snakemake.params.epochs), settings, dict(zip(species, out.stacks)), out.temperature,
                        dict(zip(species, out.species)), out.ecsv, out.json, list(snakemake.input.geometry),
                        out.activity)
end_of_job()
