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


PROTEIN = """
[[observations]]
kind = "measurement"
parameter = "Cp"
file = "protein.csv"
unit = "g/dL"
sd = 0.1
"""


def _protein_cohort(tmp_path: Path, rows: str, extra: str = ""):
    (tmp_path / "protein.csv").write_text("subject,value\n" + rows)
    (tmp_path / "wick.csv").write_text("subject,value\nS2,-1.0\n")   # invented, mmHg
    path = tmp_path / "study.toml"
    path.write_text('[study]\ntitle = "protein cohort (invented)"\ntissue = "skeletal_muscle"\n'
                    + textwrap.dedent(PROTEIN) + extra)
    return build_model(problem_from_study(load_study(path)))


def test_a_quantity_every_subject_reads_precisely_is_sampled_centred(tmp_path: Path) -> None:
    """Cp read to 0.1 g/dL in every subject (between-subject sd 0.45 g/dL in the skeletal-muscle set, so
    0.1 < PIN_RATIO 0.5 x 0.45): centred. Its prior is unchanged: Cp__subject_c ~ Normal(Cp, spread), whose
    draws match Prior.individual of standard-normal scores (mean and sd, 4 standard errors; common practice)."""
    import pymc as pm

    built = _protein_cohort(tmp_path, "S0,6.1\nS1,5.2\nS2,7.0\n")   # invented, g/dL
    free = {v.name for v in built.model.free_RVs}
    assert "Cp__subject_c" in free and "Cp__subject_z" not in free
    assert any("sampled centred" in n for n in built.notes)
    n = 4000
    with built.model:
        prior = pm.sample_prior_predictive(draws=n, var_names=["Cp", "Cp__subject", "Cp__spread"], random_seed=3)
    p = prior.prior
    dev = (p["Cp__subject"] - p["Cp"]).values.reshape(n, -1) / p["Cp__spread"].values.reshape(n, 1)
    assert abs(dev.mean()) < 4 / np.sqrt(dev.size) and abs(dev.std() - 1) < 4 / np.sqrt(2 * dev.size)


def test_a_subject_without_a_reading_keeps_the_scores_non_centred(tmp_path: Path) -> None:
    wick = '\n[[observations]]\nkind = "measurement"\nparameter = "Pi"\nfile = "wick.csv"\nsd = 1.0\n'
    built = _protein_cohort(tmp_path, "S0,6.1\nS1,5.2\n", wick)   # invented; S2 has a Pi reading, no protein
    free = {v.name for v in built.model.free_RVs}
    assert "Cp__subject_c" not in free and "Cp__subject_z" in free
