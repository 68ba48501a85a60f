rule forecast:
    """Predicted limits and significance of the needed gas for the planned epochs of the config."""
    input:
        budget=f"{OUT}/budget.ecsv",
        ephemeris=campaign_geometry_inputs(),
        catalogue=catalogue_files(),
        molecular_data=molecular_data_files(),
    output:
        f"{OUT}/forecast.ecsv",
    params:
        settings=settings_of("catalogue", "planned", "comoving", "limits.nsigma", "limits.window_factor", "excitation", "coma", "target", "observatory", "apertures_km", "apertures_arcsec", "interferometer", "quality.max_masked_share"),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/forecast.log",
    benchmark:
        f"{OUT}/benchmarks/forecast.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/forecast.py"
