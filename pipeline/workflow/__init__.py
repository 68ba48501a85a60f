"""One module per Snakemake rule, each with a ``run`` function.

A workflow module reads its input products, calls the physics in :mod:`pipeline`, and writes its outputs
atomically with a provenance record. Rule scripts only unpack the Snakemake object and call ``run``. No module of
the package imports from here.
"""
