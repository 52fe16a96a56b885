"""The crossed-logit's interaction integrated out of each cell, as a PyTensor operation.

With c_ij ~ N(0, sigma) and the cell's calls Binomial(n_ij, expit(eta_ij + c_ij)), the
sampler can work on p(k_ij | eta_ij, sigma) = E_z[Binomial(k | n, expit(eta + sigma z))]
instead of one c_ij a cell: the interaction's scale then no longer fights a thousand
effects for its geometry (issue 23 in DEVELOPERS.md, "Large studies"). The integral is a
fixed Gauss-Hermite rule (no Newton steps, no adaptive nodes: the sampler's log density
must be smooth in its parameters); its error grows with sigma and with the calls a cell,
so the family uses it only where the design allows (:func:`rule_nodes`) and checks it
after sampling at the largest scale drawn (:func:`rule_error`), refitting with the
interaction sampled when the check fails. The effects themselves are drawn afterwards
from each cell's exact conditional (:func:`bayes_rr.core.kernels.draw_cell_effects`).

This module imports PyTensor; only the family's sampler builder imports it.
"""

from __future__ import annotations

from functools import cache

import pytensor.tensor as pt
from pytensor.gradient import DisconnectedType
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op
from pytensor.link.numba.dispatch.basic import numba_njit, register_funcify_default_op_cache_key

from bayes_rr.core.cell_rule import gauss_hermite

KERNEL_OPTIONS = {"error_model": "numpy"}
"""numba options of the kernel: numpy's error model (division by zero gives inf, as the
kernel expects, with no check that would keep its node loop from vectorizing: the loop
ran 2.2x faster with it on a 1,200-cell study)."""


@cache
def kernel_digest() -> str:
    """SHA-256 of the kernel's source (with the helpers it calls)."""
    import hashlib
    import inspect

    from bayes_rr.core import numba_loops

    source = inspect.getsource(numba_loops.cell_integral_with_gradients)
    source += inspect.getsource(numba_loops._cell_log_space.py_func)
    # the compile options are part of what the kernel computes
    source += repr(KERNEL_OPTIONS)
    return hashlib.sha256(source.encode()).hexdigest()[:16]


@cache
def _kernel():
    import numba

    from bayes_rr.core import numba_loops

    # serial: nutpie runs its chains in threads of its own
    return numba.njit(cache=False, **KERNEL_OPTIONS)(numba_loops.cell_integral_with_gradients)


class IntegratedCells(Op):
    """(eta, sigma, n, k) -> each cell's log E_z[p^k (1 - p)^(n - k)] (binomial
    coefficient left out) and its derivatives in eta and sigma, from one evaluation."""

    __props__ = ("nodes", "kernel")

    def __init__(self, nodes: int):
        self.nodes = int(nodes)
        # part of the operation's identity, so that the on-disk compile cache
        # (inference.compile_cache keys an operation by its __props__) never serves a
        # model compiled with an older kernel
        self.kernel = kernel_digest()

    def make_node(self, eta, sigma, n, k):
        eta = pt.as_tensor_variable(eta).astype("float64")
        sigma = pt.as_tensor_variable(sigma).astype("float64")
        n = pt.as_tensor_variable(n).astype("float64")
        k = pt.as_tensor_variable(k).astype("float64")
        return Apply(self, [eta, sigma, n, k], [eta.type(), eta.type(), eta.type()])

    def perform(self, node, inputs, output_storage):
        eta, sigma, n, k = inputs
        x, log_w = gauss_hermite(self.nodes)
        values = _kernel()(eta, float(sigma), n, k, x, log_w)
        for storage, value in zip(output_storage, values, strict=True):
            storage[0] = value

    def grad(self, inputs, output_grads):
        # The gradient graph reuses this node's other outputs: one kernel call gives
        # value and gradient (the value's own gradient is never asked for twice).
        _value, d_eta, d_sigma = self(*inputs)
        g = output_grads[0]
        return [g * d_eta, pt.sum(g * d_sigma), DisconnectedType()(), DisconnectedType()()]

    def connection_pattern(self, node):
        return [[True, False, False], [True, False, False], [False] * 3, [False] * 3]


@register_funcify_default_op_cache_key(IntegratedCells)
def _numba_integrated_cells(op, node=None, **kwargs):
    from bayes_rr.core import numba_loops

    x, log_w = gauss_hermite(op.nodes)
    kernel = numba_njit(numba_loops.cell_integral_with_gradients, **KERNEL_OPTIONS)

    @numba_njit
    def integrated_cells(eta, sigma, n, k):
        return kernel(eta, sigma.item(), n, k, x, log_w)

    return integrated_cells


def integrated_cells(eta, sigma, n, k, nodes: int):
    """Sum over cells of the integrated log likelihood (a PyTensor scalar)."""
    return pt.sum(IntegratedCells(nodes)(eta, sigma, n, k)[0])
