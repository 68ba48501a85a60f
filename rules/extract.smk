rule extract:
    """Aperture spectra (Jy per channel) and their measured noise."""
    input:
        f"{OUT}/comoving/{{cube}}/{{line}}.fits",
    output:
        f"{OUT}/spectra/{{cube}}/{{line}}.fits",
    params:
        apertures=canon([config.get("apertures_km", []), config.get("apertures_arcsec", [])]),
        window_factor=config["limits"]["window_factor"],
        coma=canon(config["coma"]),
    log:
        f"{OUT}/logs/extract/{{cube}}/{{line}}.log",
    benchmark:
        f"{OUT}/benchmarks/extract/{{cube}}/{{line}}.tsv"
    resources:
        mem_mb=1000,
        runtime=20,
    script:
        "scripts/extract.py"
