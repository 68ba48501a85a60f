rule dust:
    """Afrho of every infrared cube (afrho.ecsv); colour and dust production per epoch (dust.ecsv)."""
    input:
        bands=bands_files(),
        # without infrared cubes the (empty) dust tables wait for the geometry, so a failing cube writes nothing
        geometry=[] if bands_files() else geometry_files(),
    output:
        afrho=f"{OUT}/afrho.ecsv",
        dust=report(f"{OUT}/dust.ecsv", caption="../report/dust.rst", category="Tables"),
    params:
        settings=settings_of("dust"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/dust.log",
    benchmark:
        f"{OUT}/benchmarks/dust.tsv"
    resources:
        mem_mb=500,
        runtime=5,
    script:
        "scripts/dust.py"
