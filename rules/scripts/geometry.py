"""Rule 'geometry': thin wrapper around pipeline.workflow.geometry.run."""
from pipeline.workflow import geometry
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    geometry.run(snakemake.input.cube, snakemake.wildcards.cube, snakemake.params.epoch,  # noqa: F821
                 snakemake.params.time, snakemake.config, snakemake.output[0],  # noqa: F821
                 snakemake.params.tracked, snakemake.params.position, snakemake.params.offset)  # noqa: F821
