rule limits_species:
    """Q, sigma_Q, detections and upper limits of one species."""
    input:
        stack=f"{OUT}/stack/{{species}}.fits",
        temperature=f"{OUT}/temperature.ecsv",
        catalogue=catalogue_files(),
    output:
        f"{OUT}/limits/{{species}}.ecsv",
    params:
        settings=settings_of("catalogue", "limits.nsigma", "coma", "excitation"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/limits/{{species}}.log",
    benchmark:
        f"{OUT}/benchmarks/limits/{{species}}.tsv"
    resources:
        mem_mb=500,
        runtime=10,
    script:
        "scripts/limits_species.py"


rule limits:
    """All species' limits in one table (limits.ecsv), and activity-law fits across epochs (activity.ecsv)."""
    input:
        species=expand(f"{OUT}/limits/{{species}}.ecsv", species=SPECIES),
        geometry=geometry_files(),
    output:
        ecsv=report(f"{OUT}/limits.ecsv", caption="../report/limits.rst", category="Tables"),
        json=f"{OUT}/limits.json",
        activity=f"{OUT}/activity.ecsv",
    params:
        settings=settings_of("limits.nsigma", "limits.activity_slope", "coma", "excitation"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/limits.log",
    benchmark:
        f"{OUT}/benchmarks/limits.tsv"
    resources:
        mem_mb=500,
        runtime=5,
    script:
        "scripts/limits.py"
