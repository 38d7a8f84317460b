"""ruff (configured in pyproject.toml) passes on the whole repository."""

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_ruff_clean():
    cmd = [shutil.which("ruff")] if shutil.which("ruff") else [sys.executable, "-m", "ruff"]
    res = subprocess.run([*cmd, "check", str(ROOT)], capture_output=True, text=True, cwd=ROOT)
    assert res.returncode == 0, res.stdout + res.stderr
