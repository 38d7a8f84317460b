"""Ratio benchmarks for trial design (printed, not asserted).

1. Fast design search (1,000 simulated trials at each of 10 sample sizes, closed-form analysis)
   against the projected cost of exact refits (5 NUTS refits timed after compilation, scaled to
   10,000 trials). Target: at least 100x.
2. The exact path on 2 dask workers against 1 (one core per task, workers warmed up so the one-off
   model compilation per process is not counted). Target: at least 1.6x.

Run: python benchmarks/benchmark_design.py [--skip-dask]
"""

from __future__ import annotations

import sys
import time
from types import SimpleNamespace

import numpy as np


def _study() -> SimpleNamespace:
    from uncertainty.priors import parse_prior

    # invented benchmark settings (log-normal Kf endpoint, 30% reduction)
    pri = {"Kf": parse_prior("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.3, "unit": "mL/min/mmHg/100g",
                                    "between_subject": {"cv": 0.35}})}
    sec = {"design": "parallel", "endpoint": "Kf", "effect": {"parameter": "Kf", "multiply": 0.7},
           "measurement": {"cv": 0.2}, "n_range": [10, 100], "n_points": 10, "trials": 1000, "exact_trials": 20}
    return SimpleNamespace(path="bench.toml", seed=1, priors=pri, names=["Kf"], correlation=None, design=sec)


def _warm(*_: object) -> bool:
    from uncertainty.analyses import design as dz

    dz._compiled_model("parallel")
    return True


def fast_vs_exact() -> float:
    from uncertainty.analyses import design as dz

    st = _study()
    t0 = time.perf_counter()
    res = dz.design(st, seed=1).to_dict()
    fast = time.perf_counter() - t0
    trials = sum(1 for _ in res["curve"]) * 1000
    spec = dz.parse_design(st)
    _warm()
    data = dz.simulate_trials(st, spec, 30, 5, np.random.default_rng(0))
    t0 = time.perf_counter()
    dz.analyse_mcmc(data, spec.analysis, spec, seed=1)
    per_refit = (time.perf_counter() - t0) / 5
    projected = per_refit * trials
    ratio = projected / fast
    print(f"fast design search: {fast:.2f} s for {trials} simulated trials ({len(res['curve'])} sizes)")
    print(f"exact refit: {per_refit:.3f} s each (after compilation) -> projected {projected:.0f} s")
    print(f"ratio projected exact / fast = {ratio:.0f}x (target >= 100x)")
    return ratio


def dask_two_vs_one() -> float:
    from uncertainty.analyses import design as dz
    from uncertainty.core.parallel import make_executor

    st = _study()
    st.design = dict(st.design, n_range=[20, 40], n_points=8, exact_trials=25)
    times = {}
    for w in (1, 2):
        with make_executor(workers=w) as ex:
            ex.client.run(_warm)  # compile the trial model once in each worker process
            t0 = time.perf_counter()
            dz.design(st, seed=2, exact=True, executor=ex)
            times[w] = time.perf_counter() - t0
    ratio = times[1] / times[2]
    print(f"exact path: 1 worker {times[1]:.1f} s, 2 workers {times[2]:.1f} s -> {ratio:.2f}x (target >= 1.6x)")
    return ratio


if __name__ == "__main__":
    fast_vs_exact()
    if "--skip-dask" not in sys.argv:
        dask_two_vs_one()
