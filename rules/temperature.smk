rule temperature:
    """Rotational temperature of every species with lines of different upper energy (joint fit of T and Q)."""
    input:
        stacks=stack_files(),
        catalogue=catalogue_files(),
    output:
        f"{OUT}/temperature.ecsv",
    params:
        settings=settings_of("catalogue"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/temperature.log",
    benchmark:
        f"{OUT}/benchmarks/temperature.tsv"
    resources:
        mem_mb=500,
        runtime=5,
    script:
        "scripts/temperature.py"
