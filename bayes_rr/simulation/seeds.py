"""Seeds derived from a run's seed: the same run gives the same draws however its tasks
are spread over workers."""

from __future__ import annotations

import hashlib

import numpy as np


def derived_seed(seed: int, *path: int) -> int:
    """A seed in [0, 2**32) for the item at ``path`` (e.g. design index, simulation)."""
    return int(np.random.SeedSequence([seed, *path]).generate_state(1)[0])


def signature(document: dict) -> str:
    """Hash of a run's settings: a folder is resumed only by the same run."""
    from bayes_rr.core.jsonio import dumps

    return hashlib.sha256(dumps(document).encode()).hexdigest()
