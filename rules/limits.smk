rule limits:
    """Over all epochs: each species' stack, the rotational temperatures, each species' Q, sigma_Q, detections and
    upper limits, all in one table (limits.ecsv), and activity-law fits across epochs (activity.ecsv)."""
    input:
        epochs=epoch_folders("stack_epoch"),
        geometry=geometry_files(),
        catalogue=catalogue_files(),
    output:
        stacks=expand(f"{OUT}/stack/{{species}}.fits", species=SPECIES),
        temperature=f"{OUT}/temperature.ecsv",
        species=expand(f"{OUT}/limits/{{species}}.ecsv", species=SPECIES),
        ecsv=report(f"{OUT}/limits.ecsv", caption="../report/limits.rst", category="Tables"),
        json=f"{OUT}/limits.json",
        activity=f"{OUT}/activity.ecsv",
    params:
        epochs=stack_epoch_files(),
        species=SPECIES,
        settings=settings_of("catalogue", "coma", "excitation", "comoving", "interferometer", "limits.nsigma", "limits.activity_slope"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/limits.log",
    benchmark:
        f"{OUT}/benchmarks/limits.tsv"
    resources:
        mem_mb=1000,
        runtime=20,
    script:
        "scripts/limits.py"
