"""Bayesian analysis of pass/fail (attribute) inspection studies.

The Python face::

    import bayes_rr as brr

    study = brr.read_study(frame, part="Part", appraiser="Inspector", call="Result")
    brr.describe(study)
    fit = brr.fit(study, seed=1)
    fit.summary()        # a tidy pandas DataFrame of every result
    fit.rates()          # false reject and false accept rates (models with a reference)
    fit.posterior        # ArviZ InferenceData
    fit.report("report.html")

Importing the package is cheap: PyMC, nutpie and matplotlib are imported only by the
modules that need them, when they are first used; the face itself loads on first use.
"""

import warnings

__version__ = "0.1.0"

# ArviZ 0.23 prints a daily notice about its next major version on import. It
# says nothing about a user's study, and under warnings-as-errors it breaks the
# import itself, so only that one notice is silenced.
warnings.filterwarnings("ignore", message=r"\s*ArviZ is undergoing", category=FutureWarning)
# PyTensor warns once when its C backend finds no BLAS; the sampler runs nutpie's
# numba code, and the crossed-logit's sampler model brings the C backend in while it
# is built, so the notice would stand above every fit's output.
warnings.filterwarnings(
    "ignore", message=r"PyTensor could not link to a BLAS", category=UserWarning
)

from bayes_rr.core import DEFAULT_PROB  # noqa: E402 (after the warning filter, on purpose)

FACE = ("Description", "Fit", "calibrate", "describe", "fit", "load", "plan", "read_study")
__all__ = ["DEFAULT_PROB", "__version__", *FACE]


def __getattr__(name: str):
    # The face loads on first use, so `import bayes_rr` imports neither pandas-heavy
    # reading code nor PyMC.
    if name in FACE:
        from bayes_rr import api

        return getattr(api, name)
    raise AttributeError(f"module 'bayes_rr' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted([*globals(), *FACE])
