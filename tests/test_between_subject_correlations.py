"""Correlations declared per pair on the between-subject layer: how one person's deviations from the
typical subject go together (``[correlations] between_subject``, prior-set rows with
``layer = "between_subject"``).

Check values are closed forms: for x = m + s_t z_t + s_b z_b with independent typical scores and
between-subject scores correlated rho_b, Cov(x1, x2) = s_b1 s_b2 rho_b, so the correlation of the two
individuals' values is s_b1 s_b2 rho_b / sqrt((s_t1^2 + s_b1^2)(s_t2^2 + s_b2^2)) (common practice);
Monte Carlo tolerances are four standard errors of a correlation, (1 - r^2) / sqrt(n) (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
from inference_helpers import normal, problem
from scipy.special import ndtri

from uncertainty.analyses import sampling
from uncertainty.core.errors import StudyError
from uncertainty.priors.library import load_prior_set
from uncertainty.study import Study

RHO_B = 0.6  # invented
# invented test priors (round numbers): typical sd and between-subject sd of Pc and Pi
PC = {"dist": "normal", "mean": 20.0, "sd": 2.0, "unit": "mmHg", "between_subject": {"sd": 3.0},
      "origin": "invented"}
PI = {"dist": "normal", "mean": -1.0, "sd": 1.0, "unit": "mmHg", "between_subject": {"sd": 2.0},
      "origin": "invented"}


def _study(pairs=None, **extra) -> Study:
    doc = {"study": {"title": "between-subject correlations (invented)", "tissue": "skin_subcutis",
                     "model": "classic", "seed": 7},
           "parameters": {"Pc": PC, "Pi": PI}}
    if pairs is not None:
        doc["correlations"] = {"between_subject": pairs, **extra}
    return Study.from_dict(doc)


@pytest.mark.parametrize("method", ["qmc", "mc"])
def test_individual_draws_take_the_declared_correlation(method):
    st = _study([["Pc", "Pi", RHO_B]])
    assert st.between_correlations == [("Pc", "Pi", RHO_B)]
    n = 2**14
    ind = sampling.draw(st, n, layer="individual", method=method)
    want = 3.0 * 2.0 * RHO_B / np.sqrt((2.0**2 + 3.0**2) * (1.0**2 + 2.0**2))
    r = np.corrcoef(ind["Pc"], ind["Pi"])[0, 1]
    assert r == pytest.approx(want, abs=4 * (1 - want**2) / np.sqrt(n))
    # the typical layer is untouched: its values stay independent
    typ = sampling.draw(st, n, layer="typical", method=method)
    assert abs(np.corrcoef(typ["Pc"], typ["Pi"])[0, 1]) < 4 / np.sqrt(n)


def test_between_scores_are_the_declared_normal_scores():
    st = _study([["Pc", "Pi", RHO_B]])
    cols = sampling.cube_columns(st, "individual")
    j = [cols.index((q, "between_subject")) for q in ("Pc", "Pi")]
    n = 2**14
    z = sampling.normal_scores(st, sampling.cube(n, len(cols), "mc", 3), "individual")
    r = np.corrcoef(z[:, j[0]], z[:, j[1]])[0, 1]
    assert r == pytest.approx(RHO_B, abs=4 * (1 - RHO_B**2) / np.sqrt(n))


def test_without_the_declaration_the_numbers_are_those_of_before():
    # the earlier path: Phi^-1 of the cube, the typical block through the typical Cholesky factor, the
    # between-subject columns left independent
    for st in (_study(), _study([])):
        assert st.between_correlations == []
        cols = sampling.cube_columns(st, "individual")
        u = sampling.cube(256, len(cols), "qmc", 11)
        z = ndtri(u)
        d = len(st.names)
        z[:, :d] = z[:, :d] @ np.linalg.cholesky(sampling.correlation_of(st)).T
        before = sampling.from_scores(st, z, "individual")
        now = sampling.from_cube(st, u, "individual")
        for q in before:
            np.testing.assert_array_equal(now[q], before[q])


def test_bundled_prior_sets_declare_no_between_subject_pairs_yet():
    # the bundled studies' numbers therefore stay as they were
    for tissue in ("skin_subcutis", "skeletal_muscle", "lung"):
        assert load_prior_set(tissue).between_correlations == []


def test_prior_set_rows_with_a_layer(tmp_path):
    text = open(load_prior_set("skin_subcutis").path).read()
    text += ('\n[[correlations]]\npair = ["Pc", "Pi"]\nrho = 0.5\nlayer = "between_subject"\n'
             'origin = "invented (test)"\n')
    (tmp_path / "skin_subcutis.toml").write_text(text)
    pset = load_prior_set("skin_subcutis", tmp_path)
    assert pset.between_correlations == [("Pc", "Pi", 0.5)]
    assert ("Pc", "Pi", 0.5) not in pset.correlations
    bad = tmp_path / "bad"  # a fresh folder (prior sets are cached per folder)
    bad.mkdir()
    (bad / "skin_subcutis.toml").write_text(text.replace('layer = "between_subject"', 'layer = "people"'))
    with pytest.raises(StudyError) as exc:
        load_prior_set("skin_subcutis", bad)
    assert exc.value.key.endswith(".layer")


def test_study_pairs_replace_and_are_checked():
    with pytest.raises(StudyError) as exc:
        _study([["Pc", "sigma", 0.3]])
    assert exc.value.key == "correlations.between_subject[0][1]"
    with pytest.raises(StudyError) as exc:
        _study([["Pc", "Pi", 0.3], ["Pi", "Pc", 0.2]])
    assert exc.value.key == "correlations.between_subject[1]"


def test_inference_subject_scores_take_the_declared_correlation():
    # The model's subject scores are z_s = L u_s, u_s independent standard normals and L the Cholesky
    # factor of the declared matrix (so Cov z_s = L L^T = R exactly); checked on the graph itself.
    import pytensor

    from uncertainty.analyses.inference.model_builder import build_model

    pc = normal("Pc", 24.0, 2.0, between_subject={"sd": 1.5})
    pi = normal("Pi", -1.0, 1.0, between_subject={"sd": 1.0})
    prob = problem({"Pc": pc, "Pi": pi}, [{"kind": "lymph_flow", "value": 0.05, "sd": 0.01}])
    prob.between_correlations = [("Pc", "Pi", RHO_B)]
    built = build_model(prob)
    m = built.model
    f = pytensor.function([m["subject_scores_iid"]], [m["Pc__subject_z"], m["Pi__subject_z"]],
                          mode="FAST_COMPILE")
    u = np.random.default_rng(5).standard_normal((1, 2))
    L = np.linalg.cholesky([[1.0, RHO_B], [RHO_B, 1.0]])
    zc, zi = f(u)
    np.testing.assert_allclose(np.concatenate([zc, zi]), (u @ L.T).ravel(), rtol=1e-12)
    # the per-subject values follow: Pc_s = Pc + 1.5 z_c (sd spread, additive)
    g = pytensor.function([m["subject_scores_iid"], m["Pc__z"]], m["Pc__subject"], mode="FAST_COMPILE")
    np.testing.assert_allclose(g(u, 0.0), 24.0 + 1.5 * (u @ L.T)[:, 0], rtol=1e-12)
    # without the pairs the scores stay the plain independent per-quantity variables
    prob.between_correlations = []
    assert "subject_scores_iid" not in build_model(prob).model.named_vars


def test_design_trials_draw_subjects_with_the_declared_correlation(monkeypatch):
    """Simulated trial subjects carry the between-subject pair: with the endpoint Pc - Pi, the spread among
    subjects of one trial (typical subject fixed, no reading error) is s1^2 + s2^2 - 2 rho s1 s2 (variance of a
    difference; common practice) = 9 + 4 - 7.2 = 5.8 mmHg^2 with the invented spreads above."""
    import importlib
    from types import SimpleNamespace

    from uncertainty.priors import parse_prior

    dz = importlib.import_module("uncertainty.analyses.design")
    pri = {"Pc": parse_prior("Pc", PC), "Pi": parse_prior("Pi", PI)}
    section = {"design": "parallel", "endpoint": "Pc", "effect": {"parameter": "Pc", "shift": 1.0},
               "n_range": [8, 60], "n_points": 2, "trials": 200}
    study = SimpleNamespace(path="trial.toml", seed=3, priors=pri, names=list(pri), correlation=None,
                            design=section, between_correlations=[("Pc", "Pi", RHO_B)])
    spec = dz.parse_design(study)
    monkeypatch.setattr(dz, "_endpoint", lambda st, sp, values, shape: values["Pc"] - values["Pi"])
    n = 20000
    data = dz.simulate_trials(study, spec, n, 1, np.random.default_rng(5), typical={"Pc": 20.0, "Pi": -1.0})
    var = float(np.var(data["y0"]))
    assert var == pytest.approx(5.8, rel=4 * np.sqrt(2 / n))
    study.between_correlations = []
    data = dz.simulate_trials(study, spec, n, 1, np.random.default_rng(5), typical={"Pc": 20.0, "Pi": -1.0})
    assert float(np.var(data["y0"])) == pytest.approx(13.0, rel=4 * np.sqrt(2 / n))
