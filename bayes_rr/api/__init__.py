"""The Python face: the whole job from a notebook with one import.

``read_study`` (a file or a pandas DataFrame) -> ``describe`` -> ``fit`` -> a
:class:`Fit` with tidy data frames, the ArviZ ``InferenceData``, checks, a report
and a folder; ``load`` reads a fit folder back; ``plan`` and ``calibrate`` run many
fits. ``import bayes_rr`` stays cheap: these load on first use.

May import: every room of the package except ``cli``.
"""

from bayes_rr.api.fitting import Fit, fit, load
from bayes_rr.api.planning import calibrate, plan
from bayes_rr.api.reading import Description, describe, read_study

__all__ = ["Description", "Fit", "calibrate", "describe", "fit", "load", "plan", "read_study"]
