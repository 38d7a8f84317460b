"""design --exact: refits that fail the quality gate are counted, reported and left out of the power
(the MCMC refit replaced by a stand-in that marks every fourth trial unconverged; no PyMC)."""

from __future__ import annotations

import importlib
from types import SimpleNamespace

import numpy as np

from uncertainty.priors import parse_prior

dz = importlib.import_module("uncertainty.analyses.design")


def _study() -> SimpleNamespace:
    # invented test prior: Kf lognormal, median 0.004, gsd 1.3, between-subject cv 0.35
    pri = {"Kf": parse_prior("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.3,
                                    "unit": "mL/min/mmHg/100g", "between_subject": {"cv": 0.35}})}
    section = {"design": "parallel", "endpoint": "Kf", "effect": {"parameter": "Kf", "multiply": 0.7},
               "measurement": {"cv": 0.2}, "n_range": [12, 12], "n_points": 2, "exact_trials": 40}
    return SimpleNamespace(path="trial.toml", seed=11, priors=pri, names=list(pri), correlation=None,
                           design=section)


def test_failed_refits_are_counted_and_left_out(monkeypatch):
    def stand_in(data, analysis, spec, seed):
        trials = data["y0"].shape[0]
        success = np.arange(trials) % 2 == 0            # half succeed ...
        converged = np.arange(trials) % 4 != 1           # ... and every fourth (all failures) is unconverged
        return {"success": success, "converged": converged}

    monkeypatch.setattr(dz, "analyse_mcmc", stand_in)
    res = dz.design(_study(), exact=True, seed=3).to_dict()
    row = res["curve"][0]
    assert row["refits_failed"] == 10
    # 20 successes among the 30 converged trials
    assert row["power"] == 20 / 30
    assert any("failed the quality gate" in n for n in res["notes"])
