"""Compile-cost benchmark: CPU seconds for nutpie to compile the septic-cohort model (printed, not asserted).

The model is studies/septic_shock_cohort.toml (10 invented subjects, ``steady_state`` form with the safety
factors, lymph readings), built as ``fluidshift infer`` builds it. Each variant runs in a fresh interpreter
(so no in-process cache is shared) and the variants are interleaved (A, B, A, B, ...), because the machine
is shared: the figures are process CPU time (``time.process_time``, user + system of the child) and the
ratios to the first variant, not wall time. numba's on-disk cache (``pytensor.config.numba__cache``) is
left as it is; the first round may include filling it, so compare the later rounds.

Variants:

- ``default``: the settings ``fluidshift infer`` uses (``samplers.compile_model``: the free variables only,
  the deterministics computed after sampling);
- ``all``: nutpie's own default, every deterministic compiled into the sampler (the setting before);
- ``steps=N``: ``safety_steady_state`` with N bisection halvings instead of ``BISECTION_STEPS`` (30; it was 48,
  so ``steps=48`` is the old setting);
- ``exclude=NAME[:NAME]``: the NUMBA compile mode with these PyTensor rewrites excluded.

Measured on the shared 2-core machine (one round each, 10 subjects): 163 s CPU with the default settings;
48 or 24 halvings make no difference to the compile beyond the noise (the scan's loop body is compiled once,
whatever its count); excluding the ``fusion`` rewrites made it worse (stopped above 289 s). Under cProfile,
56 % of the compile was numba (a third of it LLVM's optimisation passes, a fifth its code generation) for the
logp + gradient function and the function of the deterministics (nutpie compiles both; each holds the
subjects' forward graph with its scan), 34 % PyTensor's graph rewrites.

Deterministics out of the sampler (nutpie ``var_names``; ``samplers.trace_names``), one round each on the shared
machine (load average 4-9): ``all`` 207 s CPU, ``default`` 153 s CPU (ratio 0.74) for the 10-subject septic study;
the deterministics then take about 5 s to compile in PyMC's C mode and 2.7 s for 4,000 draws. For the 40-subject
benchmark cohort (``benchmark_cohort.py``, no scan), with a warm numba cache: 29 s -> 22 s CPU.

Run: python benchmarks/benchmark_compile.py [--rounds 2] [--variants steps=48 default exclude=fusion ...] [--study PATH]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

CHILD = r"""
import json, sys, time, warnings
warnings.simplefilter("ignore")
variant, study_path = sys.argv[1], sys.argv[2]
import numpy as np
import pytensor
import uncertainty.physiology.balance as bal
from uncertainty.analyses.inference.api import _problem
from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.samplers import compile_model
from uncertainty.study import load_study

if variant == "all":
    import uncertainty.analyses.inference.samplers as smp

    smp.trace_names = lambda model: None   # nutpie's default: every deterministic compiled into the sampler
elif variant.startswith("steps="):
    bal.safety_steady_state.__kwdefaults__["n_steps"] = int(variant.split("=", 1)[1])
elif variant.startswith("exclude="):
    from pytensor.compile import mode as pt_mode

    names = variant.split("=", 1)[1].split(":")
    pt_mode.predefined_modes["NUMBA"] = pt_mode.predefined_modes["NUMBA"].excluding(*names)
built = build_model(_problem(load_study(study_path), None, None))
t0 = time.process_time()
compiled, _ = compile_model(built.model, "nutpie")
compile_s = time.process_time() - t0
print(json.dumps({"variant": variant, "compile_cpu_s": compile_s}))
"""


def main() -> None:
    """Run the variants interleaved in fresh interpreters and print CPU seconds and ratios."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=2)
    ap.add_argument("--variants", nargs="+", default=["steps=48", "default"])
    ap.add_argument("--study", default="studies/septic_shock_cohort.toml")
    args = ap.parse_args()
    results: dict[str, list[float]] = {v: [] for v in args.variants}
    for r in range(args.rounds):
        for v in args.variants:
            out = subprocess.run([sys.executable, "-c", CHILD, v, args.study], capture_output=True, text=True,
                                 check=True)
            rec = json.loads(out.stdout.strip().splitlines()[-1])
            results[v].append(rec["compile_cpu_s"])
            print(f"round {r + 1} {v:>24s}: compile {rec['compile_cpu_s']:7.1f} s CPU", flush=True)
    ref = results[args.variants[0]]
    for v, xs in results.items():
        ratio = [x / y for x, y in zip(xs, ref, strict=True)]
        print(f"{v:>24s}: " + ", ".join(f"{x:.1f}" for x in xs) + "  ratio to first: "
              + ", ".join(f"{q:.2f}" for q in ratio))


if __name__ == "__main__":
    main()
