"""Chains of one fit as executor tasks: the same draws on any number of workers, the right posterior.

Closed form: a normal prior N(m0, s0^2) and one normal reading y with sd s give the conjugate normal
posterior, precision 1/s0^2 + 1/s^2 (Gelman et al., Bayesian Data Analysis, 3rd ed., 2013, section 2.5).
"""

from __future__ import annotations

import numpy as np
import pytest
from executor_fakes import Backwards
from inference_helpers import normal, problem

from uncertainty.analyses.inference.api import fit
from uncertainty.analyses.inference.summaries import flat
from uncertainty.core.parallel import InProcess

pytestmark = pytest.mark.slow  # compiles the model once per task function copy (three times)


def test_chains_as_tasks_give_the_same_draws_on_any_executor_and_the_conjugate_posterior() -> None:
    # prior Pc ~ N(20, 3^2), reading 24 +- 2 mmHg (invented round numbers)
    prob = problem({"Pc": normal("Pc", 20.0, 3.0)},
                   [{"kind": "measurement", "parameter": "Pc", "value": 24.0, "sd": 2.0}])
    here = fit(prob, seed=5, chains=2, draws=600, tune=400, executor=InProcess())
    spread = fit(prob, seed=5, chains=2, draws=600, tune=400, executor=Backwards(workers=2))
    x, y = flat(here.idata, "Pc__subject"), flat(spread.idata, "Pc__subject")
    np.testing.assert_array_equal(x, y)                        # chain i's seed depends on (seed, i) only
    assert list(here.idata.posterior.chain.values) == [0, 1]
    assert not np.array_equal(here.idata.posterior["Pc__subject"].values[0],
                              here.idata.posterior["Pc__subject"].values[1])  # two chains, two seeds
    assert here.passed
    prec = 1 / 3.0**2 + 1 / 2.0**2
    mean, sd = (20.0 / 3.0**2 + 24.0 / 2.0**2) / prec, prec**-0.5
    ess = here.doc["diagnostics"]["ess_bulk_min"]
    assert abs(x.mean() - mean) < 4 * sd / np.sqrt(ess)
    assert abs(x.std() - sd) < 4 * sd / np.sqrt(2 * ess)
