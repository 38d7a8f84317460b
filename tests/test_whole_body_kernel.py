"""The compiled whole-body course (numba) and its hand-derived reverse pass, against outside references: the numpy
course (itself checked against scipy's solve_ivp in test_whole_body.py), scipy.differentiate's adaptive finite
differences for the gradient, and PyTensor's own ``verify_grad`` for the Op's wiring.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.differentiate import derivative
from whole_body_inputs import dose, params

from uncertainty.physiology import whole_body as wb
from uncertainty.physiology import whole_body_kernel as kernel
from uncertainty.physiology.interstitium import BREAK_WIDTH


def _inputs(doses: list[wb.Dose], end: float, every: float, max_step: float, unsaturated: bool = False):
    """Kernel inputs for three different subjects (Kf, L and PS scaled); the skin's lymph made linear when
    ``unsaturated`` (no JL_max)."""
    body, beds, Cp0 = params(3, {"Kf": [0.6, 1.0, 1.8], "L": [1.5, 1.0, 0.7], "PS": [0.8, 1.0, 1.3]})
    if unsaturated:
        beds = {**beds, "skin": {k: v for k, v in beds["skin"].items() if k != "JL_max"}}
    state, rest = wb.initial_state(body, beds, Cp0)
    p = wb._Prepared(body, beds, rest, np)
    start = np.stack([np.broadcast_to(np.asarray(v, float), (3,)) for v in state.values()])
    q = np.stack([np.broadcast_to(np.asarray(v, float), (3,)) for v in kernel.quantity_rows(p)])
    dt, n_steps, per = wb.time_grid(end, every, max_step)
    plan = np.array([(*wb.step_rates(doses, i * dt, dt, equivalent=True), *wb.renal_terms(doses, (i + 1) * dt))
                     for i in range(n_steps)])
    sat = np.array([b["sat"] for _, b in p.beds])
    return (body, beds, Cp0, per), start, q, (plan, dt, sat, 1.0 / BREAK_WIDTH)


MIXED = dose("crystalloid", 1500.0, 30.0) + dose("albumin_20", 100.0, 15.0, start=20.0) + \
    dose("bleed", 400.0, 10.0, start=60.0)


@pytest.mark.parametrize("unsaturated", [False, True])
def test_course_equals_the_numpy_loop(unsaturated: bool) -> None:
    # same steps, same arithmetic: the reported volumes agree to rounding (1e-9 mL on about 1000 mL)
    (body, beds, Cp0, per), start, q, consts = _inputs(MIXED, 90.0, 10.0, 2.5, unsaturated)
    assert consts[2].tolist() == [True, not unsaturated]
    out = kernel.course(start, q, *consts)[0][::per]
    sim = wb.simulate(body, beds, Cp0, MIXED, 90.0, 10.0, max_step=2.5)
    assert out.shape == (len(sim["times_min"]), start.shape[0], 3)
    np.testing.assert_allclose(out[:, 0, :] - body["Vp0"], np.array(sim["plasma_volume_change"]), atol=1e-9)
    np.testing.assert_allclose(out[:, 3, :], np.array(sim["urine_volume"]), atol=1e-9)
    np.testing.assert_allclose(out[0], start, rtol=0, atol=0)
    assert np.abs(np.array(sim["plasma_volume_change"])).max() > 500.0   # the course does move


@pytest.mark.parametrize("unsaturated", [False, True])
def test_gradient_matches_adaptive_finite_differences(unsaturated: bool) -> None:
    # for every row of the start state and of the quantities, the directional derivative of a random linear
    # functional of the whole course along that row (random weights per subject, scaled to the row's size) by
    # scipy.differentiate.derivative (Richardson extrapolation of central differences) against the reverse
    # pass; tolerance 1e-6 relative plus ten times the finite differences' own error estimate (itself at most
    # 1e-5 relative)
    _, start, q, consts = _inputs(MIXED, 90.0, 10.0, 2.5, unsaturated)
    rng = np.random.default_rng(7)
    traj, records = kernel.course(start, q, *consts)
    w = rng.normal(size=traj.shape)
    g_start, g_q = kernel.course_vjp(records, q, *consts, w)
    checked = 0
    for which, x, g in (("start", start, g_start), ("quantities", q, g_q)):
        for row in range(x.shape[0]):
            v = np.zeros_like(x)
            # the cumulative urine and bleed start at 0 mL: perturbed by about 1 mL, since a course of thousands of
            # mL rounds a 0.01 mL perturbation's differences to about 1e-5 of themselves
            size = np.abs(x[row]).max()
            size = 100.0 if size == 0.0 and which == "start" else max(size, 1.0)
            v[row] = rng.uniform(0.5, 1.5, x.shape[1]) * size * 1e-2

            def along(t: np.ndarray, x: np.ndarray = x, v: np.ndarray = v, which: str = which) -> np.ndarray:
                vals = []
                for ti in np.ravel(t):
                    a, b = (x + ti * v, q) if which == "start" else (start, x + ti * v)
                    vals.append(float((kernel.course(a, b, *consts)[0] * w).sum()))
                return np.reshape(vals, np.shape(t))

            fd = derivative(along, 0.0, initial_step=0.5)
            want = float((g * v).sum())
            err = float(fd.error)
            assert err <= 1e-5 * abs(want) + 1e-9, (which, row, err)   # the differences are informative
            assert abs(float(fd.df) - want) <= 1e-6 * abs(want) + 10 * err, (which, row, float(fd.df), want)
            checked += want != 0.0
    assert checked >= 30   # rows the course depends on (the cumulative urine and bleed rows do not feed back)


def test_each_subject_depends_on_its_own_inputs_only() -> None:
    # the columns are independent subjects: a cotangent on one subject's course gives zero gradient elsewhere
    _, start, q, consts = _inputs(MIXED, 60.0, 10.0, 2.5)
    traj, records = kernel.course(start, q, *consts)
    w = np.zeros(traj.shape)
    w[:, :, 1] = 1.0
    g_start, g_q = kernel.course_vjp(records, q, *consts, w)
    assert np.all(g_start[:, [0, 2]] == 0.0) and np.all(g_q[:, [0, 2]] == 0.0)
    assert np.abs(g_q[:, 1]).max() > 0.0


def test_op_gradient_passes_pytensor_verify_grad() -> None:
    # the Op's wiring (inputs, outputs, gradient Op) checked by PyTensor's own finite-difference check
    pytest.importorskip("pytensor")
    from pytensor.gradient import verify_grad

    from uncertainty.physiology.whole_body_op import Course

    _, start, q, (plan, dt, sat, inv_w) = _inputs(dose("crystalloid", 1000.0, 20.0), 40.0, 10.0, 5.0)
    op = Course(plan, dt, tuple(sat), inv_w)
    rng = np.random.default_rng(3)
    # PyTensor perturbs every input by 1e-7 (one-sided): inputs as multiples of the subjects' values, so that is
    # a small relative step. One-sided differences are accurate to about 1e-4 here, hence 1e-3: this checks the
    # wiring (a wrong input order or cotangent is off by order 1); the precise check is the scipy test above
    verify_grad(lambda s: op(s * start, q)[0], [np.ones_like(start)], rng=rng, abs_tol=1e-3, rel_tol=1e-3)
    verify_grad(lambda r: op(start, r * q)[0], [np.ones_like(q)], rng=rng, abs_tol=1e-3, rel_tol=1e-3)


@pytest.mark.slow
def test_numba_mode_calls_the_kernels_and_agrees_with_the_c_mode() -> None:
    # the sampler's back end (numba: the Ops' registered implementations, no object mode) gives the same
    # course and gradient as PyTensor's default mode (the Ops' perform)
    import warnings

    import pytensor
    import pytensor.tensor as pt

    from uncertainty.physiology.whole_body_op import Course

    _, start, q, (plan, dt, sat, inv_w) = _inputs(MIXED, 60.0, 10.0, 2.5)
    s, r = pt.dmatrix("s"), pt.dmatrix("r")
    out = Course(plan, dt, tuple(sat), inv_w)(s, r)[0]
    cost = (out ** 2).sum()
    outs = [out, *pytensor.grad(cost, [s, r])]
    with warnings.catch_warnings():
        warnings.simplefilter("error")   # object mode would warn
        got = pytensor.function([s, r], outs, mode="NUMBA")(start, q)
    want = pytensor.function([s, r], outs)(start, q)
    for g, w in zip(got, want, strict=True):
        np.testing.assert_allclose(g, w, rtol=1e-13, atol=0)


def test_op_declares_its_output_lengths_and_shapes() -> None:
    # static lengths (steps + 1, state rows; records) on the outputs, and infer_shape equal to what perform returns
    pytest.importorskip("pytensor")
    import pytensor
    import pytensor.tensor as pt

    from uncertainty.physiology.whole_body_op import Course

    _, start, q, (plan, dt, sat, inv_w) = _inputs(dose("crystalloid", 1000.0, 20.0), 40.0, 10.0, 5.0)
    s = pt.tensor("s", shape=(start.shape[0], None))
    r = pt.dmatrix("r")
    traj, records = Course(plan, dt, tuple(sat), inv_w)(s, r)
    steps = plan.shape[0]
    assert traj.type.shape == (steps + 1, start.shape[0], None)
    assert records.type.shape == (None, steps, 4, kernel.N_PLASMA_RECORD + kernel.N_BED_RECORD * len(sat))
    # the shapes PyTensor infers (the outputs' shape graphs, rewritten without running the Op) against the values
    shapes = pytensor.function([s, r], [traj.shape, records.shape])
    assert not any(isinstance(n.op, Course) for n in shapes.maker.fgraph.apply_nodes)
    got = shapes(start, q)
    want = kernel.course(start, q, plan, dt, sat, inv_w)
    assert [tuple(g) for g in got] == [w.shape for w in want]


def test_the_records_are_declared_not_differentiable() -> None:
    # the records feed the reverse pass only: PyTensor is told they do not depend on the inputs, so a gradient of
    # them alone is refused (DisconnectedInputError), while the trajectory's is taken
    pytest.importorskip("pytensor")
    import pytensor
    import pytensor.tensor as pt
    from pytensor.gradient import DisconnectedInputError

    from uncertainty.physiology.whole_body_op import Course

    _, _, _, (plan, dt, sat, inv_w) = _inputs(dose("crystalloid", 1000.0, 20.0), 40.0, 10.0, 5.0)
    s, r = pt.dmatrix("s"), pt.dmatrix("r")
    traj, records = Course(plan, dt, tuple(sat), inv_w)(s, r)
    assert pytensor.grad(traj.sum(), s) is not None
    with pytest.raises(DisconnectedInputError):
        pytensor.grad(records.sum(), s)
