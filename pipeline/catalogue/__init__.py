"""The molecular catalogue: species, lines and infrared bands (data in ``data/``), and which of them a cube covers."""

from pipeline.catalogue.entries import *  # noqa: F401,F403  (the catalogue's public names)
from pipeline.catalogue.entries import __all__  # noqa: F401
