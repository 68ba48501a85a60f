rule comoving:
    """One line's sub-cube on a velocity axis in the target's rest frame."""
    input:
        cube=cube_path,
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
        catalogue=catalogue_files(),
    output:
        f"{OUT}/comoving/{{cube}}/{{line}}.fits",
    params:
        settings=settings_of("catalogue", "coma", "limits.window_factor", "apertures_km", "apertures_arcsec", "comoving", "quality.dq_bad_bits", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/comoving/{{cube}}/{{line}}.log",
    benchmark:
        f"{OUT}/benchmarks/comoving/{{cube}}/{{line}}.tsv"
    resources:
        mem_mb=2000,
        runtime=20,
    script:
        "scripts/comoving.py"
