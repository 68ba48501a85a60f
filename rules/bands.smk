rule bands:
    """Infrared cube: band fluxes and production rates of every covered band, and the dust continuum (Afrho)."""
    input:
        cube=cube_path,
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
        catalogue=catalogue_files(),
    output:
        f"{OUT}/bands/{{cube}}.fits",
    params:
        bands=lambda w: BANDS[w.cube],
        settings=settings_of("catalogue", "apertures_km", "apertures_arcsec", "infrared", "dust.wavelengths_um", "dust.half_width_um", "coma", "quality", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/bands/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/bands/{{cube}}.tsv"
    resources:
        mem_mb=2000,
        runtime=20,
    script:
        "scripts/bands.py"
