# One job per cube: everything a cube yields on its own (its geometry, its lines' sub-cubes and spectra or its bands,
# its images). A new cube reruns only its own job; the per-epoch and campaign steps read the products below.


rule cube_lines:
    """A millimetre cube: the target's geometry at its mid-time, each covered line's sub-cube in the target's rest
    frame and its aperture spectra, and the cube's integrated-line and continuum images."""
    input:
        cube=cube_path,
        ephemeris=ephemeris_input,
        catalogue=catalogue_files(),
    output:
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
        subcubes=directory(f"{OUT}/comoving/{{cube}}"),
        spectra=directory(f"{OUT}/spectra/{{cube}}"),
        image=f"{OUT}/figures/cubes/{{cube}}.png",
    wildcard_constraints:
        cube=cube_id_pattern(infrared=False),
    params:
        lines=lambda w: LINES[w.cube],
        settings=settings_of("target", "observatory", "catalogue", "coma", "limits.window_factor", "apertures_km", "apertures_arcsec", "comoving", "quality", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/cube/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/cube/{{cube}}.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/cube_lines.py"


rule cube_bands:
    """An infrared cube: the target's geometry at its mid-time, band fluxes and production rates of every covered
    band and the dust continuum (Afrho), and the cube's band and continuum images."""
    input:
        cube=cube_path,
        ephemeris=ephemeris_input,
        catalogue=catalogue_files(),
    output:
        geometry=f"{OUT}/geometry/{{cube}}.ecsv",
        bands=f"{OUT}/bands/{{cube}}.fits",
        image=f"{OUT}/figures/cubes/{{cube}}.png",
    wildcard_constraints:
        cube=cube_id_pattern(infrared=True),
    params:
        bands=lambda w: BANDS[w.cube],
        settings=settings_of("target", "observatory", "catalogue", "apertures_km", "apertures_arcsec", "infrared", "dust.wavelengths_um", "dust.half_width_um", "coma", "quality", cube=True),
        code=CODE_VERSION,
    log:
        f"{OUT}/logs/cube/{{cube}}.log",
    benchmark:
        f"{OUT}/benchmarks/cube/{{cube}}.tsv"
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "scripts/cube_bands.py"
