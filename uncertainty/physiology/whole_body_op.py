"""The compiled whole-body course (:mod:`whole_body_kernel`) as a PyTensor Op, with its gradient Op.

In a PyMC model the course is one node: PyTensor differentiates the graph around it (priors, the resting state,
the reports and the likelihood) and calls :func:`whole_body_kernel.course_vjp` for the steps. Both Ops run the
numba kernels from Python under PyTensor's C and Python back ends, and are called directly from the compiled
function under its numba back end (nutpie), so the sampler's compile no longer has a loop to unroll and
differentiate.
"""

from __future__ import annotations

import inspect
import zlib
from collections.abc import Sequence
from typing import Any

import numpy as np
import pytensor.tensor as pt
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op
from pytensor.link.numba.dispatch import basic as numba_basic

from uncertainty.physiology import whole_body_kernel as kernel

#: Changes with the kernels' source, so PyTensor's numba cache never serves a function built on older kernels.
_SALT = zlib.crc32(inspect.getsource(kernel).encode())


class _CourseBase(Op):
    """What both Ops share: the timeline (plan rows, step) and the beds' lymph saturation."""

    __props__ = ("plan", "dt", "sat", "inv_w")

    def __init__(self, plan: np.ndarray, dt: float, sat: tuple[bool, ...], inv_w: float) -> None:
        self.plan = tuple(tuple(float(x) for x in row) for row in np.asarray(plan, dtype=float))
        self.dt, self.sat, self.inv_w = float(dt), tuple(bool(s) for s in sat), float(inv_w)

    def constants(self) -> tuple[np.ndarray, float, np.ndarray, float]:
        """(plan array, dt, sat array, inv_w) as the kernels take them."""
        return (np.array(self.plan, dtype=np.float64).reshape(-1, 5), self.dt, np.array(self.sat, dtype=np.bool_),
                self.inv_w)


class Course(_CourseBase):
    """(start (state, n), quantities (rows, n)) -> the state after every step (steps + 1, state, n) and the terms
    of each step's right-hand sides (n, steps, 4, record length; read by the gradient only)."""

    def make_node(self, *inputs: Any) -> Apply:
        """Outputs with the static lengths the Op knows (steps, state rows, record length), so that PyTensor's
        shape arithmetic on them folds to constants (a reported slice ``[::per]`` of an output of unknown length
        left broadcast checks whose operand order varied between processes, and with it the compile cache's key)."""
        start, quantities = (pt.as_tensor_variable(x, dtype="float64") for x in inputs)
        return Apply(self, [start, quantities], [pt.tensor(dtype="float64", shape=s)
                                                 for s in self._shapes(*start.type.shape)])

    def _shapes(self, ns: Any, n: Any) -> list[tuple[Any, ...]]:
        """The outputs' shapes, (steps + 1, state, n) and (n, steps, 4, record length), for a start (state, n)."""
        steps, rec = len(self.plan), kernel.N_PLASMA_RECORD + kernel.N_BED_RECORD * len(self.sat)
        return [(steps + 1, ns, n), (n, steps, 4, rec)]

    def infer_shape(self, fgraph: Any, node: Apply, shapes: Sequence[Any]) -> list[tuple[Any, ...]]:
        """The outputs' shapes from the start's (state, n)."""
        return self._shapes(*shapes[0])

    def perform(self, node: Apply, inputs: Sequence[Any], outputs: Any) -> None:
        start, q = (np.ascontiguousarray(x, dtype=np.float64) for x in inputs)
        outputs[0][0], outputs[1][0] = kernel.course(start, q, *self.constants())

    def L_op(self, inputs: Sequence[Any], outputs: Sequence[Any], output_grads: Sequence[Any]) -> list[Any]:
        """The reverse pass over the steps; the records are not differentiable outputs (``connection_pattern``)."""
        vjp = CourseVJP(np.array(self.plan), self.dt, self.sat, self.inv_w)
        return list(vjp.make_node(outputs[1], inputs[1], output_grads[0]).outputs)

    def connection_pattern(self, node: Apply) -> list[list[bool]]:
        """Both inputs feed the trajectory; the records are left out of differentiation."""
        return [[True, False], [True, False]]


class CourseVJP(_CourseBase):
    """(:class:`Course`'s records, quantities, the trajectory's cotangent) -> cotangents of start and quantities
    (the forward pass is computed once for the log density and its gradient)."""

    def make_node(self, *inputs: Any) -> Apply:
        records, quantities, g = (pt.as_tensor_variable(x, dtype="float64") for x in inputs)
        return Apply(self, [records, quantities, g], [pt.tensor(dtype="float64", shape=g.type.shape[1:]),
                                                      quantities.type()])

    def infer_shape(self, fgraph: Any, node: Apply, shapes: Sequence[Any]) -> list[tuple[Any, ...]]:
        """The start's shape (state, n) from the cotangent's, and the quantities' own."""
        return [tuple(shapes[2][1:]), tuple(shapes[1])]

    def perform(self, node: Apply, inputs: Sequence[Any], outputs: Any) -> None:
        records, q, g = (np.ascontiguousarray(x, dtype=np.float64) for x in inputs)
        g_start, g_q = kernel.course_vjp(records, q, *self.constants(), g)
        outputs[0][0], outputs[1][0] = g_start, g_q


def compiled_steps(state: dict[str, Any], prepared: Any, plan: np.ndarray, dt: float, inv_w: float) -> Any:
    """The state after every step as one :class:`Course` node (PyTensor).

    Parameters
    ----------
    state : dict
        Resting state per variable (``whole_body.initial_state`` order; tensors or numbers over the draws).
    prepared : whole_body._Prepared
        The constants of the right-hand side (:func:`whole_body_kernel.quantity_rows`) and each bed's ``sat``.
    plan : ndarray (n_steps, 5)
        Rates per step (``whole_body_kernel``).
    dt, inv_w : float
        Step (min) and 1 / the tissue curve's break width (1/mmHg).

    Returns
    -------
    TensorVariable (n_steps + 1, state, draws)
    """
    rows = kernel.quantity_rows(prepared)
    like = sum(0.0 * pt.as_tensor_variable(v) for v in state.values())   # one shape (draws) for every row
    start = pt.stack([pt.as_tensor_variable(v) + like for v in state.values()])
    quantities = pt.stack([pt.as_tensor_variable(v) + like for v in rows])
    return Course(plan, dt, tuple(b["sat"] for _, b in prepared.beds), inv_w).make_node(start, quantities).outputs[0]


@numba_basic.register_funcify_default_op_cache_key(Course)
def _numba_course(op: Course, **kwargs: Any) -> tuple[Any, int]:
    plan, dt, sat, inv_w = op.constants()
    run = kernel.course

    @numba_basic.numba_njit
    def course(start: np.ndarray, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return run(np.ascontiguousarray(start), np.ascontiguousarray(q), plan, dt, sat, inv_w)

    return course, _SALT


@numba_basic.register_funcify_default_op_cache_key(CourseVJP)
def _numba_course_vjp(op: CourseVJP, **kwargs: Any) -> tuple[Any, int]:
    plan, dt, sat, inv_w = op.constants()
    run = kernel.course_vjp

    @numba_basic.numba_njit
    def course_vjp(records: np.ndarray, q: np.ndarray, g: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return run(np.ascontiguousarray(records), np.ascontiguousarray(q), plan, dt, sat, inv_w,
                   np.ascontiguousarray(g))

    return course_vjp, _SALT
