rule dust:
    """Afrho of every infrared cube (afrho.ecsv); colour and dust production per epoch (dust.ecsv)."""
    input:
        bands=bands_files(),
        geometry=geometry_files(),  # so that a campaign without infrared cubes still writes nothing before them
    output:
        afrho=f"{OUT}/afrho.ecsv",
        dust=report(f"{OUT}/dust.ecsv", caption="../report/dust.rst", category="Tables"),
    params:
        dust=canon(config["dust"]),
    log:
        f"{OUT}/logs/dust.log",
    benchmark:
        f"{OUT}/benchmarks/dust.tsv"
    resources:
        mem_mb=500,
        runtime=5,
    script:
        "scripts/dust.py"
