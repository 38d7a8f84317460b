"""The calculator commands: filtration and oncotic, their JSON keys and their bad-input paths."""

import json
import subprocess
import sys

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main

SIX = ["--set", "Pc=25", "--set", "Pi=-2", "--set", "pi_c=25", "--set", "pi_i=8", "--set", "sigma=0.9",
       "--set", "Kf=0.004"]


def run(args):
    return CliRunner().invoke(main, args)


def test_filtration_json_keys_and_value():
    res = run(["filtration", *SIX, "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert {"Jv", "net_pressure", "direction", "forces", "units"} <= doc.keys()
    # Starling sum by hand: (25 - (-2)) - 0.9 (25 - 8) = 27 - 15.3 = 11.7 mmHg (arithmetic)
    assert doc["net_pressure"] == pytest.approx(11.7)
    assert doc["Jv"] == pytest.approx(0.004 * 11.7)
    assert doc["direction"] == "filtration"
    assert sum(doc["forces"].values()) == pytest.approx(11.7)


def test_filtration_absorption_and_units():
    # 2.4 kPa = 18.0 mmHg (1 mmHg = 133.322 Pa, conventional)
    res = run(["filtration", "--set", "Pc=2.4 kPa", "--set", "Pi=1", "--set", "pi_c=28", "--set", "pi_i=5",
               "--set", "sigma=1", "--set", "Kf=0.01", "--json"])
    doc = json.loads(res.output)
    assert doc["inputs"]["Pc"] == pytest.approx(2400 / 133.322387415)
    assert doc["direction"] == "absorption"


def test_filtration_derives_pc_and_pi_c():
    # Pc = (r Pa + Pv)/(1 + r) with r = 0.25, Pa = 90, Pv = 10 -> 26 mmHg (Pappenheimer & Soto-Rivera 1948)
    res = run(["filtration", "--set", "Pa=90", "--set", "Pv=10", "--set", "r=0.25", "--set", "Pi=-1",
               "--set", "Cp=7", "--set", "pi_i=8", "--set", "sigma=0.9", "--set", "Kf=0.004", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert doc["inputs"]["Pc"] == pytest.approx(26.0)
    # Landis-Pappenheimer at 7 g/dL: 2.1*7 + 0.16*49 + 0.009*343 = 25.627 mmHg (Landis & Pappenheimer 1963)
    assert doc["inputs"]["pi_c"] == pytest.approx(25.627, abs=1e-3)


def test_filtration_table_output():
    res = run(["filtration", *SIX])
    assert res.exit_code == 0
    assert "net pressure" in res.output and "Jv = " in res.output


@pytest.mark.parametrize("bad,word", [
    ("sigma=1.5", "sigma"), ("Kf=-1", "Kf"), ("Pc=abc", "Pc"), ("Pc=3 g/dL", "Pc"), ("Pq=3", "Pq"),
    ("pi_c=-2", "pi_c"),
])
def test_filtration_bad_input_exit_2(bad, word):
    args = [a for a in SIX]
    key = bad.split("=")[0]
    # replace the quantity if present, else add it
    for i in range(1, len(args), 2):
        if args[i].split("=")[0] == key:
            args[i] = bad
            break
    else:
        args += ["--set", bad]
    res = run(["filtration", *args])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.strip().splitlines() if ln]
    assert len(lines) == 1 and word in lines[0] and "Traceback" not in res.output


def test_filtration_negative_pi_is_valid():
    res = run(["filtration", *SIX, "--set", "Pi=-4"])  # Pi given twice -> refused, so replace instead
    assert res.exit_code == 2 and "twice" in res.output
    args = list(SIX)
    args[3] = "Pi=-4"
    assert run(["filtration", *args]).exit_code == 0


def test_filtration_missing_quantity():
    res = run(["filtration", "--set", "Pc=20"])
    assert res.exit_code == 2 and "missing" in res.output


def _muscle_file_medians():
    """Medians read straight from priors/skeletal_muscle.toml (each value's origin is beside it there)."""
    import tomllib
    from pathlib import Path

    from scipy import stats

    doc = tomllib.loads((Path(__file__).resolve().parents[1] / "priors" / "skeletal_muscle.toml").read_text())
    pr = doc["priors"]
    assert pr["Kf"]["dist"] == "lognormal" and pr["Kf"]["unit"] == "mL/min/mmHg/100g"
    assert pr["Pi"]["dist"] == "normal" and pr["pi_i"]["dist"] == "lognormal" and pr["sigma"]["dist"] == "beta"
    m, sd = pr["sigma"]["mean"], pr["sigma"]["sd"]
    nu = m * (1 - m) / sd**2 - 1  # beta by mean and sd: a = m nu, b = (1 - m) nu (method of moments)
    cp = pr["pi_c"]["from_protein"]["mean"]
    return {"Kf": pr["Kf"]["median"], "Pi": pr["Pi"]["mean"], "pi_i": pr["pi_i"]["median"],
            "sigma": stats.beta(m * nu, (1 - m) * nu).median(),
            # Landis & Pappenheimer 1963 total-protein polynomial: 2.1 C + 0.16 C^2 + 0.009 C^3
            "pi_c": 2.1 * cp + 0.16 * cp**2 + 0.009 * cp**3}


def test_filtration_tissue_fills_unset_quantities_with_prior_medians():
    med = _muscle_file_medians()
    res = run(["filtration", "--set", "Pc=20", "--tissue", "skeletal_muscle", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert doc["inputs"]["Pc"] == 20.0 and doc["sources"]["Pc"] == "set"
    for s in ("Kf", "Pi", "pi_c", "pi_i", "sigma"):
        assert doc["inputs"][s] == pytest.approx(med[s], rel=1e-6), s
        assert doc["sources"][s] == "skeletal_muscle prior median"
    # Starling sum by hand at those values
    net = (20 - med["Pi"]) - med["sigma"] * (med["pi_c"] - med["pi_i"])
    assert doc["Jv"] == pytest.approx(med["Kf"] * net, rel=1e-6)
    # per 100 mL of tissue: the per-100-g median times the density (1.05 g/mL: 100 mL weighs 105 g)
    res = run(["filtration", "--set", "Pc=20", "--tissue", "skeletal_muscle", "--basis", "100mL", "--json"])
    doc = json.loads(res.output)
    assert doc["units"]["Kf"] == "mL/min/mmHg/100mL"
    assert doc["inputs"]["Kf"] == pytest.approx(med["Kf"] * 1.05, rel=1e-6)
    assert doc["Jv"] == pytest.approx(med["Kf"] * 1.05 * net, rel=1e-6)


def test_oncotic_json():
    res = run(["oncotic", "7", "g/dL", "--json"])
    assert res.exit_code == 0
    doc = json.loads(res.output)
    # Landis & Pappenheimer 1963 total-protein polynomial at 7 g/dL = 25.627 mmHg
    assert doc["pi"] == pytest.approx(25.627, abs=1e-3)
    assert doc["units"]["pi"] == "mmHg"


def test_oncotic_g_per_l_and_bad():
    assert json.loads(run(["oncotic", "70", "g/L", "--json"]).output)["pi"] == pytest.approx(25.627, abs=1e-3)
    res = run(["oncotic", "7", "mmHg"])
    assert res.exit_code == 2 and "Traceback" not in res.output


def test_help_shows_examples():
    for cmd in ("filtration", "oncotic"):
        res = run([cmd, "--help"])
        assert res.exit_code == 0 and "Example" in res.output


def test_version():
    res = run(["--version"])
    assert res.exit_code == 0 and res.output.startswith("fluidshift ")


def test_top_level_help_imports_nothing_heavy():
    code = ("import sys; from click.testing import CliRunner; from uncertainty.app.cli import main; "
            "r = CliRunner().invoke(main, ['--help']); assert r.exit_code == 0, r.output; "
            "heavy = [m for m in ('pymc', 'pytensor', 'matplotlib', 'SALib', 'pandas', 'dask', 'scipy', 'pint') "
            "if m in sys.modules]; print(heavy)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


@pytest.mark.parametrize(("given", "expected"), [(None, "1"), ("2", "2")])
def test_numba_compiles_at_the_quicker_level_unless_the_user_chose(given, expected):
    # the level is read by numba at its import: the command line sets it first, and a user's own value stays
    import os

    env = {k: v for k, v in os.environ.items() if k != "NUMBA_OPT"} | ({"NUMBA_OPT": given} if given else {})
    code = "import uncertainty.app.cli, numba.core.config as c; print(int(c.OPT))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, env=env)
    assert out.stdout.strip() == expected


def test_console_script_runs():
    out = subprocess.run(["fluidshift", "oncotic", "7", "g/dL", "--json"], capture_output=True, text=True)
    assert out.returncode == 0 and json.loads(out.stdout)["pi"] > 20


def test_table_gives_each_force_as_a_share_of_the_net_pressure() -> None:
    # hand Starling sum (common practice): 30 + 3 - 0.9*25 + 0.9*8 = 17.7 mmHg; Pc is 30/17.7 = 169% of it
    from click.testing import CliRunner

    from uncertainty.app.cli import main

    args = ["filtration", "--set", "Pc=30", "--set", "Pi=-3", "--set", "pi_c=25", "--set", "pi_i=8",
            "--set", "sigma=0.9", "--set", "Kf=0.004"]
    out = CliRunner().invoke(main, args).output
    rows = {line[:38].strip(): line[38:].split() for line in out.splitlines() if "%" in line and "mmHg" not in line}
    assert rows["capillary hydrostatic (Pc)"][-1] == "169%"
    assert rows["plasma oncotic (-sigma*pi_c)"][-1] == "-127%"
    assert sum(float(r[-1].rstrip("%")) for k, r in rows.items() if k.startswith(("cap", "inter", "plasma"))) \
        == pytest.approx(100, abs=2)
