"""The shipped data folders (priors/, studies/) are found from a built wheel and an editable install."""

import os
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PROBE = ("from uncertainty.core.resources import priors_dir, studies_dir; import uncertainty; "
         "print(uncertainty.__file__); print(priors_dir()); "
         "print(sorted(p.name for p in priors_dir().glob('*.toml')))")


@pytest.fixture(scope="module")
def wheel(tmp_path_factory):
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run([sys.executable, "-m", "pip", "wheel", str(ROOT), "--no-deps", "--no-build-isolation",
                    "-q", "-w", str(out)], check=True, capture_output=True)
    (whl,) = out.glob("fluidshift-*.whl")
    return whl


def test_wheel_ships_priors_and_studies(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    priors = {Path(n).name for n in names if n.startswith("uncertainty/priors_data/")}
    expected = {p.name for p in (ROOT / "priors").glob("*.toml")}
    assert expected <= priors
    studies = {n for n in names if n.startswith("uncertainty/studies_data/")}
    assert {f"uncertainty/studies_data/{p.relative_to(ROOT / 'studies')}"
            for p in (ROOT / "studies").glob("*.toml")} <= studies


def test_wheel_ships_every_module_of_the_source_tree(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    source = {p.relative_to(ROOT).as_posix() for p in (ROOT / "uncertainty").rglob("*.py")
              if "__pycache__" not in p.parts}
    missing = sorted(source - names)
    assert not missing, f"modules left out of the wheel (add their package to pyproject.toml): {missing}"


def test_installed_wheel_finds_priors(wheel, tmp_path):
    site = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(site)  # a wheel installs by unpacking into site-packages
    out = subprocess.run([sys.executable, "-c", PROBE], capture_output=True, text=True, cwd=tmp_path,
                         env={"PYTHONPATH": str(site), "PATH": "/usr/bin:/bin"}, check=True).stdout.splitlines()
    assert out[0].startswith(str(site))
    assert Path(out[1]).is_relative_to(site)
    assert "skeletal_muscle.toml" in out[2]


def test_editable_install_finds_priors(tmp_path):
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--system-site-packages", str(venv)], check=True)
    py = venv / "bin" / "python"
    # the build tools (setuptools with its wheel command) come from this interpreter's environment: the base
    # interpreter's own may be too old to build an editable install (setuptools 65 without the wheel package)
    tools = {**os.environ, "PYTHONPATH": sysconfig.get_paths()["purelib"]}
    subprocess.run([str(py), "-m", "pip", "install", "-q", "--no-deps", "--no-build-isolation", "-e", str(ROOT)],
                   check=True, capture_output=True, env=tools)
    # The venv sees the base interpreter's site-packages (for the build tools), where CI has a regular
    # install of this package that the editable finder would never be asked about: hide it from the probe.
    hide_base = ("import sys; sys.path[:] = [p for p in sys.path "
                 "if not (p.startswith(sys.base_prefix) and 'site-packages' in p)]; ")
    out = subprocess.run([str(py), "-c", hide_base + PROBE], capture_output=True, text=True, cwd=tmp_path,
                         check=True).stdout.splitlines()
    assert Path(out[0]).is_relative_to(ROOT)
    assert Path(out[1]).resolve() == (ROOT / "priors").resolve()
    assert "skeletal_muscle.toml" in out[2]
