"""Simulation-based calibration (Talts et al. 2018, arXiv:1804.06788) of the lymph-flow model.

Truths (Kf, Pc) are drawn from the prior, a lymph-flow reading is simulated through the same
Starling formula, the model is refitted (compiled once, new data each time), and the rank of each
truth among L = 99 thinned posterior draws is recorded. With N = 100 replicates: ranks binned into
10 bins must pass a chi-square uniformity test (p > 0.001), and the 90% central interval must cover
the truth a number of times within the central 99.9% of Binomial(100, 0.9).
"""

from __future__ import annotations

import numpy as np
import pytest
from inference_helpers import FIXED, lognormal, normal, problem, starling_outputs
from scipy import stats

from uncertainty.analyses.inference.api import Session
from uncertainty.analyses.inference.summaries import flat

pytestmark = pytest.mark.slow

N_REPLICATES = 100
L_DRAWS = 99
READING_SD = 0.008  # mL/min/100 g, invented test value


def test_sbc_ranks_uniform_and_coverage_binomial():
    priors = {"Kf": lognormal("Kf", 0.004, 1.3), "Pc": normal("Pc", 24.3, 2.6)}
    session = Session(problem(priors, [{"kind": "lymph_flow", "value": 0.04, "sd": READING_SD}]))
    rng = np.random.default_rng(20180406)
    ranks = {"Kf": [], "Pc": [], "Jv": []}
    covered = {"Kf": 0, "Pc": 0, "Jv": 0}
    for rep in range(N_REPLICATES):
        truth = {"Kf": float(priors["Kf"].frozen().rvs(random_state=rng)),
                 "Pc": float(priors["Pc"].frozen().rvs(random_state=rng))}
        truth["Jv"] = float(starling_outputs({**FIXED, **truth}, np)["Jv"])
        y = truth["Jv"] + READING_SD * rng.standard_normal()
        run = session.fit(data={session.terms[0]: y}, seed=1000 + rep, chains=2, draws=396, tune=300,
                          summarise_result=False)
        for name, var in (("Kf", "Kf__subject"), ("Pc", "Pc__subject"), ("Jv", "Jv__subject")):
            draws = flat(run.idata, var)[:, 0]
            thinned = draws[:: len(draws) // L_DRAWS][:L_DRAWS]
            ranks[name].append(int((thinned < truth[name]).sum()))
            lo, hi = np.quantile(draws, [0.05, 0.95])
            covered[name] += int(lo <= truth[name] <= hi)
    lo_ok = stats.binom.ppf(0.0005, N_REPLICATES, 0.9)
    hi_ok = stats.binom.isf(0.0005, N_REPLICATES, 0.9)
    for name in ranks:
        counts = np.bincount(np.asarray(ranks[name]) * 10 // (L_DRAWS + 1), minlength=10)
        p = stats.chisquare(counts).pvalue
        assert p > 0.001, (name, counts, p)
        assert lo_ok <= covered[name] <= hi_ok, (name, covered[name], lo_ok, hi_ok)
