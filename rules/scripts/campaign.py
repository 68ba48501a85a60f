"""Rule 'campaign': thin wrapper around pipeline.workflow.campaign.run."""
# snakemake is injected by Snakemake
# ruff: noqa: F821
from types import SimpleNamespace

from pipeline.workflow import campaign
from pipeline.workflow.common import end_of_job, rule_settings, setup_logging, stage_errors

log = setup_logging(snakemake.log[0])
with stage_errors(log):
    settings = rule_settings(snakemake)
    out, species = snakemake.output, list(snakemake.params.species)
    files = campaign.CampaignFiles(
        stack_epochs=dict(snakemake.params.stack_epochs), injection_epochs=dict(snakemake.params.injection_epochs),
        geometry=list(snakemake.input.geometry), bands=list(snakemake.input.bands),
        cube_images=list(snakemake.input.cube_images), line_spectra=list(snakemake.params.line_spectra),
        stacks=dict(zip(species, out.stacks)), species_limits=dict(zip(species, out.species_limits)),
        injections=dict(zip(species, out.injections)),
        outputs=SimpleNamespace(**{name: getattr(out, name) for name in out.keys()}))
    campaign.run(files, settings, workers=snakemake.threads)
end_of_job()
