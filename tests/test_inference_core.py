"""Inference pieces that need no sampling: validation, summaries, diagnostics and the gate."""

from __future__ import annotations

import numpy as np
import pytest
from inference_helpers import FIXED, lognormal, normal, problem

from uncertainty.analyses.inference.diagnostics import Gate, diagnose
from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.summaries import summarise
from uncertainty.core.errors import InputError


def test_summarise_matches_numpy_and_arviz_hdi():
    import arviz as az

    x = np.random.default_rng(3).gamma(2.0, 1.0, size=20000)
    s = summarise(x)
    assert s["mean"] == pytest.approx(x.mean())
    assert s["ci95"] == pytest.approx(list(np.quantile(x, [0.025, 0.975])))
    # highest-density interval of a skewed sample: ArviZ's shortest-interval algorithm
    assert s["hdi95"] == pytest.approx(list(az.hdi(x, hdi_prob=0.95)), rel=1e-3)
    # for a right-skewed gamma the HDI sits left of the equal-tailed interval (closed-form fact)
    assert s["hdi95"][0] < s["ci95"][0] and s["hdi95"][1] < s["ci95"][1]


def _idata(chains):
    import arviz as az

    return az.from_dict(posterior={"Pc": np.asarray(chains)},
                        sample_stats={"diverging": np.zeros(np.shape(chains), dtype=bool)})


def test_gate_names_a_quantity_whose_chains_disagree():
    rng = np.random.default_rng(0)
    good = rng.standard_normal((4, 500))
    bad = good + np.array([[0.0], [0.0], [0.0], [3.0]])  # one chain stuck elsewhere
    d_good = diagnose(_idata(good), ["Pc"], Gate())
    d_bad = diagnose(_idata(bad), ["Pc"], Gate())
    assert d_good["passed"] and d_good["r_hat_max"] < 1.01
    assert not d_bad["passed"]
    assert d_bad["r_hat_max"] > 1.1
    assert any(f.startswith("Pc") for f in d_bad["failing"])


def test_gate_thresholds_are_configurable_and_divergences_fail():
    import arviz as az

    rng = np.random.default_rng(1)
    x = rng.standard_normal((4, 500))
    div = np.zeros((4, 500), dtype=bool)
    div[0, :3] = True
    idata = az.from_dict(posterior={"Pc": x}, sample_stats={"diverging": div})
    assert not diagnose(idata, ["Pc"], Gate())["passed"]
    assert diagnose(idata, ["Pc"], Gate.coerce({"divergences_max": 5}))["passed"]
    assert not diagnose(idata, ["Pc"], Gate.coerce({"divergences_max": 5, "ess_bulk_min": 1e6}))["passed"]


@pytest.mark.parametrize("obs, key", [
    ({"kind": "measurement", "parameter": "Pz", "value": 20, "sd": 1}, "observations[0].parameter"),
    ({"kind": "measurement", "parameter": "Pc", "value": 20, "sd": 0}, "observations[0].sd"),
    ({"kind": "lymph_flow", "value": 0.002, "sd": -1}, "observations[0].sd"),
    ({"kind": "lymph_flow", "value": -0.002, "cv": 0.2}, "observations[0].value"),
    ({"kind": "lymph_flow", "value": 0.002}, "observations[0].sd"),
    ({"kind": "measurement", "parameter": "Pi", "value": -1, "sd": 1}, "observations[0].parameter"),
    ({"kind": "tissue_weight", "value": 1.0, "sd": 1}, "observations[0].kind"),
    ({"kind": "clearance_rate", "value": 0.01, "cv": 0.2}, "observations[0].volume"),
    ({"kind": "protein_ratio", "value": 0.5, "sd": 0.05}, "observations[0].kind"),
])
def test_bad_observations_name_file_key_and_value(obs, key):
    with pytest.raises(InputError) as err:
        build_model(problem({"Pc": normal("Pc", 20, 3)}, [obs]))
    assert err.value.key == key
    assert err.value.file == "stand-in.toml"


def test_hierarchical_model_is_non_centred_with_subject_dims():
    kf = lognormal("Kf", 0.004, 1.3, between_subject={"cv": 0.3})
    obs = [{"kind": "lymph_flow", "value": 0.04, "cv": 0.1, "subject": s} for s in ("a", "b", "c")]
    built = build_model(problem({"Kf": kf, "Pc": normal("Pc", 24, 2)}, obs))
    assert built.hierarchical and built.subjects == ["a", "b", "c"]
    free = {v.name for v in built.model.free_RVs}
    # the model is non-centred except along what a reading pins: each lymph subject's Jv is sampled
    # centred (pinned_prediction); the readings pin the typical net pressure too, so the typical scores
    # of Kf and Pc are sampled reflected along it
    assert free == {"typical_scores", "Kf__spread_z", "pinned_prediction"}
    assert {"Kf__z", "Pc__z"} <= {v.name for v in built.model.deterministics}
    assert built.model.named_vars_to_dims["Kf__subject"] == ("subject",)


def test_subject_labels_everywhere_or_nowhere():
    kf = lognormal("Kf", 0.004, 1.3, between_subject={"cv": 0.3})
    obs = [{"kind": "lymph_flow", "value": 0.04, "cv": 0.1, "subject": "a"},
           {"kind": "lymph_flow", "value": 0.04, "cv": 0.1, "subject": "b"},
           {"kind": "lymph_flow", "value": 0.04, "cv": 0.1}]
    with pytest.raises(InputError) as err:
        build_model(problem({"Kf": kf}, obs))
    assert err.value.key == "observations[2].subject"


def test_lymph_flow_reads_the_models_lymph_output_where_it_has_one():
    """With a JL output (the absorbing mucosa: JL = Jv + J_epi) the reading predicts JL, else Jv."""
    import pymc as pm
    from inference_helpers import FIXED, normal, starling_outputs

    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.problem import Problem, normalise_observations

    j_epi = 0.2  # mL/min/100 g, invented epithelial flow for the check

    def with_lymph(v, xp):
        out = starling_outputs(v, xp)
        return out | {"JL": out["Jv"] + j_epi}

    obs = normalise_observations([{"kind": "lymph_flow", "value": 0.1, "sd": 0.02}], file="stand-in.toml")
    for evaluate, extra in ((starling_outputs, 0.0), (with_lymph, j_epi)):
        built = build_model(Problem(priors={"Pc": normal("Pc", 20.0, 2.0)}, fixed=dict(FIXED),
                                    evaluate=evaluate, observations=obs, file="stand-in.toml"))
        draws = pm.sample_prior_predictive(draws=5, model=built.model, random_seed=1,
                                           var_names=["obs0__lymph_flow__pred", "Jv__subject"]).prior
        pred = draws["obs0__lymph_flow__pred"].values.ravel()
        np.testing.assert_allclose(pred, draws["Jv__subject"].values.ravel() + extra, rtol=1e-12)


def test_unknown_start_is_an_input_error():
    from inference_helpers import normal, problem

    from uncertainty.analyses.inference.api import fit
    from uncertainty.core.errors import InputError

    with pytest.raises(InputError) as err:
        fit(problem({"Pc": normal("Pc", 20.0, 2.0)}, [{"kind": "lymph_flow", "value": 0.05, "sd": 0.01}]),
            start="centre")
    assert err.value.key == "start" and err.value.value == "centre"


def test_lymph_subjects_sampled_centred_on_their_reading_with_the_same_density(monkeypatch):
    """A lymph reading pins Kf x net pressure: a lymph subject's scores are sampled as its predicted Jv
    (free, centred) and the scores across it. For Jv = Kf (Pc - Pi - ...) with Kf fixed, Jv is linear in
    the scores, so the free prediction equals the subject's Jv exactly, and the change of variables has
    Jacobian 1 / |dJv/dz| = 1 / (Kf hypot(sd_Pc rho_Pc, sd_Pi rho_Pi)) (closed form, rho the spread
    ratios); the log density at corresponding points is the plain model's plus the log of it."""
    import pymc as pm

    from uncertainty.analyses.inference import model_builder as mb

    priors = {"Pc": normal("Pc", 24, 2, between_subject={"sd": 3.0}),
              "Pi": normal("Pi", -1, 1, between_subject={"sd": 1.5})}
    obs = [{"kind": "lymph_flow", "value": 0.03, "cv": 0.2, "subject": s} for s in ("a", "b")]
    obs.append({"kind": "measurement", "parameter": "Pc", "value": 25.0, "sd": 2.0, "subject": "c"})
    built = build_model(problem(priors, obs))
    assert {"pinned_prediction", "pinned_scores", "subject_scores"} <= {v.name for v in built.model.free_RVs}
    monkeypatch.setattr(mb, "_pinned_subjects", lambda *a: {})
    plain = build_model(problem(priors, obs))
    assert {"Pc__subject_z", "Pi__subject_z"} <= {v.name for v in plain.model.free_RVs}
    # power scaling scales the declared priors only, whichever way the subject layer is sampled
    from uncertainty.analyses.inference.checks import top_level
    expected = {"typical_scores", "Pc__spread_z", "Pi__spread_z"}
    assert set(top_level(built.model)) == expected == set(top_level(plain.model))
    rng = np.random.default_rng(4)
    point = {k: v + rng.normal(0.0, 0.3, np.shape(v)) for k, v in built.model.initial_point().items()}
    point["pinned_prediction"] = np.array([0.031, 0.027])
    names = ["Pc__subject_z", "Pi__subject_z", "Jv__subject", "Pc__spread", "Pi__spread"]
    fn = built.model.compile_fn(built.model.replace_rvs_by_values([built.model[n] for n in names]),
                                inputs=built.model.value_vars, on_unused_input="ignore")
    zc, zi, jv, sp_c, sp_i = fn(point)
    np.testing.assert_allclose(jv[:2], point["pinned_prediction"], rtol=1e-10)
    gnorm = FIXED["Kf"] * np.hypot(sp_c, sp_i)          # sd spreads: rho * declared sd = the spread
    other = {k: v for k, v in point.items() if k not in ("pinned_prediction", "pinned_scores", "subject_scores")}
    other |= {"Pc__subject_z": zc, "Pi__subject_z": zi}
    lp = built.model.compile_logp()(point)
    lp_plain = plain.model.compile_logp()(other)
    assert lp == pytest.approx(lp_plain - 2 * np.log(gnorm), rel=1e-10)
    with built.model:
        draws = pm.sample_prior_predictive(draws=400, random_seed=1).prior
    z = draws["Pc__subject_z"].values.ravel()
    assert draws["Pc__subject_z"].shape[-1] == 3
    from scipy import stats
    assert stats.kstest(z, "norm").pvalue > 1e-3     # the scores are still standard normal a priori


@pytest.mark.parametrize("reading_sd, pinned", [(0.002, True), (0.02, False)])
def test_only_a_reading_sharper_than_the_population_spread_is_sampled_centred(reading_sd, pinned):
    """Between-subject sd of the predicted Jv at the stand-in values: Kf hypot(3, 1.5) = 0.0134 mL/min/100 g
    (closed form); a reading with sd 0.002 is below PIN_RATIO (0.5) times that, one with sd 0.02 is not
    and stays non-centred (centring a weakly informed subject makes a funnel of its own)."""
    priors = {"Pc": normal("Pc", 24, 2, between_subject={"sd": 3.0}),
              "Pi": normal("Pi", -1, 1, between_subject={"sd": 1.5})}
    obs = [{"kind": "lymph_flow", "value": 0.03, "sd": reading_sd, "subject": s} for s in ("a", "b")]
    built = build_model(problem(priors, obs))
    assert ("pinned_prediction" in {v.name for v in built.model.free_RVs}) is pinned


def test_pinned_change_of_variables_is_exact_where_the_output_is_nonlinear(monkeypatch):
    """With Kf lognormal among the scores Jv is nonlinear in them, and the pinned axis' slope is taken
    where the other scores are. Whatever the slope, the model must stay the plain one: the log density
    at corresponding points differs by log |dz/dt|, the Jacobian of the map from the free prediction t
    to the scores z (H is orthogonal), here found by central finite differences (numpy, outside the
    builder)."""
    from uncertainty.analyses.inference import model_builder as mb

    priors = {"Kf": lognormal("Kf", 0.004, 1.3, between_subject={"cv": 0.4}),
              "Pc": normal("Pc", 24, 2, between_subject={"sd": 3.0})}
    obs = [{"kind": "lymph_flow", "value": 0.05, "cv": 0.1, "subject": s} for s in ("a", "b")]
    built = build_model(problem(priors, obs))
    assert "pinned_prediction" in {v.name for v in built.model.free_RVs}
    monkeypatch.setattr(mb, "_pinned_subjects", lambda *a: {})
    plain = build_model(problem(priors, obs))
    model = built.model
    point = {k: v + np.random.default_rng(5).normal(0.0, 0.4, np.shape(v)) for k, v in model.initial_point().items()}
    point["pinned_prediction"] = np.array([0.07, 0.03])
    names = ["Kf__subject_z", "Pc__subject_z"]
    fn = model.compile_fn(model.replace_rvs_by_values([model[n] for n in names]), inputs=model.value_vars,
                          on_unused_input="ignore")

    def scores(p: dict) -> np.ndarray:
        return np.array(fn(p))                      # (score, subject)

    h = 1e-7
    log_jac = 0.0
    for s in (0, 1):
        up, down = dict(point), dict(point)
        up["pinned_prediction"] = point["pinned_prediction"] + h * np.eye(2)[s]
        down["pinned_prediction"] = point["pinned_prediction"] - h * np.eye(2)[s]
        log_jac += np.log(np.linalg.norm((scores(up) - scores(down))[:, s]) / (2 * h))
    z = scores(point)
    other = {k: v for k, v in point.items() if k not in ("pinned_prediction", "pinned_scores")}
    other |= {"Kf__subject_z": z[0], "Pc__subject_z": z[1]}
    lp = model.compile_logp()(point)
    assert lp == pytest.approx(plain.model.compile_logp()(other) + log_jac, abs=1e-5)


@pytest.mark.parametrize("w", [[1.0, 0.0, 0.0], [-1.0, 0.0, 0.0], [0.6, -0.8, 0.0], [-0.48, 0.6, 0.64]])
def test_householder_reflection_numpy_and_pytensor(w):
    """H is orthogonal and symmetric with first column -sign(w_1) w, also at w = +-e1 (where the plain
    form w - e1 would vanish); numpy and PyTensor give the same matrix."""
    import pytensor.tensor as pt

    from uncertainty.analyses.inference.model_builder import _householder

    w = np.asarray(w)
    H = _householder(w)
    np.testing.assert_allclose(H @ H.T, np.eye(3), atol=1e-14)
    np.testing.assert_allclose(H, H.T, atol=1e-14)
    np.testing.assert_allclose(H[:, 0], -np.sign(w[0]) * w, atol=1e-14)
    np.testing.assert_allclose(_householder(pt.as_tensor(w[None]), pt, 3).eval()[0], H, atol=1e-14)


@pytest.mark.parametrize("miss, expected", [(lambda lam: lam - 1.0, 1.0),     # root inside [-3, 3]
                                            (lambda lam: lam - 5.0, 3.0),     # no root: the nearer end
                                            (lambda lam: lam + 7.0, -3.0),
                                            (lambda lam: np.nan, 0.0)])      # not finite: the typical subject
def test_anchor_root_or_nearer_end_or_typical(miss, expected):
    from uncertainty.analyses.inference.model_builder import ANCHOR_MAX, _anchor

    assert ANCHOR_MAX == 3.0
    assert _anchor(miss) == pytest.approx(expected, abs=1e-6)


def test_typical_scores_reflected_along_the_pinned_typical_direction(monkeypatch):
    """Lymph readings of several subjects pin the typical Kf x net pressure too: the typical scores are
    reflected so that the first axis is -+ d log Jv / dz, which is (log gsd_Kf, sd_Pc / net) in closed
    form (Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)), net 9.7 mmHg at the stand-in values); the density
    at corresponding points is unchanged."""
    from uncertainty.analyses.inference import model_builder as mb

    kf = lognormal("Kf", 0.004, 1.3, between_subject={"cv": 0.3})
    priors = {"Kf": kf, "Pc": normal("Pc", 24, 2)}
    obs = [{"kind": "lymph_flow", "value": 0.04, "cv": 0.1, "subject": s} for s in ("a", "b", "c")]
    built = build_model(problem(priors, obs))
    net = 24.0 + 1.0 - 0.9 * (25.0 - 8.0)            # stand-in FIXED values (inference_helpers)
    w = np.array([np.log(1.3), 2.0 / net])
    w /= np.linalg.norm(w)
    H = mb._householder(w)
    point = built.model.initial_point()
    point["typical_scores"] = np.array([0.7, -1.2])
    z = H @ point["typical_scores"]
    outs = built.model.replace_rvs_by_values([built.model["Kf__z"], built.model["Pc__z"]])
    fn = built.model.compile_fn(outs, inputs=built.model.value_vars, on_unused_input="ignore")
    np.testing.assert_allclose(np.ravel(fn(point)), z, atol=1e-6)
    monkeypatch.setattr(mb, "_typical_scores", lambda *a: {})
    plain = build_model(problem(priors, obs))
    other = {k: v for k, v in point.items() if k != "typical_scores"} | {"Kf__z": z[0], "Pc__z": z[1]}
    assert built.model.compile_logp()(point) == pytest.approx(plain.model.compile_logp()(other), rel=1e-8)
