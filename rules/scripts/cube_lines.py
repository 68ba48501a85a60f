"""Rule 'cube_lines': thin wrapper around pipeline.workflow.cube.run_lines."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from pipeline.workflow import cube
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    out = snakemake.output
    cube.run_lines(settings, list(snakemake.params.lines), out.geometry, out.subcubes, out.spectra, out.image)
end_of_job()
