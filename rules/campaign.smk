rule campaign:
    """Over all epochs, in one job: each species' stack, the rotational temperatures, each species' Q, sigma_Q,
    detections and upper limits (limits.ecsv) and activity-law fits (activity.ecsv); the dust (afrho.ecsv,
    dust.ecsv); the mass budget (budget.ecsv, budget.json, exclusion, water inferred, zeta); each species'
    injection-recovery; the forecast for the planned epochs; the report (report.html and its figures)."""
    input:
        stack_epochs=epoch_folders("stack_epoch"),
        injection_epochs=epoch_folders("injection_epoch"),
        geometry=geometry_files(),
        bands=bands_files(),
        cube_images=[f"{OUT}/figures/cubes/{cid}.png" for cid in CUBES],
        line_spectra=spectra_folders(),
        ephemeris=campaign_geometry_inputs(),
        catalogue=catalogue_files(),
        molecular_data=molecular_data_files(),
    output:
        stacks=stack_files(),
        species_limits=expand(f"{OUT}/limits/{{species}}.ecsv", species=SPECIES),
        injections=injection_files(),
        temperature=f"{OUT}/temperature.ecsv",
        limits=report(f"{OUT}/limits.ecsv", caption="../report/limits.rst", category="Tables"),
        limits_json=f"{OUT}/limits.json",
        activity=f"{OUT}/activity.ecsv",
        afrho=f"{OUT}/afrho.ecsv",
        dust=report(f"{OUT}/dust.ecsv", caption="../report/dust.rst", category="Tables"),
        budget_ecsv=report(f"{OUT}/budget.ecsv", caption="../report/budget.rst", category="Tables"),
        budget_json=f"{OUT}/budget.json",
        exclusion=f"{OUT}/exclusion.ecsv",
        water=f"{OUT}/water_inferred.ecsv",
        zeta=f"{OUT}/zeta.ecsv",
        forecast=f"{OUT}/forecast.ecsv",
        html=f"{OUT}/report.html",
        spectra=report(f"{OUT}/figures/stacked_spectra.png", caption="../report/spectra.rst", category="Figures"),
        budget=report(f"{OUT}/figures/mass_budget.png", caption="../report/budget_figure.rst", category="Figures"),
        sweep=report(f"{OUT}/figures/temperature_sweep.png", caption="../report/sweep.rst", category="Figures"),
        infrared=report(f"{OUT}/figures/infrared_spectra.png", caption="../report/infrared.rst", category="Figures"),
        campaign=report(f"{OUT}/figures/campaign.png", caption="../report/campaign.rst", category="Figures"),
        tracers=report(f"{OUT}/figures/tracers.png", caption="../report/tracers.rst", category="Figures"),
    params:
        species=SPECIES,
        stack_epochs=stack_epoch_files(),
        injection_epochs=injection_epoch_files(),
        line_spectra=spectra_files(),
        settings=settings_of(*CONFIG_KEYS),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/campaign.log",
    benchmark:
        f"{OUT}/benchmarks/campaign.tsv"
    threads: 2          # stacks and limits per species on two processes; the cube figures beside the later steps
    resources:
        mem_mb=2000,
        runtime=60,
    script:
        "scripts/campaign.py"
