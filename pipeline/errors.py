"""Error and warning classes of gasledger.

Every error subclasses both :class:`GasledgerError` and the standard exception
type that fits it, so callers can catch either: :class:`ValueError` for a bad
value (most of them), :class:`TypeError` for an argument of the wrong kind
(:class:`GasledgerTypeError`).  Messages name the file, the config key or the
header card, what was found and what was expected.  Soft problems are warnings
of a :class:`GasledgerWarning` subclass.
"""

__all__ = [
    "DriftWarning",
    "GasledgerError",
    "GasledgerTypeError",
    "ConfigError",
    "CubeError",
    "EphemerisError",
    "CatalogueError",
    "CoverageError",
    "LimitError",
    "BudgetError",
    "GasledgerWarning",
    "NoiseWarning",
    "OpacityWarning",
    "SpacingWarning",
    "MotionWarning",
]


class GasledgerError(Exception):
    """Base class of every error raised by gasledger."""


class GasledgerTypeError(GasledgerError, TypeError):
    """An argument is the wrong kind of object, such as a plain number where a Quantity is needed."""


class ConfigError(GasledgerError, ValueError):
    """A campaign configuration key has a wrong, missing or unknown value."""


class CubeError(GasledgerError, ValueError):
    """A cube file cannot be used: bad FITS, missing or contradictory header cards."""


class EphemerisError(GasledgerError, ValueError):
    """An ephemeris table or set of orbital elements cannot give the geometry asked for."""


class CatalogueError(GasledgerError, ValueError):
    """The molecular catalogue lacks a species, line or column that is needed."""


class CoverageError(GasledgerError, ValueError):
    """A line, window or aperture asked for is not covered by the data."""


class LimitError(GasledgerError, ValueError):
    """An argument of a limit or interval calculation is out of its domain."""


class BudgetError(GasledgerError, ValueError):
    """An argument of the mass or momentum budget is out of its physical domain."""


class GasledgerWarning(UserWarning):
    """Base class of gasledger's warnings: a soft problem the user should know about."""


class NoiseWarning(GasledgerWarning):
    """The noise estimate rests on fewer samples than it should."""


class OpacityWarning(GasledgerWarning):
    """A line is bright enough that the optically thin assumption may fail."""


class SpacingWarning(GasledgerWarning):
    """The ephemeris table is too coarse for the accuracy asked for."""


class MotionWarning(GasledgerWarning):
    """The target moved by a sizeable fraction of the beam during the exposure."""


class DriftWarning(GasledgerWarning):
    """A cube's time lies so far from the osculating elements' epoch that two-body drift may matter."""
