"""Fixed-count iteration that runs on numpy and PyTensor alike (no formulas here, only loop drivers).

Physiology iterations (RK4 steps along a capillary, bisection of a steady state) are written once as a
step function in ``xp`` arithmetic. On numpy the steps run in a Python loop; on PyTensor in one
``pytensor.scan``, because a graph unrolled over tens of steps takes minutes to compile while a scan
takes seconds and stays differentiable.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

Array = Any


def is_pytensor(xp: Any) -> bool:
    """True when ``xp`` is the pytensor.tensor namespace."""
    return getattr(xp, "__name__", "").startswith("pytensor")


def fixed_steps(step: Callable[..., tuple[Array, ...]], init: tuple[Array, ...], n_steps: int, h: float = 1.0,
                xp: Any = np, params: tuple[Array, ...] = ()) -> tuple[Array, ...]:
    """Apply ``step(x0, *state, *params) -> state`` at x0 = 0, h, 2h, ... (n_steps times); return the final state.

    ``x0`` is the position (or step index when h = 1) as a float; the state is a tuple of arrays of
    one broadcast shape, and so are ``params`` (broadcast them first). The x0 values are the same floats
    (i * h) on both back-ends. Every tensor the
    step uses must come in through ``state`` or ``params`` (not a closure): on PyTensor they are the
    scan's explicit non-sequences, so that PyMC random variables stay outside the scan.
    """
    if not is_pytensor(xp):
        state = tuple(init)
        for i in range(n_steps):
            state = tuple(step(i * h, *state, *params))
        return state
    import pytensor

    init_t = [xp.as_tensor_variable(v) for v in init]
    par_t = [xp.as_tensor_variable(p) for p in params]
    xs = xp.arange(n_steps, dtype="float64") * h
    outs = pytensor.scan(fn=lambda x0, *st: list(step(x0, *st)), sequences=[xs], outputs_info=init_t,
                         non_sequences=par_t, n_steps=n_steps, return_updates=False)
    if not isinstance(outs, list | tuple):
        outs = [outs]
    return tuple(o[-1] for o in outs)


def stop_gradient(x: Array, xp: Any = np) -> Array:
    """x itself, cut from differentiation on PyTensor (identity on numpy)."""
    if is_pytensor(xp):
        from pytensor.gradient import disconnected_grad

        return disconnected_grad(x)
    return x
