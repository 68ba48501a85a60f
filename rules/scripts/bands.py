"""Rule 'bands': thin wrapper around pipeline.workflow.bands.run."""
from pipeline.workflow import bands
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    bands.run(snakemake.input.cube, snakemake.input.geometry, list(snakemake.params.bands),  # noqa: F821
              snakemake.config, snakemake.output[0], snakemake.params.resolving_power)  # noqa: F821
