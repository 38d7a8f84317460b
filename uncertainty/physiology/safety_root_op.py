"""The bisection bracket of ``balance.safety_steady_state`` as one compiled node (numba), for inference.

``safety_steady_state`` finds the resting interstitial pressure Pi as the root of G(Pi) = filtration - outflow by a
fixed count of bisection halvings of [Pi_L0, Pc], then one Newton step whose incoming iterate is cut from
differentiation (the gradient is the implicit-function gradient, taken through that step alone). On PyTensor the
halvings were a ``scan``: its loop body is compiled afresh, through PyTensor's rewrites, numba and LLVM, with every
model that contains a steady state (each bed of the whole-body form, and its resting outputs): about a tenth of a
cold compile of the 20-subject whole-body model (266 s with the scan, 229 s with this node). The halvings need no
gradient, so here they are a plain compiled loop (:func:`bracket`, module-level numba, cached on disk by numba once
per machine) inside one Op (:class:`SafetyBracket`); the Newton step stays in the graph. Same residual and arithmetic
as ``balance._safety_residual`` for the cases it covers: the linear or two-slope pressure-volume curve, lymph with or
without the JL_max cap, the oncotic pressure of the filtrate proportional or by the Landis-Pappenheimer total-protein
cubic; without an overflow path (the lung's flooding keeps the ``scan``). Units as ``safety_steady_state``: mmHg,
mL/min and mL/mmHg per basis, g/dL.
"""

from __future__ import annotations

import inspect
import math
import sys
import zlib
from collections.abc import Sequence
from typing import Any

import numba
import numpy as np
import pytensor.tensor as pt
from pytensor.gradient import grad_not_implemented
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op
from pytensor.link.numba.dispatch import basic as numba_basic

from uncertainty.physiology.interstitium import BREAK_WIDTH
from uncertainty.physiology.oncotic import COEFFICIENTS

#: Rows of the input matrix: the arguments of ``safety_steady_state`` in its order (absent ones as 0).
ROWS = ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0", "C_tis", "C_high", "P_break", "JL_max", "Cp")

_A1, _A2, _A3 = COEFFICIENTS["total"]
#: Below this Peclet number the series 1 - Pe/2 stands for (1 - e^-Pe)/Pe, as ``solute.steady_state_ratio`` does.
PE_SERIES = 1e-8
_jit = numba.njit(cache=True, fastmath=False, error_model="numpy")


@_jit
def _softplus(x: float) -> float:  # pragma: no cover (numba)
    """log(1 + e^x) as ``interstitium._softplus``."""
    return max(x, 0.0) + math.log1p(math.exp(-abs(x)))


@_jit
def _cubic(c: float) -> float:  # pragma: no cover (numba)
    """Landis-Pappenheimer total-protein oncotic pressure (mmHg) at c (g/dL), as ``oncotic.pi_cubic``."""
    return c * (_A1 + c * (_A2 + c * _A3))


@_jit
def residual(Pi: float, p: np.ndarray, curve: bool, cap: bool, cubic: bool, width: float) -> float:  # pragma: no cover
    """G(Pi) of ``balance._safety_residual`` (mL/min per basis) for one subject's inputs ``p`` (rows :data:`ROWS`)."""
    Kf, Pc, sigma, PS, pi_c, L, Pi_L0 = p[0], p[1], p[2], p[3], p[4], p[5], p[6]
    if curve:  # interstitium.volume_lymph_flow on smooth_tissue_volume
        C, Ch, Pb = p[7], p[8], p[9]
        s = width * (_softplus((Pi - Pb) / width) - _softplus((Pi_L0 - Pb) / width))
        u = (L / C) * (C * (Pi - Pi_L0) + (Ch - C) * s)
    else:
        u = L * (Pi - Pi_L0)
    J = p[10] * math.tanh(u / p[10]) if cap else u
    Jp = max(J, 0.0)  # solute.steady_state_ratio
    pe = Jp * (1.0 - sigma) / PS
    E = 1.0 - 0.5 * pe if pe < PE_SERIES else -math.expm1(-pe) / pe
    R = 1.0 / (1.0 + sigma * (Jp / PS) * E)
    if cubic:  # balance.oncotic_from_ratio
        pi_o = pi_c / _cubic(p[11]) * _cubic(R * p[11])
    else:
        pi_o = pi_c * R
    return Kf * ((Pc - Pi) - sigma * (pi_c - pi_o)) - J


@_jit
def bracket(p: np.ndarray, n_steps: int, curve: bool, cap: bool, cubic: bool, width: float
            ) -> np.ndarray:  # pragma: no cover (numba)
    """Midpoint of [Pi_L0, max(Pc, Pi_L0)] after ``n_steps`` halvings towards the root of G, per column of ``p``
    (rows :data:`ROWS`, one column per subject or draw); mmHg."""
    n = p.shape[1]
    out = np.empty(n)
    col = np.empty(p.shape[0])
    for j in range(n):
        for i in range(p.shape[0]):
            col[i] = p[i, j]
        lo = col[6]
        hi = max(col[1], lo)
        for _ in range(n_steps):
            mid = 0.5 * (lo + hi)
            if residual(mid, col, curve, cap, cubic, width) > 0:
                lo = mid
            else:
                hi = mid
        out[j] = 0.5 * (lo + hi)
    return out


#: Changes with this module's source, so PyTensor's numba cache never serves a function built on older code.
_SALT = zlib.crc32(inspect.getsource(sys.modules[__name__]).encode())


class SafetyBracket(Op):
    """(inputs (rows :data:`ROWS`, n)) -> the bisection midpoint (n,), mmHg. No gradient: the caller cuts it
    (``iteration.stop_gradient``); a gradient asked through the node fails rather than coming back as zeros."""

    __props__ = ("n_steps", "curve", "cap", "cubic", "width")

    def __init__(self, n_steps: int, curve: bool, cap: bool, cubic: bool, width: float = BREAK_WIDTH) -> None:
        self.n_steps, self.width = int(n_steps), float(width)
        self.curve, self.cap, self.cubic = bool(curve), bool(cap), bool(cubic)

    def make_node(self, *inputs: Any) -> Apply:
        (p,) = (pt.as_tensor_variable(x, dtype="float64") for x in inputs)
        return Apply(self, [p], [pt.dvector()])

    def perform(self, node: Apply, inputs: Sequence[Any], outputs: Any) -> None:
        p = np.ascontiguousarray(inputs[0], dtype=np.float64)
        outputs[0][0] = bracket(p, self.n_steps, self.curve, self.cap, self.cubic, self.width)

    def grad(self, inputs: Sequence[Any], output_grads: Sequence[Any]) -> list[Any]:
        return [grad_not_implemented(self, 0, inputs[0], "no gradient: cut it, then take one Newton step")]


@numba_basic.register_funcify_default_op_cache_key(SafetyBracket)
def _numba_bracket(op: SafetyBracket, **kwargs: Any) -> tuple[Any, int]:
    n_steps, curve, cap, cubic, width = op.n_steps, op.curve, op.cap, op.cubic, op.width
    run = bracket

    @numba_basic.numba_njit
    def safety_bracket(p: np.ndarray) -> np.ndarray:
        return run(np.ascontiguousarray(p), n_steps, curve, cap, cubic, width)

    return safety_bracket, _SALT


def bracket_midpoint(values: Sequence[Any], n_steps: int, curve: bool, cap: bool, cubic: bool) -> Any:
    """The bisection midpoint as one :class:`SafetyBracket` node (PyTensor), shaped as the broadcast inputs.

    Parameters
    ----------
    values : sequence of tensors
        The :data:`ROWS` quantities (absent ones as 0), already broadcast to one shape.
    n_steps : int
        Halvings.
    curve, cap, cubic : bool
        Two-slope pressure-volume curve; JL_max cap; Landis-Pappenheimer scaling with Cp.

    Returns
    -------
    TensorVariable
        Pi (mmHg) to within the bracket's final width, the shape of ``values[0]``.
    """
    first = pt.as_tensor_variable(values[0])
    p = pt.stack([pt.as_tensor_variable(v).astype("float64").ravel() for v in values])
    mid = SafetyBracket(n_steps, curve, cap, cubic).make_node(p).outputs[0]
    return pt.reshape(mid, first.shape)
