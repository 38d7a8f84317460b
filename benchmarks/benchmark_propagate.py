"""Ratio benchmarks for forward propagation and start-up (printed, not asserted).

1. Compute of 10^6 forward draws of the six-quantity classic model (after imports): our
   sampling.draw + model.evaluate against a bare numpy script drawing the same distributions and
   evaluating the same formula in the same process. Target: at most 1.5x.
2. Time to an answer of fixed accuracy (both 95% interval ends of Jv with a Monte Carlo standard
   error below 0.5% of its sd): randomised QMC (propagate with tol, doubling) against bare-numpy MC
   (batch means over 16 batches, doubling). Target: at most 0.5x.
3. Start-up: `fluidshift --help` against `python -c "import numpy"` (median of 7 runs). Target: at
   most 2x.

Run: python benchmarks/benchmark_propagate.py
"""

from __future__ import annotations

import math
import statistics
import subprocess
import sys
import time

import numpy as np

# invented benchmark priors (skeletal-muscle-like), the six Starling quantities declared directly
SIX = {
    "Kf": {"dist": "lognormal", "median": 0.004, "gsd": 1.4, "unit": "mL/min/mmHg/100g"},
    "Pc": {"dist": "normal", "mean": 25.0, "sd": 3.0, "unit": "mmHg"},
    "Pi": {"dist": "normal", "mean": -2.0, "sd": 1.5, "unit": "mmHg"},
    "pi_c": {"dist": "normal", "mean": 25.0, "sd": 1.5, "unit": "mmHg"},
    "pi_i": {"dist": "lognormal", "median": 8.0, "gsd": 1.25, "unit": "mmHg"},
    "sigma": {"dist": "beta", "mean": 0.9, "sd": 0.03},
}


def study():
    """A classic study with the six quantities declared and no correlations or subject spread."""
    from uncertainty.study import Study

    return Study.from_dict({"study": {"title": "benchmark (invented)", "tissue": "skeletal_muscle",
                                      "model": "classic", "seed": 1}, "parameters": SIX})


def bare_numpy(n: int, rng: np.random.Generator) -> np.ndarray:
    """The same distributions and formula in plain numpy (beta via its two shape parameters)."""
    m, s = 0.9, 0.03
    k = m * (1 - m) / s**2 - 1
    Kf = 0.004 * np.exp(math.log(1.4) * rng.standard_normal(n))
    Pc = rng.normal(25.0, 3.0, n)
    Pi = rng.normal(-2.0, 1.5, n)
    pic = rng.normal(25.0, 1.5, n)
    pii = 8.0 * np.exp(math.log(1.25) * rng.standard_normal(n))
    sig = rng.beta(m * k, (1 - m) * k, n)
    return Kf * (Pc - Pi - sig * (pic - pii))


def _best(f, repeat: int = 5) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        f()
        times.append(time.perf_counter() - t)
    return min(times)


def forward_draws() -> float:
    from uncertainty.analyses.sampling import draw
    from uncertainty.forms.evaluate import evaluate

    s = study()
    n = 10**6
    evaluate(s, draw(s, 1000, method="mc", seed=0, layer="typical"))  # warm

    ours = _best(lambda: evaluate(s, draw(s, n, method="mc", seed=1, layer="typical"))["Jv"])
    ours_qmc = _best(lambda: evaluate(s, draw(s, 2**20, method="qmc", seed=1, layer="typical"))["Jv"])
    base = _best(lambda: bare_numpy(n, np.random.default_rng(1)))
    ratio = ours / base
    print(f"[1] 10^6 forward draws: ours (mc) {ours:.3f} s, ours (qmc, 2^20) {ours_qmc:.3f} s, "
          f"bare numpy {base:.3f} s -> ratio {ratio:.2f}x (target <= 1.5x)")
    return ratio


def _mc_se_of_ends(batches: list[np.ndarray]) -> float:
    q = np.array([np.quantile(b, [0.025, 0.975]) for b in batches])
    return float(np.max(q.std(axis=0, ddof=1) / math.sqrt(len(batches))))


def fixed_accuracy() -> float:
    from uncertainty.analyses.propagate import propagate

    s = study()
    sd = float(np.std(bare_numpy(10**6, np.random.default_rng(9))))
    tol = 0.005 * sd
    t = time.perf_counter()
    # propagate gates the 95% margin t_{0.975,15} x se; ask for the same se as the bare MC criterion
    from scipy.stats import t as student_t

    margin = tol * float(student_t.ppf(0.975, 15))
    r = propagate(s, samples=2**14, method="qmc", seed=2, tol=margin, max_samples=2**26, outputs=["Jv"])
    ours = time.perf_counter() - t

    def bare() -> int:
        rng = np.random.default_rng(3)
        per = 2**10
        batches = [bare_numpy(per, rng) for _ in range(16)]
        while _mc_se_of_ends(batches) >= tol:
            batches = [np.concatenate([b, bare_numpy(b.size, rng)]) for b in batches]
        return 16 * batches[0].size

    t = time.perf_counter()
    n_mc = bare()
    base = time.perf_counter() - t
    ratio = ours / base
    print(f"[2] fixed accuracy (se of 95% ends < 0.5% of sd = {tol:.3g}): RQMC {r.samples} draws "
          f"{ours:.3f} s, bare MC {n_mc} draws {base:.3f} s -> ratio {ratio:.2f}x (target <= 0.5x)")
    return ratio


def startup() -> float:
    def run(cmd: list[str]) -> float:
        times = []
        for _ in range(7):
            t = time.perf_counter()
            subprocess.run(cmd, check=True, capture_output=True)
            times.append(time.perf_counter() - t)
        return statistics.median(times)

    exe = ["fluidshift"]
    ours = run(exe + ["--help"])
    base = run([sys.executable, "-c", "import numpy"])
    ratio = ours / base
    print(f"[3] start-up: fluidshift --help {ours:.3f} s, python -c 'import numpy' {base:.3f} s -> "
          f"ratio {ratio:.2f}x (target <= 2x)")
    return ratio


if __name__ == "__main__":
    forward_draws()
    fixed_accuracy()
    startup()
