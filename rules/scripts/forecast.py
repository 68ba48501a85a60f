"""Rule 'forecast': thin wrapper around pipeline.workflow.forecast.run."""
from pipeline.workflow import forecast
from pipeline.workflow.common import setup_logging, stage_errors

log = setup_logging(snakemake.log[0])  # noqa: F821 - injected by Snakemake
with stage_errors(log):
    eph = list(snakemake.input.ephemeris)  # noqa: F821
    forecast.run(snakemake.input.budget, snakemake.config, snakemake.output[0], eph[0] if eph else None)  # noqa: F821
