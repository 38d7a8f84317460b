"""The typed layers pass mypy with zero errors (the files are listed in pyproject.toml, [tool.mypy])."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_mypy_clean():
    out = subprocess.run([sys.executable, "-m", "mypy", "--no-error-summary"], cwd=ROOT, capture_output=True,
                         text=True)
    assert out.returncode == 0, out.stdout + out.stderr
