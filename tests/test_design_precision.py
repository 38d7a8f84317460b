"""Trial design to a requested precision (`design --tol`): the trials per point double until the 95 %
Monte Carlo half-width of each headline probability is below the tolerance, or a cap stops it (exit 3).

Check values: the Monte Carlo error the design reports for a simulated probability is the Jeffreys
posterior sd, close to the binomial sqrt(p (1 - p) / m) (checked here with scipy.stats.beta); the half-width
is z_0.975 = 1.95996 of those (scipy.stats.norm)."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner
from scipy import stats

from uncertainty.analyses.design.precision import Z975, design_within, widest_half_width
from uncertainty.app.cli import main
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.study import Study

# invented trial settings (the figures themselves are checked elsewhere against closed forms)
DOC = {"study": {"tissue": "skeletal_muscle", "seed": 5},
       "design": {"endpoint": "Kf", "effect": {"parameter": "Kf", "multiply": 0.7}, "measurement": {"cv": 0.2},
                  "n_range": [10, 40], "n_points": 3, "simulations": 100,
                  "design_prior": {"dist": "normal", "mean": -0.357, "sd": 0.1}}}


def test_trials_double_until_power_and_assurance_are_within_tol() -> None:
    assert Z975 == pytest.approx(stats.norm.ppf(0.975), rel=1e-12)
    r = design_within(Study.from_dict(DOC), 0.05)
    doc = r.doc
    hist = doc["precision_history"]
    assert [h["trials"] for h in hist] == [100 * 2**i for i in range(len(hist))] and len(hist) > 1
    assert doc["trials_per_point"] == hist[-1]["trials"] and doc["converged"] is True
    assert hist[-1]["widest_half_width"] < 0.05 <= hist[-2]["widest_half_width"]
    worst, where = widest_half_width(doc)
    assert worst == pytest.approx(Z975 * max(doc["power_mc_se"], doc["assurance_mc_se"]))
    assert where in ("power", "assurance")
    # the reported error is the binomial one (Jeffreys posterior sd, scipy.stats.beta)
    m, p = doc["trials_per_point"], doc["power"]
    k = round(p * m)
    assert doc["power_mc_se"] == pytest.approx(stats.beta(k + 0.5, m - k + 0.5).std(), rel=0.05)
    assert any("met at" in n for n in doc["notes"])


def test_cap_stops_the_doubling_exit_3_and_bad_tolerance_exit_2(tmp_path) -> None:
    with pytest.raises(QualityGateError) as exc:
        design_within(Study.from_dict(DOC), 0.001, max_trials=200)
    res = exc.value.result
    assert exc.value.exit_code == 3 and res.doc["converged"] is False
    assert [h["trials"] for h in res.doc["precision_history"]] == [100, 200]
    assert any("NOT met" in n and "max-trials=200" in n for n in res.doc["notes"])
    for bad in (0.0, 0.7, float("nan")):
        with pytest.raises(InputError):
            design_within(Study.from_dict(DOC), bad)
    with pytest.raises(InputError, match="max-trials"):
        design_within(Study.from_dict(DOC), 0.05, max_trials=50)
    # the command: --tol alone means 0.01; the cap reached prints the flagged result and exits 3
    f = tmp_path / "s.toml"
    f.write_text('[study]\ntissue = "skeletal_muscle"\nseed = 5\n[design]\nendpoint = "Kf"\n'
                 'effect = { parameter = "Kf", multiply = 0.7 }\nmeasurement = { cv = 0.2 }\nn_range = [10, 40]\n'
                 'n_points = 3\nsimulations = 100\n')
    out = CliRunner().invoke(main, ["design", "--json", "--tol", "0.001", "--max-trials", "200", str(f)])
    assert out.exit_code == 3
    doc = json.loads(out.stdout)
    assert doc["converged"] is False and doc["tol"] == 0.001
    assert "quality gate failed" in out.stderr and "max-trials=200" in out.stderr
