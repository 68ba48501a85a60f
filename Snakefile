# gasledger: raw line cubes -> production rates and limits -> mass budget -> report.
# Run with:  gasledger run config/config.yaml --cores 2   (or: snakemake --cores 2 --configfile config/config.yaml)
from snakemake.utils import min_version

min_version("8.20")


# The demo campaign is the default; a --configfile replaces it whole (no merging of two campaigns).
if not config:

    configfile: "config/config.yaml"


report: "report/workflow.rst"


include: "rules/common.smk"
include: "rules/cube.smk"
include: "rules/epoch.smk"
include: "rules/campaign.smk"


rule all:
    input:
        final_outputs(),
