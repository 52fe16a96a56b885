"""A PyTensor Op scaffold for the issue-23 experiments (not used by the package).

The package's :class:`bayes_rr.families.cell_integral.IntegratedCells` maps (eta, sigma,
n, k) to each cell's integrated log likelihood and its two gradients in one call; its
gradient graph reuses the same Apply node. An experiment's kernel subclasses it here:
it sets ``__props__``, ``count_dtype`` (how n and k reach the kernel) and ``evaluate``,
and registers its numba version with ``register_funcify_default_op_cache_key``.
"""

from __future__ import annotations

import pytensor.tensor as pt
from pytensor.graph.basic import Apply

from bayes_rr.families.cell_integral import IntegratedCells


class CellsOp(IntegratedCells):
    count_dtype = "float64"

    def __init__(self):  # the subclass sets its own parameters
        pass

    def evaluate(self, eta, sigma: float, n, k):
        """(value, d_eta, d_sigma) per cell, in Python (PyTensor's C/Python backend)."""
        raise NotImplementedError

    def make_node(self, eta, sigma, n, k):
        eta = pt.as_tensor_variable(eta).astype("float64")
        sigma = pt.as_tensor_variable(sigma).astype("float64")
        n = pt.as_tensor_variable(n).astype(self.count_dtype)
        k = pt.as_tensor_variable(k).astype(self.count_dtype)
        return Apply(self, [eta, sigma, n, k], [eta.type(), eta.type(), eta.type()])

    def perform(self, node, inputs, out):
        eta, sigma, n, k = inputs
        for o, v in zip(out, self.evaluate(eta, float(sigma), n, k), strict=True):
            o[0] = v
