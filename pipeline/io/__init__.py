"""Data in and out: cube reading, inter-stage products, atomic writes, provenance records."""
