"""Is PyTensor's numba cache key of the whole-body log density the same in every process? (printed, not asserted)

A fit compiles nutpie's log density and gradient with PyTensor's numba back end, which caches the compiled
function on disk (``~/.pytensor/numba``) under a key of the rewritten function graph. A second fit of the same study
skips most of the compile (49 s against 140-150 s for 20 invented subjects) only when the key is the same. This
script builds the benchmark's invented whole-body study (``benchmark_whole_body_inference.write_study``) in
``--runs`` fresh interpreters, rewrites the log density and gradient as the NUMBA mode does (data frozen, as nutpie
does) and prints each key, without compiling.

Measured 2026-12-05 (pytensor 2.38, numba 0.65, 3 subjects): ten builds gave four keys (three, three, three and one
times), with PYTHONHASHSEED fixed or not; the node types in order, the constants and the inputs were identical, one
fused elementwise node's own key differed in some builds and otherwise only the wiring. With PyTensor's toposort
replaced by one that breaks ties by a structural hash of each node, five builds gave five keys: the rewritten graphs
differ in their wiring, not only in their order (that experiment is not kept here). This script, twice: two keys
(a30fbe79, f5eab61e, both seen before). A stable key is upstream's (pymc-devs/pytensor #1731, #2051).

Found and mended 2026-12-05 (thirteenth session): the builds differed in the shape arithmetic of the reported
slices ``[::per]`` of the course node's output, whose length PyTensor did not know: two equal lengths computed two
ways met in a broadcast check (``Eq`` and ``Assert``) whose operand order, and one fused integer node's, varied
between processes. The course Op now declares its outputs' static lengths and their shapes (``infer_shape``), the
checks fold away (668 -> 641 nodes for 3 subjects) and five fresh builds gave one key (ff236289 x5; four builds
before the change gave three keys).

Run: python benchmarks/benchmark_compile_cache_key.py [--subjects 3] [--runs 5]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from collections import Counter
from pathlib import Path
from typing import Any


def rewritten(subjects: int) -> Any:
    """The log density + gradient graph of ``subjects`` invented subjects, rewritten as the NUMBA mode does."""
    import pytensor
    import pytensor.tensor as pt
    from pymc.model.transform.optimization import freeze_dims_and_data
    from pytensor.compile.mode import get_mode
    from pytensor.graph.fg import FunctionGraph

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from benchmark_whole_body_inference import write_study

    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.problem import problem_from_study
    from uncertainty.study import load_study

    with tempfile.TemporaryDirectory() as tmp:
        path, _ = write_study(Path(tmp), subjects, 10)
        model = freeze_dims_and_data(build_model(problem_from_study(load_study(path))).model)
    logp = model.logp()
    fg = FunctionGraph(model.value_vars, [logp, *pt.grad(logp, model.value_vars)], clone=True)
    with pytensor.config.change_flags(traceback__limit=0):
        get_mode("NUMBA").optimizer.rewrite(fg)
    return fg


def key(subjects: int) -> str:
    """The numba cache key of :func:`rewritten` (``subjects`` invented subjects)."""
    from pytensor.link.numba.dispatch.basic import numba_funcify_and_cache_key

    _, k = numba_funcify_and_cache_key(rewritten(subjects))
    return str(k)


def main() -> None:
    """Print the key of each fresh build and how many distinct keys there were."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--subjects", type=int, default=3)
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        print(key(args.subjects))
        return
    keys = []
    for i in range(args.runs):
        done = subprocess.run([sys.executable, __file__, "--child", "--subjects", str(args.subjects)],
                              capture_output=True, text=True)
        k = (done.stdout.strip().splitlines() or [f"failed: {done.stderr.strip()[-200:]}"])[-1]
        keys.append(k)
        print(f"build {i + 1}: {k[:16]}", flush=True)
    counts = Counter(keys)
    print(f"{len(counts)} distinct key(s) in {args.runs} builds: " + ", ".join(f"{k[:8]} x{n}" for k, n in
                                                                            counts.most_common()))


if __name__ == "__main__":
    main()
