"""A model's log density and gradient are the same under PyTensor's numba back end (nutpie's) and its C back end.

A whole-body model once differed (pytensor 2.38): under numba the bisection loop's in-place carries gave a log
density off by 9e-4 and gradient entries off in sign, so nutpie sampled the wrong posterior while every test of
the pieces passed (``iteration.fixed_steps`` now compiles its loop body without in-place rewrites). The gradient
is also checked against central differences of the C back end's log density (outside reference: the definition
of the derivative; tolerance from the step h = 1e-5, error O(h^2) times the third derivative).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytensor
import pytest

from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.study import Study

pytestmark = pytest.mark.slow  # numba and C compile the model's graph (1-4 min)


def _whole_body_model(tmp: Path):  # noqa: ANN202
    """An invented one-subject whole-body study: 1500 mL crystalloid over 30 min, three haemoglobin readings."""
    (tmp / "hb.csv").write_text("subject,time_min,value\nA,0,14.0\nA,30,12.6\nA,60,13.3\n")  # invented
    doc = {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", "seed": 3},
           "observations": [{"kind": "haemoglobin", "file": "hb.csv", "sd": 0.2, "unit": "g/dL"}],
           "interventions": [{"kind": "infusion", "fluid": "crystalloid", "volume": "1500 mL",
                              "duration": "30 min"}],
           "timeline": {"end": "90 min", "report_every": "10 min"}}
    return build_model(problem_from_study(Study.from_dict(doc, base_dir=tmp))).model


def test_whole_body_log_density_and_gradient_agree_between_back_ends(tmp_path: Path) -> None:
    model = _whole_body_model(tmp_path)
    names = [v.name for v in model.value_vars]
    start = model.initial_point()
    rng = np.random.default_rng(0)
    # arrays, 0-d ones too (not numpy scalars: entries are edited in place below)
    point = [np.array(start[k] + rng.normal(0.0, 0.3, np.shape(start[k])), dtype=float) for k in names]
    logp = model.logp()
    outs = [logp, *pytensor.grad(logp, model.value_vars)]
    numba = model.compile_fn(outs, inputs=model.value_vars, point_fn=False, mode="NUMBA")(*point)
    c_fn = model.compile_fn(outs, inputs=model.value_vars, point_fn=False, mode="FAST_RUN")
    c = c_fn(*point)
    assert float(numba[0]) == pytest.approx(float(c[0]), rel=1e-11)
    for a, b in zip(numba[1:], c[1:], strict=True):
        np.testing.assert_allclose(a, b, rtol=1e-8, atol=1e-10)
    # the gradient itself, entry by entry, against central differences of the log density
    h = 1e-5
    for i, x in enumerate(point):
        for j in range(x.size):
            up = [p.copy() for p in point]
            down = [p.copy() for p in point]
            up[i].reshape(-1)[j] += h
            down[i].reshape(-1)[j] -= h
            fd = (float(c_fn(*up)[0]) - float(c_fn(*down)[0])) / (2 * h)
            got = float(np.ravel(numba[1 + i])[j])
            assert got == pytest.approx(fd, rel=1e-5, abs=1e-6), (names[i], j, got, fd)
