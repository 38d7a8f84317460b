"""Run every benchmarks/benchmark_*.py script in turn; each prints its own ratios against targets.

Run: python benchmarks/run.py [extra args passed to every script]
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path


def main() -> int:
    """Run each benchmark script in a fresh interpreter; return the number of scripts that failed."""
    here = Path(__file__).resolve().parent
    failed = 0
    for script in sorted(here.glob("benchmark_*.py")):
        print(f"== {script.name}", flush=True)
        rc = subprocess.call([sys.executable, str(script), *sys.argv[1:]])
        if rc:
            print(f"   {script.name} exited with status {rc}")
            failed += 1
    return failed


if __name__ == "__main__":
    sys.exit(main())
