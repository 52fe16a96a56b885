"""Bayesian analysis of pass/fail (attribute) inspection studies.

Importing the package is cheap: PyMC, nutpie and matplotlib are imported only
by the modules that need them, when they are first used.
"""

import warnings

__version__ = "0.1.0"

# ArviZ 0.23 prints a daily notice about its next major version on import. It
# says nothing about a user's study, and under warnings-as-errors it breaks the
# import itself, so only that one notice is silenced.
warnings.filterwarnings("ignore", message=r"\s*ArviZ is undergoing", category=FutureWarning)

from bayes_rr.core import DEFAULT_PROB

__all__ = ["DEFAULT_PROB", "__version__"]
