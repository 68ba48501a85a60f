rule injection_epoch:
    """One epoch's injection placements of one species measured: the data there and the model coma per unit Q."""
    input:
        subcubes=subcube_folders_of_species,
        bands=band_files_of_species,
        cubes=ir_cubes_of_species,
        stack_inputs=f"{OUT}/stack_epoch/{{species}}/{{epoch}}.fits",
        water=water_of_epoch_nonlte,
        catalogue=catalogue_files(),
        molecular_data=molecular_data_files(),
    output:
        f"{OUT}/injection_epoch/{{species}}/{{epoch}}.ecsv",
    params:
        subcubes=subcubes_of_species,
        settings=settings_of("catalogue", "coma", "excitation", "limits.window_factor", "comoving", "apertures_km", "apertures_arcsec", "infrared", "interferometer", "cubes", "quality", epoch=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/injection_epoch/{{species}}/{{epoch}}.log",
    benchmark:
        f"{OUT}/benchmarks/injection_epoch/{{species}}/{{epoch}}.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/injection_epoch.py"


rule injection:
    """Model comae at the limit and at the rate the push needs, recovered from every epoch's measurements (every
    species in one job)."""
    input:
        epochs=flat(injection_epoch_files()),
        limits=f"{OUT}/limits.ecsv",
        budget=f"{OUT}/budget.ecsv",
    output:
        injection_files(),
    params:
        epochs=injection_epoch_files(),
        settings=settings_of("excitation"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/injection.log",
    benchmark:
        f"{OUT}/benchmarks/injection.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/injection.py"
