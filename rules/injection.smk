rule injection:
    """Model comae at the limit and at the rate the push needs, recovered from every epoch's measurements (every
    species in one job)."""
    input:
        epochs=epoch_folders("injection_epoch"),
        limits=f"{OUT}/limits.ecsv",
        budget=f"{OUT}/budget.ecsv",
    output:
        injection_files(),
    params:
        epochs=injection_epoch_files(),
        settings=settings_of("excitation"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/injection.log",
    benchmark:
        f"{OUT}/benchmarks/injection.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/injection.py"
