rule epoch:
    """One epoch, every species its cubes cover: the spectra and band measurements in Q units (the stack's inputs)
    and every injection placement measured (the data there and the model coma per unit Q), kept so that a new
    epoch does not redo them."""
    input:
        epoch_inputs,
        catalogue=catalogue_files(),
        molecular_data=molecular_data_files(),
    output:
        stack=directory(f"{OUT}/stack_epoch/{{epoch}}"),
        injection=directory(f"{OUT}/injection_epoch/{{epoch}}"),
    params:
        plan=epoch_plan,
        settings=settings_of("catalogue", "coma", "excitation", "limits.window_factor", "comoving", "apertures_km", "apertures_arcsec", "infrared", "interferometer", "cubes", "quality", epoch=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/epoch/{{epoch}}.log",
    benchmark:
        f"{OUT}/benchmarks/epoch/{{epoch}}.tsv"
    resources:
        mem_mb=2000,
        runtime=60,
    script:
        "scripts/epoch.py"
