"""What is known before the data: the model spec (TOML schema and validation), the
hyper-prior table, priors from statements and from an earlier study, power-scaling
sensitivity and forward draws from the prior.

May import: ``core``, ``study``, ``families``. Never imports PyMC.
"""
