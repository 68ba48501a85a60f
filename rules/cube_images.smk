rule cube_images:
    """One cube's integrated-line (or band) and continuum images with the predicted position, apertures and beam."""
    input:
        cube=cube_path,
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
        catalogue=catalogue_files(),
    output:
        f"{OUT}/figures/cubes/{{cube}}.png",
    params:
        lines=lambda w: LINES[w.cube],
        bands=lambda w: BANDS[w.cube],
        settings=settings_of("catalogue", "coma", "limits.window_factor", "apertures_km", "apertures_arcsec", "infrared", "quality.dq_bad_bits", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/cube_images/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/cube_images/{{cube}}.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/cube_images.py"
