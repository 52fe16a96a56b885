"""Bayesian analysis of pass/fail (attribute) inspection studies.

Importing the package is cheap: PyMC, nutpie and matplotlib are imported only
by the modules that need them, when they are first used.
"""

__version__ = "0.1.0"

DEFAULT_PROB = 0.95
"""Default probability of every interval in the project."""

__all__ = ["DEFAULT_PROB", "__version__"]
