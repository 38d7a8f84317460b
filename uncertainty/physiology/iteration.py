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
    one broadcast shape, and so are ``params`` (on PyTensor they are broadcast here, as float64). The x0
    values are the same floats (i * h) on both back-ends. The step must be elementwise. Every tensor the
    step uses must come in through ``state`` or ``params`` (not a closure): on PyTensor they are
    explicit scan inputs (sequences), so that PyMC random variables stay outside the scan.
    """
    if not is_pytensor(xp):
        state = tuple(init)
        for i in range(n_steps):
            state = tuple(step(i * h, *state, *params))
        return state
    import pytensor

    k = len(init)
    vals = [xp.cast(xp.as_tensor_variable(v), "float64") for v in (*init, *params)]
    vals = list(xp.broadcast_arrays(*vals))
    shape = vals[0].shape
    # Each input goes into the scan flattened with its last element repeated, so its length is never
    # statically 1. A sampler that rebuilds the graph (nutpie swaps the value variables for slices of one
    # flat vector) may learn a length of 1 that was unknown when the scan was built; the scan then refuses
    # the input, because a static length of 1 is a different broadcast class. With the pad the static
    # length is unknown or >= 2 at both times, and the loop function (elementwise) is unchanged.
    flat = [xp.concatenate([v.ravel(), v.ravel()[-1:]]) for v in vals]
    # The parameters enter as sequences (each row the same), not non-sequences: with non-sequences the
    # numba back-end (nutpie) returned one parameter's gradient for another (pytensor 2.38, seen with the
    # glomerular RK4: dGFR/dC_A came back equal to dGFR/d(dP); the C and Python back-ends were right).
    xs = xp.arange(n_steps, dtype="float64") * h
    # ones * p rather than broadcast_to: Alloc's make_node folds the shape graph of p (its whole ancestry; half
    # a minute for a whole-body steady state), an elementwise product reads only the static broadcast pattern
    ones = xp.ones((n_steps, 1), dtype="float64")
    rows = [ones * p[None, :] for p in flat[k:]]

    def inner(x0: Array, *args: Array) -> list[Array]:
        par, st = args[:len(rows)], args[len(rows):]
        return list(step(x0, *st, *par))

    # The loop body is compiled without in-place rewrites: under the numba back end (nutpie) an in-place
    # update of a carried value gave a wrong result (pytensor 2.38: a whole-body log density off by 9e-4 and
    # its gradient off in sign, where the C back end and the numba back end without the in-place carries were
    # right; tests/test_backend_agreement.py).
    inner_mode = pytensor.compile.mode.get_default_mode().excluding("inplace")
    outs = pytensor.scan(fn=inner, sequences=[xs, *rows], outputs_info=flat[:k], n_steps=n_steps,
                         return_updates=False, mode=inner_mode)
    if not isinstance(outs, list | tuple):
        outs = [outs]
    return tuple(o[-1][:-1].reshape(shape) for o in outs)


def stop_gradient(x: Array, xp: Any = np) -> Array:
    """x itself, cut from differentiation on PyTensor (``cut_gradient``, which graph rewrites keep; identity on
    numpy)."""
    if is_pytensor(xp):
        from uncertainty.physiology.cut_gradient import cut_gradient

        return cut_gradient(x)
    return x
