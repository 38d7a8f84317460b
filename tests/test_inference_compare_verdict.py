"""The verdict of a LOO comparison from pointwise elpd values (no PyMC): the difference's se is
sqrt(n var(d_i)) (Vehtari, Gelman & Gabry 2017, Stat Comput 27:1413-1432, section 5.2), a form is
preferred only beyond two se, and a fit that failed its gate is not compared."""

from __future__ import annotations

import numpy as np
import pytest

from uncertainty.analyses.inference.compare import PREFER_SE, elpd_difference


def _pointwise(shift, n=40, seed=0):
    rng = np.random.default_rng(seed)
    a = rng.normal(-1.0, 0.5, n)
    noise = rng.normal(0.0, 0.3, n)
    d = shift + noise - noise.mean()   # the sum is exactly n * shift
    return a, a + d, d


def test_difference_and_se_are_the_pointwise_closed_form():
    a, b, d = _pointwise(0.0)
    out = elpd_difference(a, b)
    assert out["difference"] == pytest.approx(d.sum())
    assert out["se"] == pytest.approx(np.sqrt(d.size) * d.std(ddof=1))


def test_small_difference_prefers_neither_form():
    a, b, d = _pointwise(0.02)        # sum 0.8 nats, se about 1.9: within two se
    out = elpd_difference(a, b)
    assert abs(out["difference"]) <= PREFER_SE * out["se"]
    assert out["preferred"] is None and "neither" in out["verdict"]


def test_clear_difference_prefers_the_better_form_and_unconverged_fits_are_refused():
    a, b, _ = _pointwise(0.5)         # sum 20 nats, se about 1.9
    assert elpd_difference(a, b)["preferred"] == "revised"
    assert elpd_difference(b, a)["preferred"] == "classic"
    out = elpd_difference(a, b, converged=(True, False))
    assert out["preferred"] is None and "revised" in out["verdict"] and "quality gate" in out["verdict"]
