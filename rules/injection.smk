rule injection:
    """Model comae at the limit and at the rate the push needs, injected into the real sub-cubes and measured."""
    input:
        subcubes=subcubes_of_species,
        bands=band_files_of_species,
        cubes=ir_cubes_of_species,
        limits=f"{OUT}/limits.ecsv",
        budget=f"{OUT}/budget.ecsv",
        catalogue=catalogue_files(),
    output:
        f"{OUT}/injection/{{species}}.ecsv",
    params:
        settings=settings_of("catalogue", "coma", "excitation", "limits.window_factor", "comoving", "apertures_km", "apertures_arcsec", "infrared", "interferometer", "cubes", "quality"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/injection/{{species}}.log",
    benchmark:
        f"{OUT}/benchmarks/injection/{{species}}.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/injection.py"
