"""Synthetic spectral cubes of an invented campaign, for the demo and the tests.

Everything here is invented: a fictional hyperbolic visitor, a fictional
observing site, made-up epochs and production rates. The cubes are written as
real FITS files, deterministically from a seed, with known injected
production rates, so a run of the workflow on them is an end-to-end check.
"""

from .scenario import Scenario, demo_scenario, small_scenario
from .generate import write_scenario

__all__ = ["Scenario", "demo_scenario", "small_scenario", "write_scenario"]
