"""Workflow stages: one module per Snakemake rule, each with a ``run`` function.

A stage reads its inputs, calls the physics in :mod:`pipeline`, and writes its
outputs atomically with a provenance record. Rule scripts only unpack the
Snakemake object and call ``run``.
"""

__all__ = ["common", "plan", "geometry", "comoving", "extract", "stack", "limits", "budget", "report"]
