"""Bad input to the calculator commands: exit status 2, one line naming the quantity and the value.

The cases are the ones listed for `fluidshift filtration` and `fluidshift oncotic` (sigma outside
0..1, a negative Kf, a value that is not a number, a unit of the wrong dimension, an unknown symbol,
a per-organ Kf without a tissue mass, a number that overflows); Pi = -4 mmHg is valid.
"""

import json
import subprocess

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main

GOOD = {"Pc": "25", "Pi": "-2", "pi_c": "25", "pi_i": "8", "sigma": "0.9", "Kf": "0.004"}


def filtration_args(**change):
    values = {**GOOD, **change}
    return ["filtration", *[a for k, v in values.items() for a in ("--set", f"{k}={v}")]]


@pytest.mark.parametrize("change,quantity,shown", [
    ({"sigma": "1.5"}, "sigma", "1.5"),
    ({"Kf": "-1"}, "Kf", "-1"),
    ({"Pc": "abc"}, "Pc", "abc"),
    ({"Pc": "3 g/dL"}, "Pc", "g/dL"),
    ({"Kf": "0.004 mL/min/100g"}, "Kf", "mL/min"),          # a flow, not a flow per mmHg
    ({"Kf": "0.004 mL/min/mmHg"}, "Kf", "0.004 mL/min/mmHg"),  # per organ, and no tissue mass
    ({"Pc": "1e999"}, "Pc", "1e999"),
    ({"Pq": "3"}, "Pq", "Pq=3"),
])
def test_filtration_bad_input_is_one_line_with_quantity_and_value(change, quantity, shown):
    res = CliRunner().invoke(main, filtration_args(**change))
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1, res.output
    assert quantity in lines[0] and shown in lines[0], lines[0]


def test_negative_pi_is_valid():
    res = CliRunner().invoke(main, [*filtration_args(Pi="-4"), "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert doc["net_pressure"] == pytest.approx(13.7)  # (25 + 4) - 0.9 (25 - 8), arithmetic
    assert doc["direction"] == "filtration"


@pytest.mark.parametrize("args,quantity,shown", [
    (["abc"], "Cp", "abc"),
    (["7", "mmHg"], "Cp", "mmHg"),
    (["1e999", "g/dL"], "Cp", "1e999"),
    (["--", "-1", "g/dL"], "concentration", "-1"),
])
def test_oncotic_bad_input_is_one_line_with_quantity_and_value(args, quantity, shown):
    res = CliRunner().invoke(main, ["oncotic", *args])
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and quantity in lines[0] and shown in lines[0], res.output


def test_console_script_bad_input_has_no_traceback():
    out = subprocess.run(["fluidshift", *filtration_args(sigma="1.5")], capture_output=True, text=True)
    assert out.returncode == 2
    assert out.stdout == "" and len(out.stderr.strip().splitlines()) == 1
    assert "Traceback" not in out.stderr and "sigma" in out.stderr and "1.5" in out.stderr
