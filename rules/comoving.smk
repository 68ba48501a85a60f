rule comoving:
    """One line's sub-cube on a velocity axis in the target's rest frame."""
    input:
        cube=cube_path,
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
    output:
        f"{OUT}/comoving/{{cube}}/{{line}}.fits",
    params:
        spectral_response=lambda w: CUBES[w.cube].spectral_response,
        comoving=canon(config["comoving"]),
        window=config["limits"]["window_factor"],
        coma=canon(config["coma"]),
        apertures=canon([config.get("apertures_km", []), config.get("apertures_arcsec", [])]),
    log:
        f"{OUT}/logs/comoving/{{cube}}/{{line}}.log",
    benchmark:
        f"{OUT}/benchmarks/comoving/{{cube}}/{{line}}.tsv"
    resources:
        mem_mb=2000,
        runtime=20,
    script:
        "scripts/comoving.py"
