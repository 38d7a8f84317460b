"""Per-refit cost benchmark: the work after the sampler in each fit (printed, not asserted).

Every ``infer`` fit and every refit of ``fluidshift calibrate`` (one per replicate) does, after nutpie's draws:
the conversion of the draws into ArviZ data, the deterministics computed from the stored free variables
(``samplers.add_deterministics``, one call of a compiled PyTensor function per draw) and the quality gate's
diagnostics. A py-spy profile of calibration refits (issue 21, benchmark_calibrate.py) had them at 28 %
(deterministics), 14 % (conversion) and 9 % (gate) of a refit, the sampler itself a few %.

Timed here on the same refits (a study's model compiled once, ``--refits`` fits of 4 chains x (1000 + 1000), seeds
1, 2, ...), each step old and new on the same draws, best of ``--repeat`` per refit, median over refits:

- conversion: nutpie's own (four datasets built, the two warm-up ones dropped) against ``samplers.arrow_idata``
  (posterior and sampler statistics only);
- deterministics: the function that converts and checks its arguments on each call, outputs stacked afterwards
  and each variable assigned on its own (the code before), against ``add_deterministics`` (trusted arguments, rows
  filled in place, one update);
- the gate (``diagnostics.diagnose``), unchanged, for scale; and the sampler's own time.

Both paths must give the same values to the last bit (printed; a difference is reported).

First measured 2026-12-04 with one-off scripts (2 shared cores, another session's jobs running), before the
one-update change: demo study (one individual, 16 free variables, 21 deterministics), 4000 draws of a real fit:
  deterministics 245 ms -> 74 ms (3.3x, load 2.2), conversion 54-67 ms -> 28 ms (about 2x, load 3.4), bit-identical;
septic_shock_cohort (10 subjects, steady_state form whose scan runs in every draw), 4000 synthetic draws (standard
normal unconstrained values; its nutpie compile alone takes minutes), load 1.7:
  deterministics 1643-1673 ms -> 1202-1229 ms (1.4x; the scan's own time is the rest), bit-identical.
A graph vectorised over the draws (pytensor ``vectorize_graph``, C mode) was tried and lost: demo 14 s to compile
against 5 s and 91 ms per 4000 draws against 53 ms; septic 40 s against 15 s and 2991 ms against 1202 ms; and its
values differed from the per-draw ones by up to 2e-12 relative. PyMC's ``compute_deterministics`` loops draw by draw
with checked calls. The per-draw function is compiled once per model and kept (``samplers._DETERMINISTIC_FNS``), so
a calibration's refits pay its compile once per process.

This script, 2026-12-04 on the shared 2 cores (per-refit medians; old -> new, same draws):
  demo study, 5 refits, load 1.6-1.7: conversion 35.5 -> 18.7 ms (1.90x), deterministics 213.5 -> 53.8 ms (3.97x),
      gate 33.6 ms, sampler 611 ms; a refit 894 -> 717 ms (1.25x); values identical to the last bit;
  arm_after_node_surgery (12 subjects, classic form), 3 refits, load 2.9-3.6: conversion 71.9 -> 33.1 ms (2.17x),
      deterministics 694 -> 266 ms (2.61x), gate 190 ms, sampler 33.3 s; a fit 34.2 -> 33.7 s (1.01x: its sampler
      dominates); identical to the last bit.
Whole calibration runs, main (38bf708) against this branch, `fluidshift calibrate studies/demo.toml --replicates 40
--bins 5 --seed 1 --json`, in alternated pairs: 78.8 -> 72.3 s (load 1.6-2.5), 84.0 -> 78.7 s (2.5-2.7), then, with
the other session's load rising during each pair, 55.2 -> 68.0 s (1.7-2.2) and 83.5 -> 94.0 s (2.2-2.4): the saving
(about 0.25 s per refit, 10 s per 40) is inside this machine's run-to-run noise (the sampler's own time moved by
+-30 %). Timed inside one run each (wrappers around the steps, load 2-3.3): per refit conversion 58 -> 25 ms,
deterministics 306 -> 72 ms (the first refit's compile spread over 40; about 180 -> 65 ms without it), gate 52 ->
45 ms; the three together 416 -> 142 ms; the sampler 1381 and 1188 ms. Every run's JSON document byte-identical.
`infer`'s fit of the demo study (seed 5, no checks): 45.2 s -> 39.8 s in one pair (compile included), posterior (38
variables, deterministics included), sampler statistics and result document identical.
The gate's diagnostics were left as they are: each gated variable is read by the verdict, and the only repeated
work found is the rank normalisation of the split chains, made once for R-hat and again for the bulk ESS inside
ArviZ (about a seventh of the gate's time under cProfile, so about 5 ms of a demo refit); sharing it would mean
re-implementing ArviZ's private steps.

Run: python benchmarks/benchmark_refit.py [--study PATH] [--refits 5] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import warnings
from typing import Any


def _checked_deterministics(model: Any, names: list[str]) -> Any:
    """The per-draw function as it was compiled before (arguments converted and checked on each call)."""
    from pymc.pytensorf import compile as compile_pymc

    values = [model.rvs_to_values[rv] for rv in model.free_RVs]
    with model:
        return compile_pymc(values, model.replace_rvs_by_values([model[n] for n in names]),
                            on_unused_input="ignore")


def _old_deterministics(fn: Any, model: Any, base: Any, names: list[str]) -> Any:
    """``add_deterministics`` as it was, on a copy of the draws ``base``: one checked call per draw, each output's
    draws stacked, each variable assigned to the posterior on its own. Returns the posterior filled."""
    import numpy as np

    post = base.copy()
    inputs = [model.rvs_to_values[rv].name for rv in model.free_RVs]
    n = post.sizes["chain"] * post.sizes["draw"]
    args = [np.asarray(post[k].values).reshape((n, *post[k].shape[2:])) for k in inputs]
    per_draw = [fn(*[a[i] for a in args]) for i in range(n)]
    values = [np.stack([np.asarray(d[j]) for d in per_draw]) for j in range(len(names))]
    dims_of = model.named_vars_to_dims
    for name, value in zip(names, values, strict=True):
        value = value.reshape((post.sizes["chain"], post.sizes["draw"], *value.shape[1:]))
        dims = list(dims_of.get(name) or [f"{name}_dim_{i}" for i in range(value.ndim - 2)])
        post[name] = (("chain", "draw", *dims), value)
        for d in dims:
            if d not in post.coords:
                known = model.coords.get(d)
                post.coords[d] = list(known) if known is not None else np.arange(post.sizes[d])
    return post


def _new_deterministics(model: Any, base: Any) -> Any:
    """``add_deterministics`` on a copy of the draws ``base`` (the InferenceData it filled)."""
    import arviz as az

    from uncertainty.analyses.inference import samplers

    idata = az.InferenceData(posterior=base.copy())
    samplers.add_deterministics(model, idata)
    return idata


def _best(repeat: int, fn: Any, *args: Any, **kwargs: Any) -> tuple[float, Any]:
    """Best wall time (s) of ``repeat`` calls of ``fn(*args, **kwargs)`` and its last result."""
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn(*args, **kwargs)
        times.append(time.perf_counter() - t0)
    return min(times), out


def main() -> None:
    """Refit the study's model ``--refits`` times and time each step after the sampler, old and new."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--study", default=None, help="study file (default: the bundled demo study)")
    ap.add_argument("--refits", type=int, default=5, help="refits timed (default 5)")
    ap.add_argument("--repeat", type=int, default=3, help="timings per step and refit, best kept (default 3)")
    args = ap.parse_args()
    warnings.simplefilter("ignore")

    import nutpie
    import pandas as pd

    from uncertainty.analyses.inference import samplers
    from uncertainty.analyses.inference.api import Session
    from uncertainty.analyses.inference.diagnostics import Gate, diagnose
    from uncertainty.core.resources import studies_dir
    from uncertainty.study import load_study

    path = args.study or str(studies_dir() / "demo.toml")
    print(f"load average before: {os.getloadavg()[0]:.2f} (1 min) on {os.cpu_count()} cores; study {path}", flush=True)
    t0 = time.perf_counter()
    session = Session(load_study(path))
    model, built = session.built.model, session.built
    print(f"model built and compiled for nutpie in {time.perf_counter() - t0:.1f} s", flush=True)
    nutpie_sample = sys.modules["nutpie.sample"]
    coords = {k: pd.Index(v) for k, v in session.compiled.coords.items()}
    names = [d.name for d in model.deterministics]
    t0 = time.perf_counter()
    old_fn = _checked_deterministics(model, names)
    t_old_compile = time.perf_counter() - t0
    t0 = time.perf_counter()
    samplers._deterministic_fn(model, names)
    print(f"deterministics compiled (C mode) in {t_old_compile:.1f} s (checked) and {time.perf_counter() - t0:.1f} s "
          "(trusted; the C modules are then cached)", flush=True)
    gate_vars = (list(built.quantities) + [f"{q}__spread" for q in built.spreads] + list(built.extra_params)
                 + ["Jv__typical", "Jv__subject"])
    rows: dict[str, list[float]] = {k: [] for k in ("sample", "conv_old", "conv_new", "det_old", "det_new", "gate")}
    mismatches: list[str] = []
    for r in range(args.refits):
        t0 = time.perf_counter()
        raw = nutpie.sample(session.compiled, chains=4, draws=1000, tune=1000, seed=r + 1, progress_bar=False,
                            save_warmup=False, return_raw_trace=True)
        rows["sample"].append(time.perf_counter() - t0)
        draws, stats = raw.get_arrow_trace()
        t, old = _best(args.repeat, nutpie_sample._arrow_to_arviz, draws, stats, coords=coords, save_warmup=False,
                       skip_vars=list(samplers.NUTPIE_OPTIONAL_STATS))
        rows["conv_old"].append(t)
        t, new = _best(args.repeat, samplers.arrow_idata, draws, stats, session.compiled.coords)
        rows["conv_new"].append(t)
        for g in ("posterior", "sample_stats"):
            if not new[g].drop_attrs().identical(old[g].drop_attrs()):
                mismatches.append(f"refit {r + 1}: {g} differs from nutpie's conversion")
        base = new.posterior
        t, ref = _best(args.repeat, _old_deterministics, old_fn, model, base, names)
        rows["det_old"].append(t)
        t, idata = _best(args.repeat, _new_deterministics, model, base)
        rows["det_new"].append(t)
        if not idata.posterior.identical(ref):
            mismatches.append(f"refit {r + 1}: the posterior with deterministics differs from the old path's")
        idata.sample_stats = new.sample_stats
        t, _ = _best(args.repeat, diagnose, idata, gate_vars, Gate())
        rows["gate"].append(t)
        print(f"refit {r + 1}: sampler {rows['sample'][-1] * 1e3:.0f} ms, conversion "
              f"{rows['conv_old'][-1] * 1e3:.1f} -> {rows['conv_new'][-1] * 1e3:.1f} ms, deterministics "
              f"{rows['det_old'][-1] * 1e3:.1f} -> "
              f"{rows['det_new'][-1] * 1e3:.1f} ms, gate {rows['gate'][-1] * 1e3:.1f} ms, "
              f"load {os.getloadavg()[0]:.2f}", flush=True)
    med = {k: statistics.median(v) for k, v in rows.items()}
    before = med["sample"] + med["conv_old"] + med["det_old"] + med["gate"]
    after = med["sample"] + med["conv_new"] + med["det_new"] + med["gate"]
    print(f"median per refit ({args.refits} refits, 4000 draws each):")
    print(f"  conversion     {med['conv_old'] * 1e3:8.1f} ms -> {med['conv_new'] * 1e3:8.1f} ms  "
          f"{med['conv_old'] / med['conv_new']:.2f}x")
    print(f"  deterministics {med['det_old'] * 1e3:8.1f} ms -> {med['det_new'] * 1e3:8.1f} ms  "
          f"{med['det_old'] / med['det_new']:.2f}x")
    print(f"  gate           {med['gate'] * 1e3:8.1f} ms (unchanged)")
    print(f"  sampler        {med['sample'] * 1e3:8.1f} ms (unchanged)")
    print(f"  refit          {before * 1e3:8.1f} ms -> {after * 1e3:8.1f} ms  {before / after:.2f}x")
    print("values identical to the old paths (to the last bit): "
          + ("yes" if not mismatches else "NO: " + "; ".join(mismatches)))
    print(f"load average after: {os.getloadavg()[0]:.2f} (1 min)")


if __name__ == "__main__":
    main()
