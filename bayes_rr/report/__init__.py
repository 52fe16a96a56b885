"""What a reader sees: figures and the self-contained HTML report.

May import: ``core``, ``study``, ``families``, ``priors``, ``results``, ``checks``.
"""
