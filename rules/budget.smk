rule budget:
    """Required mass loss against the gas limits, per driver species."""
    input:
        limits=f"{OUT}/limits.ecsv",
        geometry=geometry_files(),
        dust=f"{OUT}/dust.ecsv",
        catalogue=catalogue_files(),
    output:
        ecsv=report(f"{OUT}/budget.ecsv", caption="../report/budget.rst", category="Tables"),
        json=f"{OUT}/budget.json",
        exclusion=f"{OUT}/exclusion.ecsv",
        water=f"{OUT}/water_inferred.ecsv",
        zeta=f"{OUT}/zeta.ecsv",
    params:
        settings=settings_of("budget", "campaign", "catalogue", "target"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/budget.log",
    benchmark:
        f"{OUT}/benchmarks/budget.tsv"
    resources:
        mem_mb=500,
        runtime=5,
    script:
        "scripts/budget.py"
