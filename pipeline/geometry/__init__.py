"""Where the target is: ephemeris tables, orbits, per-cube observing geometry, spectral frames, the comoving cut."""
