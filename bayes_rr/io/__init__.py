"""Fit folders: output safety rules, writing atomically, reading back defensively.

May import: every step below it (``core`` to ``report``); nothing above.
"""
