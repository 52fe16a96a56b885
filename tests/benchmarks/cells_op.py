"""A PyTensor Op scaffold shared by the issue-23 experiments (not used by the package).

A cell kernel maps (eta, sigma, n, k) to each cell's integrated log likelihood and its
two gradients (d/d eta, d/d sigma) in one call; the gradient graph reuses the same
Apply node, so value and gradient come from one evaluation. A subclass sets
``__props__``, ``count_dtype`` (how n and k reach the kernel) and ``evaluate``, and
registers its numba version with ``register_funcify_default_op_cache_key``.
"""

from __future__ import annotations

import pytensor.tensor as pt
from pytensor.gradient import DisconnectedType
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op


class CellsOp(Op):
    count_dtype = "float64"

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

    def grad(self, inputs, grads):
        _value, d_eta, d_sigma = self(*inputs)
        g = grads[0]
        return [g * d_eta, pt.sum(g * d_sigma), DisconnectedType()(), DisconnectedType()()]

    def connection_pattern(self, node):
        return [[True, False, False], [True, False, False], [False] * 3, [False] * 3]
