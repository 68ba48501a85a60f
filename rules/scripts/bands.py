"""Rule 'bands': thin wrapper around pipeline.stages.bands.run."""
from pipeline.stages import bands
from pipeline.stages.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    bands.run(snakemake.input.cube, snakemake.input.geometry, list(snakemake.params.bands),  # noqa: F821
              snakemake.config, snakemake.output[0], snakemake.params.resolving_power)  # noqa: F821
