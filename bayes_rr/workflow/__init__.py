"""The steps chained: fit a study (sample, estimands, criteria, sensitivity), check a
fit folder, write its report, compare folders, turn statements into a spec.

May import: every package below it (``core`` to ``io``).
"""
