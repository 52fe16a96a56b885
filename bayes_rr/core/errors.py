"""Typed errors. Each message quotes the bad value, says what was expected and how to fix it."""


class BayesRRError(Exception):
    """Base class of every error the toolkit raises on purpose."""

    exit_code = 1


class DataError(BayesRRError):
    """The study data cannot be read or do not make a valid study."""

    exit_code = 2


class SpecError(BayesRRError):
    """A model specification is invalid."""

    exit_code = 2


class OutputError(BayesRRError):
    """An output folder or file cannot be written or read."""

    exit_code = 2


class SamplingError(BayesRRError):
    """The sampler did not deliver the sample asked for (cut short, or failed)."""

    exit_code = 3


class ConvergenceError(BayesRRError):
    """The sampler did not pass the convergence gate."""

    exit_code = 3
