"""The whole-body log density is rewritten to the same graph, hence the same numba cache key, in every process.

A fit compiles the log density and its gradient through PyTensor's numba back end, which keeps the compiled function
on disk under a key of the rewritten graph; with the same key a later fit of the same design (a new dataset of the
same subjects, times and doses: the readings are data, not constants) loads it instead of compiling it (for the
20-subject benchmark 45 s against 140 s, ``benchmarks/benchmark_whole_body_inference.py``). The key used to vary
between processes: broadcast checks on the reported slices of the course node, whose length PyTensor did not know,
were wired in a run-dependent order (``benchmarks/benchmark_compile_cache_key.py``).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.slow   # each build rewrites a 3-subject log density and gradient (about 30 s)

BENCHMARKS = Path(__file__).resolve().parents[1] / "benchmarks"


def test_rewritten_log_density_holds_no_runtime_shape_check() -> None:
    # the cause of the varying key, checked in one process: no Assert (CheckAndRaise) is left after the rewrites
    from pytensor.raise_op import CheckAndRaise

    sys.path.insert(0, str(BENCHMARKS))
    from benchmark_compile_cache_key import rewritten

    fg = rewritten(3)
    assert len(fg.apply_nodes) > 300   # the whole log density and gradient
    assert [n for n in fg.apply_nodes if isinstance(n.op, CheckAndRaise)] == []


def test_cache_key_is_the_same_in_fresh_interpreters() -> None:
    # two fresh interpreters (four builds before the change gave three keys; the check above holds its cause)
    code = f"import sys; sys.path.insert(0, {str(BENCHMARKS)!r}); from benchmark_compile_cache_key import key; " \
           "print(key(3))"
    keys = [subprocess.run([sys.executable, "-W", "ignore", "-c", code], capture_output=True, text=True,
                           check=True).stdout.split()[-1] for _ in range(2)]
    assert len(set(keys)) == 1, keys
