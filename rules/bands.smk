rule bands:
    """Infrared cube: band fluxes and production rates of every covered band, and the dust continuum (Afrho)."""
    input:
        cube=cube_path,
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
    output:
        f"{OUT}/bands/{{cube}}.fits",
    params:
        bands=lambda w: BANDS[w.cube],
        resolving_power=lambda w: CUBES[w.cube].resolving_power,
        infrared=canon(config["infrared"]),
        dust=canon(config["dust"]),
        coma=canon(config["coma"]),
        apertures=canon([config.get("apertures_km", []), config.get("apertures_arcsec", [])]),
    log:
        f"{OUT}/logs/bands/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/bands/{{cube}}.tsv"
    resources:
        mem_mb=2000,
        runtime=20,
    script:
        "scripts/bands.py"
