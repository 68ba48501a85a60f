"""gasledger: production rates and limits from spectral line cubes, set against
the mass loss that a non-gravitational acceleration demands.

Importing the package configures astropy for offline use (see
:mod:`pipeline.offline`).
"""

from importlib.metadata import PackageNotFoundError, version as _version

from pipeline import offline as _offline

try:
    __version__ = _version("gasledger")
except PackageNotFoundError:  # running from a checkout that was not installed
    __version__ = "0+unknown"

__all__ = ["__version__"]

_offline.configure_astropy_offline()
