"""The compiled bisection bracket of the safety-factor steady state (``physiology.safety_root_op``): on PyTensor the
state equals the numpy loop (``balance.safety_steady_state``, whose own tests check it against closed forms) for every
case the node covers, the gradient stays the implicit-function gradient (checked against central differences of the
numpy state), and the graph holds the node instead of a loop; the lung's overflow path keeps the loop.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytensor
import pytensor.tensor as pt
import pytest
from pytensor.gradient import NullTypeGradError
from pytensor.scan.op import Scan

from uncertainty.physiology.balance import safety_steady_state
from uncertainty.physiology.safety_root_op import SafetyBracket

N = 300


def _draws() -> tuple[dict[str, np.ndarray], dict[str, np.ndarray], np.ndarray]:
    """Invented draws around the skeletal-muscle prior medians (spreads wide enough to reach the break and the lymph
    cap; five in the no-lymph corner Pc <= Pi_L0)."""
    rng = np.random.default_rng(1)
    base = {"Kf": np.exp(rng.normal(np.log(0.0035), 0.4, N)), "Pc": rng.normal(17.0, 6.0, N),
            "sigma": rng.uniform(0.7, 0.95, N), "PS": np.exp(rng.normal(np.log(0.002), 0.8, N)),
            "pi_c": rng.normal(25.0, 2.0, N), "L": np.exp(rng.normal(np.log(0.003), 0.8, N)),
            "Pi_L0": rng.normal(-3.0, 1.5, N)}
    tissue = {"C_tis": np.exp(rng.normal(np.log(1.4), 0.5, N)), "C_high": np.exp(rng.normal(np.log(7.0), 0.5, N)),
              "P_break": rng.normal(0.0, 1.0, N), "JL_max": np.exp(rng.normal(np.log(0.014), 0.9, N))}
    base["Pc"][:5] = base["Pi_L0"][:5] - 1.0   # five draws in the no-lymph corner
    return base, tissue, rng.normal(7.0, 0.5, N)


CASES = list(itertools.product([(), ("C_tis", "C_high", "P_break")], [False, True], [False, True]))


@pytest.mark.parametrize(("curve", "cap", "cubic"), CASES)
def test_state_equals_the_numpy_loop(curve: tuple[str, ...], cap: bool, cubic: bool) -> None:
    base, tissue, Cp = _draws()
    extra = {k: tissue[k] for k in (*curve, *(("JL_max",) if cap else ()))}
    ref = safety_steady_state(**base, **extra, Cp=Cp if cubic else None)
    sym = {k: pt.dvector(k) for k in (*base, *extra)}
    out = safety_steady_state(**sym, Cp=Cp if cubic else None, xp=pt)
    f = pytensor.function(list(sym.values()), [out["Pi"], out["Jv"], out["pi_i"]])
    ops = {type(n.op) for n in f.maker.fgraph.apply_nodes}
    assert SafetyBracket in ops and Scan not in ops
    got = f(*[{**base, **extra}[k] for k in sym])
    assert (base["Pc"] <= base["Pi_L0"]).any()   # the no-lymph corner is among the draws
    for g, name in zip(got, ("Pi", "Jv", "pi_i"), strict=True):
        np.testing.assert_allclose(g, ref[name], rtol=0, atol=1e-10, err_msg=name)   # mmHg, mL/min/100g


def test_gradient_is_the_implicit_function_gradient() -> None:
    # dPi/dKf and dPi/dJL_max from the graph against central differences of the numpy state (step 1e-6 relative;
    # error O(h^2), far below the 1e-5 relative tolerance)
    base, tissue, Cp = _draws()
    keep = base["Pc"] > base["Pi_L0"] + 1.0   # away from the corner, where Pi is not differentiable
    base = {k: v[keep] for k, v in base.items()}
    tissue = {k: v[keep] for k, v in tissue.items()}
    Cp = Cp[keep]
    sym = {k: pt.dvector(k) for k in (*base, *tissue)}
    out = safety_steady_state(**sym, Cp=Cp, xp=pt)
    for name in ("Kf", "JL_max"):
        f = pytensor.function(list(sym.values()), pt.grad(out["Pi"].sum(), sym[name]))
        got = f(*[{**base, **tissue}[k] for k in sym])
        h = 1e-6 * {**base, **tissue}[name]

        def pi_at(x: np.ndarray, name: str = name) -> np.ndarray:
            v = {**base, **tissue, name: x}
            return safety_steady_state(**v, Cp=Cp)["Pi"]

        x = {**base, **tissue}[name]
        want = (pi_at(x + h) - pi_at(x - h)) / (2 * h)
        np.testing.assert_allclose(got, want, rtol=1e-5, atol=1e-6 * np.abs(want).max(), err_msg=name)


def test_the_overflow_path_keeps_the_loop() -> None:
    base, _, _ = _draws()
    sym = {k: pt.dvector(k) for k in base}
    out = safety_steady_state(**sym, G_flood=0.5, P_flood=5.0, xp=pt)
    f = pytensor.function(list(sym.values()), out["Pi"])
    ops = {type(n.op) for n in f.maker.fgraph.apply_nodes}
    assert SafetyBracket not in ops and Scan in ops


def test_series_threshold_is_the_solute_module_s() -> None:
    # the scalar copy switches to the series 1 - Pe/2 where solute.steady_state_ratio does
    from uncertainty.physiology import safety_root_op, solute

    assert safety_root_op.PE_SERIES == solute._SMALL


def test_a_gradient_through_the_node_without_the_cut_fails() -> None:
    from uncertainty.physiology.safety_root_op import bracket_midpoint

    kf = pt.dvector("kf")
    mid = bracket_midpoint([kf, *([pt.ones_like(kf)] * 11)], 30, False, False, False)
    with pytest.raises(NullTypeGradError, match="no gradient: cut it"):
        pt.grad(mid.sum(), kf)
