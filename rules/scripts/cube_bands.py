"""Rule 'cube_bands': thin wrapper around pipeline.workflow.cube.run_bands."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import cube
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    out = snakemake.output
    cube.run_bands(settings, list(snakemake.params.bands), out.geometry, out.bands, out.image)
end_of_job()
