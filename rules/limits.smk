rule limits_species:
    """Q, sigma_Q, detections and upper limits of one species."""
    input:
        f"{OUT}/stack/{{species}}.fits",
    output:
        f"{OUT}/limits/{{species}}.ecsv",
    params:
        limits=canon(config["limits"]),
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
        activity_slope=config["limits"]["activity_slope"],
    log:
        f"{OUT}/logs/limits.log",
    benchmark:
        f"{OUT}/benchmarks/limits.tsv"
    resources:
        mem_mb=500,
        runtime=5,
    script:
        "scripts/limits.py"
