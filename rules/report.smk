rule report:
    """One self-contained HTML page with figures and tables, and the figures as PNG files."""
    input:
        limits=f"{OUT}/limits.ecsv",
        budget_ecsv=f"{OUT}/budget.ecsv",
        budget_json=f"{OUT}/budget.json",
        geometry=geometry_files(),
        stacks=stack_files(),
        temperature=f"{OUT}/temperature.ecsv",
        injection=injection_files(),
        exclusion=f"{OUT}/exclusion.ecsv",
        water=f"{OUT}/water_inferred.ecsv",
        zeta=f"{OUT}/zeta.ecsv",
        activity=f"{OUT}/activity.ecsv",
        forecast=f"{OUT}/forecast.ecsv",
        bands=bands_files(),
        dust=f"{OUT}/dust.ecsv",
        catalogue=catalogue_files(),
        molecular_data=molecular_data_files(),
        cube_images=[f"{OUT}/figures/cubes/{cid}.png" for cid in CUBES],
        line_spectra=spectra_folders(),
    output:
        html=f"{OUT}/report.html",
        spectra=report(f"{OUT}/figures/stacked_spectra.png", caption="../report/spectra.rst", category="Figures"),
        budget=report(f"{OUT}/figures/mass_budget.png", caption="../report/budget_figure.rst", category="Figures"),
        sweep=report(f"{OUT}/figures/temperature_sweep.png", caption="../report/sweep.rst", category="Figures"),
        infrared=report(f"{OUT}/figures/infrared_spectra.png", caption="../report/infrared.rst", category="Figures"),
        campaign=report(f"{OUT}/figures/campaign.png", caption="../report/campaign.rst", category="Figures"),
        tracers=report(f"{OUT}/figures/tracers.png", caption="../report/tracers.rst", category="Figures"),
    params:
        line_spectra=spectra_files(),
        settings=settings_of(*CONFIG_KEYS),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/report.log",
    benchmark:
        f"{OUT}/benchmarks/report.tsv"
    threads: 2          # the cubes' spectra figures that changed are drawn on two processes
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/report.py"
