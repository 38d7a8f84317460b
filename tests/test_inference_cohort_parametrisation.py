"""How the model builder parametrises a cohort the data reach through combinations (model declaration only).

1. Between-subject spreads the data reach only together share one factor (``model_builder._jointly_spread``).

A quantity read on its own per subject (a ``measurement`` of it, or of a quantity computed from it alone, as
pi_c from Cp) keeps its own spread factor; the others that have a declared spread (here Kf, Pa, Pv, r, Pi and
pi_i of the skeletal-muscle prior set, reached only through Jv by lymph flow) get ``joint__spread_z``.

2. Weights of a cohort pin the typical Jv (over the share): the typical scores are reflected along the direction
   of Jv (``typical_scores``), as lymph readings do, so that the one narrow direction is a coordinate of the sampler.

Nothing is sampled.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np

from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.study import load_study

LYMPH = """
[[observations]]
kind = "lymph_flow"
file = "lymph.csv"
sd = 0.002
"""
COP = """
[[observations]]
kind = "measurement"
parameter = "pi_c"
file = "cop.csv"
sd = 1.0
"""


def _build(tmp_path: Path, observations: str):
    (tmp_path / "lymph.csv").write_text("subject,value\nS0,0.004\nS1,0.005\nS2,0.003\n")   # invented, mL/min/100g
    (tmp_path / "cop.csv").write_text("subject,value\nS0,24\nS1,26\nS2,22\n")              # invented, mmHg
    path = tmp_path / "study.toml"
    path.write_text('[study]\ntitle = "joint spread (invented)"\ntissue = "skeletal_muscle"\n'
                    + textwrap.dedent(observations))
    return build_model(problem_from_study(load_study(path)))


def test_quantities_reached_only_through_jv_share_one_spread_factor(tmp_path: Path) -> None:
    built = _build(tmp_path, LYMPH + COP)
    names = set(built.model.named_vars)
    assert "joint__spread_z" in names
    assert "Cp__spread_z" in names   # pi_c is computed from Cp alone: Cp is read on its own
    for q in ("Kf", "Pa", "Pv", "r", "Pi", "pi_i"):
        assert f"{q}__spread_z" not in names, q
        assert f"{q}__spread" in names, q   # still reported per quantity
    assert any("one between-subject spread factor" in n for n in built.notes)
    # the declared proportions are kept: every joint spread over its declared value is the same factor
    w = built.model["joint__spread_z"]
    got = np.array([float(built.model[f"{q}__spread"].eval({w: 0.8})) / built.spreads[q][1]
                    for q in ("Kf", "Pa", "Pv")])
    np.testing.assert_allclose(got, np.exp(0.5 * 0.8))   # SPREAD_LOG_SD = 0.5, lognormal factor


def test_a_study_without_subjects_keeps_the_declared_spreads(tmp_path: Path) -> None:
    built = _build(tmp_path, '[[observations]]\nkind = "lymph_flow"\nvalue = 0.004\nsd = 0.002\n')  # invented
    assert "joint__spread_z" not in set(built.model.named_vars)


WEIGHTS = """
[[observations]]
kind = "body_weight"
file = "weights.csv"
columns = { subject = "patient_id", time = "day", value = "kg" }
sd = 0.5
share = { dist = "beta", mean = 0.4, sd = 0.15 }   # invented
"""


def test_a_cohorts_weights_reflect_the_typical_scores_along_jv(tmp_path: Path) -> None:
    (tmp_path / "weights.csv").write_text("patient_id,day,kg\nP1,0,70\nP1,1,70.6\nP2,0,82\nP2,1,82.3\n")  # invented
    path = tmp_path / "study.toml"
    path.write_text('[study]\ntitle = "weights (invented)"\ntissue = "skeletal_muscle"\ntissue_mass = "25 kg"\n'
                    + textwrap.dedent(WEIGHTS))
    built = build_model(problem_from_study(load_study(path)))
    names = set(built.model.named_vars)
    assert "typical_scores" in names and "Kf__z" in names   # Kf__z is now a Deterministic of the reflected scores
    assert built.model["Kf__z"] not in built.model.free_RVs
    # the reflection is orthogonal: the scores keep their standard-normal prior (values equal in distribution)
    u = built.model["typical_scores"]
    z = np.array([float(built.model[f"{q}__z"].eval({u: np.eye(len(u.eval()))[0]})) for q in ("Kf", "Pa", "Pv")])
    assert np.all(np.isfinite(z)) and np.linalg.norm(z) <= 1.0 + 1e-12
