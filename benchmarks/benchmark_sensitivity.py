"""Ratio benchmark for Sobol' indices (printed, not asserted).

A Sobol' analysis with N = 8192 base points of the six-quantity classic model: our sobol_core
(16 independent scrambled Saltelli designs of 512 points, SALib estimators, replicate intervals,
convergence table) against SALib's own sample (N = 8192, scrambled) and analyze (its default
bootstrap intervals) on the same function. Target: at most 1.3x.

Run: python benchmarks/benchmark_sensitivity.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))


def _best(f, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        f()
        times.append(time.perf_counter() - t)
    return min(times)


def sobol_vs_salib() -> float:
    from benchmark_propagate import study
    from SALib.analyze import sobol as sobol_analyze
    from SALib.sample import sobol as sobol_sample

    from uncertainty.analyses.sampling import open_cube
    from uncertainty.analyses.sensitivity import problem_from_study, sobol_core

    s = study()
    prob = problem_from_study(s, "Jv", "typical")
    N = 8192
    salib = {"num_vars": prob.k, "names": list(prob.players), "bounds": [[0.0, 1.0]] * prob.k}

    def salib_alone() -> None:
        X = sobol_sample.sample(salib, N, calc_second_order=False, scramble=True, seed=1)
        Y = prob.evaluate_cube(open_cube(X))
        sobol_analyze.analyze(salib, Y, calc_second_order=False, seed=1)

    def ours() -> None:
        sobol_core(prob, N, seed=1)

    ours()
    salib_alone()  # warm both
    t_ours, t_salib = _best(ours), _best(salib_alone)
    ratio = t_ours / t_salib
    r = sobol_core(prob, N, seed=1)
    print(f"[1] Sobol' N={N}, d={prob.k}: ours {t_ours:.3f} s, SALib sample+analyze {t_salib:.3f} s -> "
          f"ratio {ratio:.2f}x (target <= 1.3x); ST(Kf) = {r.indices['Kf']['ST']:.3f} "
          f"[{r.indices['Kf']['ST_ci'][0]:.3f}, {r.indices['Kf']['ST_ci'][1]:.3f}]")
    return ratio


if __name__ == "__main__":
    np.seterr(all="ignore")
    sobol_vs_salib()
