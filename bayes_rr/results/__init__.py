"""From posterior draws to the contract's results: estimands and their summaries,
readings of wrong-call rates, criteria and appraiser comparisons, and what a design
cannot answer.

May import: ``core``, ``study``, ``families`` (through the family interface only),
``priors``. Never imports PyMC.
"""
