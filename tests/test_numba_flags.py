"""PyTensor's numba kernels are compiled without fast-math once ``uncertainty`` is imported, so that a seed gives
the same draws whether a kernel was compiled afresh or loaded from PyTensor's disk cache (the demo twice on a fresh
cache, ``test_run_demo.py``, is the end-to-end check); a user's own flag is kept."""

import os
import subprocess
import sys

PROBE = "import uncertainty, pytensor; print(pytensor.config.numba__fastmath)"
PROBE_LATE = "import pytensor, uncertainty; print(pytensor.config.numba__fastmath)"


def _run(code: str, flags: str | None) -> str:
    env = {k: v for k, v in os.environ.items() if k != "PYTENSOR_FLAGS"}
    if flags is not None:
        env["PYTENSOR_FLAGS"] = flags
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True)
    return out.stdout.strip().splitlines()[-1]


def test_fast_math_off_whether_pytensor_comes_first_or_later():
    assert _run(PROBE, None) == "False"
    assert _run(PROBE_LATE, None) == "False"
    assert _run(PROBE, "floatX=float64") == "False"   # other flags kept beside it


def test_a_users_own_fast_math_flag_is_kept():
    assert _run(PROBE, "numba__fastmath=True") == "True"
