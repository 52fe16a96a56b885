"""Sampling: the compile cache, the sampler and the convergence gate.

May import: ``core``, ``study``, ``families``, ``priors``. The only place that samples.
"""
