rule geometry:
    """Target geometry (r_h, delta, delta_dot, phase, sky position) at one cube's mid-time."""
    input:
        cube=cube_path,
        ephemeris=ephemeris_input,
    output:
        f"{OUT}/geometry/{{cube}}.ecsv",
    params:
        settings=settings_of("target", "observatory", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/geometry/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/geometry/{{cube}}.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/geometry.py"
