"""Ratio benchmarks for Bayesian updating on the 20-subject cumulative-step model (printed, not asserted).

The model: 20 simulated subjects (invented truths), limb volume every 30 s over five 4-min venous-cuff
steps (20 to 60 mmHg), fitted by the ``volume_time_course`` observation with a hierarchical Kf.

1. ESS per second of sampling, nutpie against PyMC's own NUTS (same model, 4 chains, 1000 + 1000
   draws, seeded); compile times reported separately. Target: at least 3x.
2. Wall time (compile + sampling) to R-hat <= 1.01 with no divergences, the re-parameterised model
   (cuff-scale combinations, tau sampled as one quantity) against the naive one (per-subject Kf,
   C_tis and L), both with nutpie and chains started around the posterior mode, each doubling
   draws and warm-up (250, 500, 1000, 2000) until it passes. A naive run still going at the time
   cap is stopped; the ratio is then an upper bound. Target: at most 0.1x.

Run: python benchmarks/benchmark_inference.py [--skip-pymc] [--only-reparameterisation | --only-ess] [--cap SECONDS]
"""

from __future__ import annotations

import sys
import time
from typing import Any

import numpy as np

N_SUBJECTS = 20
STEPS = [(0.0, 20.0), (4.0, 30.0), (8.0, 40.0), (12.0, 50.0), (16.0, 60.0)]  # invented protocol
NOISE_SD = 0.01   # mL/100 mL, from memory: strain-gauge resolution about 0.01 mL/100 mL
DENSITY = 1.05    # g/mL, common practice for skeletal muscle
SCHEDULE = (250, 500, 1000, 2000)  # draws (= warm-up steps) per chain tried in turn
CURVE = "obs0__volume_time_course"


def simulated_data(seed: int = 20) -> dict[str, list]:
    """Invented readings of N_SUBJECTS subjects through the curve the model fits."""
    from uncertainty.analyses.inference.observations import volume_time_course as vtc
    from uncertainty.physiology.interstitium import cuff_curve

    rng = np.random.default_rng(seed)
    t = np.arange(0.0, 20.0 + 1e-9, 0.5)
    at, cuffs = [a for a, _ in STEPS], [c for _, c in STEPS]
    data: dict[str, list] = {"subject": [], "time_min": [], "volume": []}
    for s in range(N_SUBJECTS):
        kf = 0.0035 * np.exp(rng.normal(0.0, 0.36))   # invented: mL/min/mmHg/100 mL
        pvi = rng.normal(15.0, 4.0)                    # invented: mmHg
        cv = 0.045 * np.exp(rng.normal(0.0, 0.25))     # invented: mL/mmHg/100 mL
        y = cuff_curve(t, at, cuffs, kf, 30.0 * kf, 0.0, cv, Pv_rest=vtc.PV_REST, Pvi=pvi, tau_v=0.6,
                       r=vtc.R_DEFAULT, transmission=0.9, smooth=vtc.SMOOTH_MMHG)
        data["subject"] += [f"S{s + 1:02d}"] * t.size
        data["time_min"] += list(t)
        data["volume"] += list(y + NOISE_SD * rng.standard_normal(t.size))
    return data


def problem(parameterisation: str = "combinations") -> Any:
    """A Problem with a hierarchical Kf (forearm prior, per 100 g) and the simulated curves."""
    from uncertainty.analyses.inference.problem import Problem, normalise_observations
    from uncertainty.physiology import starling
    from uncertainty.priors import Prior

    def outputs(v: dict[str, Any], xp: Any) -> dict[str, Any]:
        return {"Jv": starling.filtration(v["Kf"], v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"])}

    # Kf prior: Clin Physiol 1983 3:433 (abstract), forearm 0.0036 mL/min/mmHg/100 mL, per 100 g here
    kf = Prior("Kf", "lognormal", {"median": 0.0035 / DENSITY, "gsd": 1.35}, between_subject={"cv": 0.38})
    obs = {"kind": "volume_time_course", "file": "simulated.csv", "sd": NOISE_SD, "data": simulated_data(),
           "steps": [{"at_min": a, "to": c} for a, c in STEPS]}
    if parameterisation == "naive":
        obs["parameterisation"] = "naive"
    fixed = {"Pc": 20.0, "Pi": -1.0, "pi_c": 25.0, "pi_i": 8.0, "sigma": 0.9}  # invented round values
    return Problem(priors={"Kf": kf}, fixed=fixed, evaluate=outputs,
                   observations=normalise_observations([obs], file="benchmark.toml"),
                   file="benchmark.toml", density=DENSITY)


def _quality(idata: Any, model: Any) -> tuple[float, float, int]:
    """(largest R-hat, smallest bulk ESS, divergences) over the free quantities."""
    import arviz as az

    names = [v.name for v in model.free_RVs]
    s = az.summary(idata, var_names=names, kind="diagnostics")
    div = int(idata.sample_stats["diverging"].values.sum())
    return float(s["r_hat"].max()), float(s["ess_bulk"].min()), div


def ess_per_second(skip_pymc: bool) -> float | None:
    """nutpie against PyMC NUTS on the re-parameterised model: min bulk ESS / sampling seconds."""
    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.samplers import posterior_mode, sample

    built = build_model(problem())
    mode, mode_s = posterior_mode(built.model)
    print(f"posterior mode (start of every chain, both samplers): {mode_s:.1f} s")
    run = sample(built.model, sampler="nutpie", chains=4, draws=1000, tune=1000, seed=1, target_accept=0.95,
                 start=mode)
    rhat, ess, div = _quality(run.idata, built.model)
    nut = ess / run.sample_seconds
    print(f"nutpie: compile {run.compile_seconds:.1f} s, sampling {run.sample_seconds:.1f} s, min bulk ESS "
          f"{ess:.0f}, R-hat {rhat:.3f}, {div} divergences -> {nut:.1f} ESS/s")
    if skip_pymc:
        return None
    built = build_model(problem())
    t0 = time.perf_counter()
    built.model.compile_logp()
    built.model.compile_dlogp()
    compile_s = time.perf_counter() - t0
    run = sample(built.model, sampler="pymc", chains=4, draws=1000, tune=1000, seed=1, target_accept=0.95,
                 start=posterior_mode(built.model)[0])
    rhat, ess, div = _quality(run.idata, built.model)
    pym = ess / run.sample_seconds
    print(f"PyMC NUTS: logp+gradient compile {compile_s:.1f} s (again inside pm.sample), sampling "
          f"{run.sample_seconds:.1f} s on 2 cores, min bulk ESS {ess:.0f}, R-hat {rhat:.3f}, {div} divergences "
          f"-> {pym:.2f} ESS/s")
    ratio = nut / pym
    print(f"ratio nutpie / PyMC ESS per second = {ratio:.1f}x (target >= 3x)")
    return ratio


def time_to_gate(parameterisation: str, cap: float) -> tuple[float, bool]:
    """Wall seconds (compile, posterior mode for the start, every sampling attempt) until R-hat <= 1.01
    and no divergences, and whether that was reached."""
    import dataclasses

    import nutpie

    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.samplers import _jittered_start, compile_model, posterior_mode

    t0 = time.perf_counter()
    built = build_model(problem(parameterisation))
    compiled, _ = compile_model(built.model)
    compiled = dataclasses.replace(compiled, initial_point_func=_jittered_start(built.model,
                                                                                 posterior_mode(built.model)[0]))
    for n in SCHEDULE:
        left = cap - (time.perf_counter() - t0)
        if left <= 0:
            break
        bg = nutpie.sample(compiled, chains=4, draws=n, tune=n, seed=1, progress_bar=False, save_warmup=False,
                           target_accept=0.95, blocking=False)
        try:
            idata = bg.wait(timeout=left)  # the trace (wait takes it only once); TimeoutError at the cap
        except TimeoutError:
            idata = None
        if idata is None or not bg.is_finished:
            bg.cancel()
            print(f"  {parameterisation}: stopped at the {cap:.0f} s cap during {n} + {n} draws")
            return time.perf_counter() - t0, False
        rhat, ess, div = _quality(idata, built.model)
        print(f"  {parameterisation}: {n} + {n} draws, R-hat {rhat:.3f}, min bulk ESS {ess:.0f}, {div} divergences, "
              f"{time.perf_counter() - t0:.0f} s so far")
        if rhat <= 1.01 and div == 0:
            return time.perf_counter() - t0, True
    return time.perf_counter() - t0, False


def reparameterised_vs_naive(cap: float) -> float:
    """Wall-time ratio re-parameterised / naive to the R-hat and divergence gate."""
    good, ok = time_to_gate("combinations", cap)
    naive, naive_ok = time_to_gate("naive", cap)
    ratio = good / naive
    bound = "" if naive_ok else " (naive never passed: upper bound)"
    print(f"re-parameterised {good:.0f} s ({'passed' if ok else 'did not pass'}), naive {naive:.0f} s"
          f"{'' if naive_ok else ' without passing'}")
    print(f"ratio re-parameterised / naive wall time = {ratio:.3f}x{bound} (target <= 0.1x)")
    return ratio


def main() -> None:
    """Run both comparisons and print their ratios against the targets."""
    args = sys.argv[1:]
    cap = float(args[args.index("--cap") + 1]) if "--cap" in args else 1800.0
    if "--only-reparameterisation" not in args:
        ess_per_second("--skip-pymc" in args)
    if "--only-ess" not in args:
        reparameterised_vs_naive(cap)


if __name__ == "__main__":
    main()
