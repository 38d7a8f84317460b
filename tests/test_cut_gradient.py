"""The gradient cut of the steady states' bisections survives the rewrites PyMC applies before differentiating
(PyTensor's own ``disconnected_grad`` is a ViewOp, which canonicalisation removes)."""

from __future__ import annotations

import numpy as np
import pytensor
import pytensor.tensor as pt
from pytensor.graph.rewriting.utils import rewrite_graph
from pytensor.scan.op import Scan

from uncertainty.physiology.iteration import fixed_steps, stop_gradient


def _scans(v: object) -> list[str]:
    return [str(x.owner.op) for x in pytensor.graph.basic.ancestors([v])
            if x.owner is not None and isinstance(x.owner.op, Scan)]


def test_cut_survives_canonicalisation_and_the_newton_step_gives_the_implicit_gradient() -> None:
    # root of x^2 = a by 30 bisection halvings of [0, a + 1] (a loop), cut, then one Newton step: the gradient
    # must be the implicit-function one, d sqrt(a)/da = 1 / (2 sqrt(a)) (closed form), with no reversed loop
    a = pt.dvector("a")

    def step(_i, lo, hi, a):  # noqa: ANN001, ANN202
        mid = 0.5 * (lo + hi)
        pos = mid * mid - a > 0
        return pt.where(pos, lo, mid), pt.where(pos, mid, hi)

    lo, hi = fixed_steps(step, (0.0 * a, a + 1.0), 30, 1.0, pt, params=(a,))
    x = stop_gradient(0.5 * (lo + hi), pt)
    root = x - (x * x - a) / (2.0 * x)
    y = rewrite_graph(root.sum(), include=("canonicalize",))   # what PyMC does to a log density
    g = pytensor.grad(y, a)
    assert not [s for s in _scans(g) if "grad_of" in s]
    vals = np.array([0.5, 2.0, 9.0])
    np.testing.assert_allclose(pytensor.function([a], g)(vals), 0.5 / np.sqrt(vals), rtol=1e-8)


def test_cut_is_the_identity_in_every_back_end() -> None:
    x = pt.dvector("x")
    y = stop_gradient(x, pt) * 2.0
    v = np.array([1.0, -3.0])
    for mode in ("FAST_RUN", "NUMBA", "FAST_COMPILE"):
        np.testing.assert_array_equal(pytensor.function([x], y, mode=mode)(v), 2.0 * v)
    assert stop_gradient(v) is v   # numpy: the array itself
