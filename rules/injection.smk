rule injection:
    """Model comae at the limit and at the rate the push needs, injected into the real sub-cubes and measured."""
    input:
        subcubes=subcubes_of_species,
        bands=band_files_of_species,
        cubes=ir_cubes_of_species,
        limits=f"{OUT}/limits.ecsv",
        budget=f"{OUT}/budget.ecsv",
    output:
        f"{OUT}/injection/{{species}}.ecsv",
    params:
        limits=canon(config["limits"]),
        coma=canon(config["coma"]),
        excitation=canon(config["excitation"]),
        infrared=canon(config["infrared"]),
    log:
        f"{OUT}/logs/injection/{{species}}.log",
    benchmark:
        f"{OUT}/benchmarks/injection/{{species}}.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/injection.py"
