"""Rule 'cube_images': thin wrapper around pipeline.workflow.cube_images.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import cube_images
from pipeline.workflow.common import rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    cube_images.run(snakemake.input.geometry, list(snakemake.params.lines), list(snakemake.params.bands), settings,
                    snakemake.output[0])
