rule extract:
    """Aperture spectra (Jy per channel) and their measured noise."""
    input:
        subcube=f"{OUT}/comoving/{{cube}}/{{line}}.fits",
        catalogue=catalogue_files(),
    output:
        f"{OUT}/spectra/{{cube}}/{{line}}.fits",
    params:
        settings=settings_of("catalogue", "coma", "limits.window_factor", "apertures_km", "apertures_arcsec", "comoving", "quality.max_masked_share", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/extract/{{cube}}/{{line}}.log",
    benchmark:
        f"{OUT}/benchmarks/extract/{{cube}}/{{line}}.tsv"
    resources:
        mem_mb=1000,
        runtime=20,
    script:
        "scripts/extract.py"
