rule forecast:
    """Predicted limits and significance of the needed gas for the planned epochs of the config."""
    input:
        budget=f"{OUT}/budget.ecsv",
        ephemeris=ephemeris_input,
    output:
        f"{OUT}/forecast.ecsv",
    params:
        planned=canon(config.get("planned", [])),
        limits=canon(config["limits"]),
        coma=canon(config["coma"]),
    log:
        f"{OUT}/logs/forecast.log",
    benchmark:
        f"{OUT}/benchmarks/forecast.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/forecast.py"
