"""`fluidshift infer`: JSON keys of DESIGN.md section 5, saved posterior, bad input exit 2."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main

# Invented study: Kf and Pc uncertain, the other forces fixed (test scaffolding).
STUDY = """
[study]
title = "infer command test (invented)"
tissue = "skeletal_muscle"
model = "classic"
seed = 7

[parameters]
Kf = {{ dist = "lognormal", median = 0.004, gsd = 1.3, unit = "mL/min/mmHg/100g", origin = "invented" }}
Pc = {{ dist = "normal", mean = 24.3, sd = 2.6, unit = "mmHg", origin = "invented" }}
Pi = -1.0
pi_c = 25.0
pi_i = 8.0
sigma = 0.9

[[observations]]
kind = "{kind}"
{extra}
"""


def _write(tmp_path, kind="lymph_flow", extra='value = 0.04\nsd = 0.01\nunit = "mL/min/100g"'):
    p = tmp_path / "study.toml"
    p.write_text(STUDY.format(kind=kind, extra=extra))
    return str(p)


@pytest.mark.parametrize("kind, extra, key", [
    ("measurement", 'parameter = "Pz"\nvalue = 3.0\nsd = 1.0', "observations[0].parameter"),
    ("lymph_flow", "value = 0.04\nsd = 0.0", "observations[0].sd"),
])
def test_bad_observation_exits_2_naming_file_and_key(tmp_path, kind, extra, key):
    path = _write(tmp_path, kind, extra)
    res = CliRunner().invoke(main, ["infer", path, "--json"])
    assert res.exit_code == 2, res.output
    assert key in res.output and "study.toml" in res.output
    assert "Traceback" not in res.output


@pytest.mark.slow
def test_infer_json_keys_and_posterior_file(tmp_path):
    path = _write(tmp_path)
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["infer", path, "--json", "--out", str(out), "--draws", "500",
                                    "--tune", "500"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    for k in ("mean", "sd", "ci95", "hdi95"):
        assert k in doc["Jv"]
    assert "Jv" in doc["new_subject"] and doc["subjects"] == {}
    for q in ("Kf", "Pc"):
        assert set(doc["parameters"][q]) >= {"mean", "sd", "ci95", "contraction"}
    assert set(doc["diagnostics"]) >= {"r_hat_max", "ess_bulk_min", "divergences", "passed"}
    assert doc["diagnostics"]["passed"] is True
    assert (out / "posterior.nc").exists() and (out / "inference_prior_posterior.png").exists()
    import arviz as az

    idata = az.from_netcdf(out / "posterior.nc")
    assert "Jv__subject" in idata.posterior
    # the reading is far inside its prior predictive: no conflict flagged
    assert not any(r["conflict"] for r in doc["checks"]["prior_data_conflict"])


@pytest.mark.slow
def test_unconverged_chains_exit_3_naming_the_quantities(tmp_path):
    # 4 chains x 60 draws cannot give a bulk ESS of 400: the gate must fail and say why
    path = _write(tmp_path)
    res = CliRunner().invoke(main, ["infer", path, "--draws", "60", "--tune", "100", "--no-checks"])
    assert res.exit_code == 3, res.output
    assert "quality gate failed" in res.output and "bulk ESS" in res.output
    assert "Traceback" not in res.output
