rule stack:
    """Spectra of one species in Q units, combined per epoch and over all epochs."""
    input:
        spectra=spectra_of_species,
        bands=band_files_of_species,
        catalogue=catalogue_files(),
    output:
        f"{OUT}/stack/{{species}}.fits",
    params:
        settings=settings_of("catalogue", "coma", "excitation", "comoving", "interferometer"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/stack/{{species}}.log",
    benchmark:
        f"{OUT}/benchmarks/stack/{{species}}.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/stack.py"
