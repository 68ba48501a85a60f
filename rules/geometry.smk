rule geometry:
    """Target geometry (r_h, delta, delta_dot, phase, sky position) at one cube's mid-time."""
    input:
        cube=cube_path,
        ephemeris=ephemeris_input,
    output:
        f"{OUT}/geometry/{{cube}}.ecsv",
    params:
        epoch=lambda w: CUBES[w.cube].epoch,
        time=lambda w: CUBES[w.cube].time,
        tracked=lambda w: CUBES[w.cube].tracked,
        position=lambda w: CUBES[w.cube].position,
        offset=lambda w: list(CUBES[w.cube].offset),
        target=canon(config["target"]),
        observatory=canon(config["observatory"]),
    log:
        f"{OUT}/logs/geometry/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/geometry/{{cube}}.tsv"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "scripts/geometry.py"
