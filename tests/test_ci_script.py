"""`.ci/run` runs the README's test command and nothing the README does not show, and fails when
pytest collects no test (pytest's exit status 5)."""

import os
import shutil
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
SCRIPT = ROOT / ".ci" / "run"
README = (ROOT / "README.md").read_text(encoding="utf-8")
NAVIGATION = {"set -euo pipefail", 'cd "$(dirname "$0")/.."'}  # shell set-up, not commands


def script_commands() -> list[str]:
    lines = [ln.strip() for ln in SCRIPT.read_text(encoding="utf-8").splitlines()]
    return [ln for ln in lines if ln and not ln.startswith("#") and ln not in NAVIGATION]


def test_every_ci_command_is_shown_in_the_readme():
    readme_lines = {ln.strip() for ln in README.splitlines()}
    extra = [c for c in script_commands() if c not in readme_lines]
    assert not extra, f".ci/run runs commands the README does not show: {extra}"


def test_ci_ends_with_the_readme_test_command():
    last = script_commands()[-1]
    assert "python -m pytest" in last and last in README


@pytest.mark.parametrize("pytest_status", [0, 5, 1])
def test_ci_exit_status_follows_pytest_and_no_tests_collected_fails(tmp_path, pytest_status):
    if shutil.which("bash") is None:
        pytest.skip("needs bash")
    (tmp_path / ".ci").mkdir()
    shutil.copy(SCRIPT, tmp_path / ".ci" / "run")
    fake = tmp_path / "bin"
    fake.mkdir()
    # stand-ins: pip succeeds, pytest exits with the given status; chromium "installed" (no apt-get)
    (fake / "python").write_text(f'#!/bin/sh\nif [ "$2" = pytest ]; then exit {pytest_status}; fi\nexit 0\n')
    (fake / "chromium").write_text("#!/bin/sh\nexit 0\n")
    for f in fake.iterdir():
        f.chmod(0o755)
    env = {**os.environ, "PATH": f"{fake}:/usr/bin:/bin"}
    res = subprocess.run(["bash", str(tmp_path / ".ci" / "run")], env=env, capture_output=True, text=True)
    assert res.returncode == pytest_status, res.stderr
