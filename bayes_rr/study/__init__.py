"""A study: reading tables (CSV, XLSX), validating them into calls, cells and
coordinates, the design, and the classical statistics beside the model.

May import: ``core``.
"""
