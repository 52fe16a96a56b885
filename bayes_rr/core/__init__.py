"""The vocabulary every step shares, knowing nothing of studies or models.

Owns: typed errors, prior distributions as data, JSON and atomic writes, interrupt
handling, the glossary of result names, classical intervals, convergence
diagnostics and the compiled numeric kernels. May import: nothing of bayes_rr but
the package's version.
"""

DEFAULT_PROB = 0.95
"""Default probability of every interval in the project."""
