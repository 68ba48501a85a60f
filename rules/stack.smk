rule stack_epoch:
    """One epoch's spectra of one species in Q units (the stack's inputs), kept so a new epoch does not redo them."""
    input:
        spectra=spectra_folders_of_species,
        bands=band_files_of_species,
        water=water_of_epoch,
        catalogue=catalogue_files(),
        molecular_data=molecular_data_files(),
    output:
        f"{OUT}/stack_epoch/{{species}}/{{epoch}}.fits",
    params:
        spectra=spectra_of_species,
        settings=settings_of("catalogue", "coma", "excitation", "comoving", "interferometer"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/stack_epoch/{{species}}/{{epoch}}.log",
    benchmark:
        f"{OUT}/benchmarks/stack_epoch/{{species}}/{{epoch}}.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/stack_epoch.py"

