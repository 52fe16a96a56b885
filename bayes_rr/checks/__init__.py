"""Does the model fit: posterior and prior predictive checks, and PSIS-LOO comparison.

May import: ``core``, ``study``, ``families``, ``priors``, ``results``. Never imports PyMC.
"""
