"""An identity whose gradient is cut, kept by graph rewrites (PyTensor only).

PyTensor's own ``disconnected_grad`` is a ``ViewOp``, and the canonicalising rewrites PyMC applies to a model's
log density before differentiating it remove every ``ViewOp``. The cut then vanished: the gradient ran back
through the bisection loops of the steady states (a second, reversed loop per bisection for the compiler), where
the Newton step after the loop already gives the implicit-function gradient. :class:`CutGradient` is its own Op,
so no rewrite removes it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from pytensor.gradient import disconnected_type
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op
from pytensor.link.numba.dispatch import basic as numba_basic
from pytensor.tensor import as_tensor_variable


class CutGradient(Op):
    """x -> x (a view), with no gradient to x."""

    __props__ = ()
    view_map = {0: [0]}

    def make_node(self, *inputs: Any) -> Apply:
        x = as_tensor_variable(inputs[0])
        return Apply(self, [x], [x.type()])

    def perform(self, node: Apply, inputs: Sequence[Any], outputs: Any) -> None:
        outputs[0][0] = inputs[0]

    def infer_shape(self, fgraph: Any, node: Apply, shapes: Any) -> Any:
        return shapes

    def grad(self, inputs: Sequence[Any], output_grads: Sequence[Any]) -> list[Any]:
        return [disconnected_type()]

    def connection_pattern(self, node: Apply) -> list[list[bool]]:
        return [[False]]


cut_gradient = CutGradient()


@numba_basic.register_funcify_default_op_cache_key(CutGradient)
def _numba_cut(op: CutGradient, **kwargs: Any) -> Any:
    @numba_basic.numba_njit
    def cut(x: Any) -> Any:
        return x

    return cut
