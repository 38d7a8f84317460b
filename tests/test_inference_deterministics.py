"""The deterministics computed after sampling from the stored free variables (``samplers.add_deterministics``).

nutpie stores only the free variables (``samplers.trace_names``); the deterministics are evaluated afterwards
from the draws. The reference here is the model's own graph evaluated by hand with numpy at the same draws
(closed forms of a toy model), no sampling.
"""

from __future__ import annotations

import numpy as np
import pytest

pytestmark = pytest.mark.slow  # builds PyMC models and compiles their graphs (about 40 s)


def _toy():
    import pymc as pm

    with pm.Model(coords={"subject": ["a", "b", "c"]}) as model:
        mu = pm.Normal("mu", 0.0, 1.0)
        tau = pm.HalfNormal("tau", 1.0)                       # log-transformed: stored as tau_log__
        z = pm.Normal("z", 0.0, 1.0, dims="subject")
        pm.Deterministic("theta", mu + tau * z, dims="subject")
        pm.Deterministic("pair", pm.math.stack([mu, tau]))    # no dims: nutpie's pair_dim_0
        y = pm.Data("y__data", np.array([1.0, 2.0, 3.0]))
        pm.Deterministic("resid", y - mu)
        pm.Normal("y", mu + tau * z, 1.0, observed=y)
    return model


def _posterior(rng):
    import arviz as az
    import xarray as xr

    c, d = 2, 5
    return az.InferenceData(posterior=xr.Dataset({
        "mu": (("chain", "draw"), rng.normal(size=(c, d))),
        "tau_log__": (("chain", "draw"), rng.normal(size=(c, d))),
        "z": (("chain", "draw", "subject"), rng.normal(size=(c, d, 3))),
    }, coords={"subject": ["a", "b", "c"]}))


def test_deterministics_are_computed_from_the_stored_draws_with_dims_and_data():
    from uncertainty.analyses.inference.samplers import _with_data, add_deterministics, trace_names

    model = _toy()
    assert trace_names(model) == ["mu", "tau", "z"]
    idata = _posterior(np.random.default_rng(1))
    added = _with_data(model, {"y__data": np.array([5.0, 6.0, 7.0])}, add_deterministics, idata)
    post = idata.posterior
    assert added == ["theta", "pair", "resid"]
    mu, tau, z = post["mu"].values, np.exp(post["tau_log__"].values), post["z"].values
    np.testing.assert_allclose(post["theta"].values, mu[..., None] + tau[..., None] * z, rtol=1e-12)
    assert post["theta"].dims == ("chain", "draw", "subject")
    np.testing.assert_allclose(post["pair"].values, np.stack([mu, tau], axis=-1), rtol=1e-12)
    assert post["pair"].dims == ("chain", "draw", "pair_dim_0")
    # the readings a refit was given, not the model's own, and the model's restored afterwards
    np.testing.assert_allclose(post["resid"].values, np.array([5.0, 6.0, 7.0]) - mu[..., None], rtol=1e-12)
    np.testing.assert_array_equal(model["y__data"].get_value(), [1.0, 2.0, 3.0])
    assert add_deterministics(model, idata) == []


def _checked_path(model, names, post):
    """The draw-by-draw evaluation as it was before the trusted calls (the reference): a function that converts and
    checks its arguments on each call, one call per draw, the outputs stacked."""
    from pymc.pytensorf import compile as compile_pymc

    values = [model.rvs_to_values[rv] for rv in model.free_RVs]
    with model:
        fn = compile_pymc(values, model.replace_rvs_by_values([model[n] for n in names]), on_unused_input="ignore")
    assert fn.trust_input is False
    n = post.sizes["chain"] * post.sizes["draw"]
    args = [np.asarray(post[v.name].values).reshape((n, *post[v.name].shape[2:])) for v in values]
    per_draw = [fn(*[a[i] for a in args]) for i in range(n)]
    return {name: np.stack([np.asarray(d[j]) for d in per_draw]).reshape(post.sizes["chain"], post.sizes["draw"], -1)
            for j, name in enumerate(names)}


def _demo_model():
    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.problem import problem_from_study
    from uncertainty.core.resources import studies_dir
    from uncertainty.study import load_study

    return build_model(problem_from_study(load_study(studies_dir() / "demo.toml"))).model


@pytest.mark.parametrize("which", ["toy", "demo study"])
def test_trusted_calls_give_the_checked_calls_values_bit_for_bit(which):
    """The deterministics are computed by a function that trusts its arguments (scalar free variables handed to it as
    0-d arrays): the same values, to the last bit, as the function that checks them, at every draw of a toy model and
    of the demo study's inference model (16 free variables, 21 deterministics, per-subject dims)."""
    import arviz as az
    import xarray as xr

    from uncertainty.analyses.inference.samplers import _deterministic_fn, add_deterministics

    model = _toy() if which == "toy" else _demo_model()
    rng = np.random.default_rng(7)
    point = model.initial_point()
    c, d = 2, 40
    post = xr.Dataset({v.name: (("chain", "draw", *[f"{v.name}_dim_{i}" for i in range(v.ndim)]),
                                rng.normal(size=(c, d, *np.shape(point[v.name]))))   # unconstrained values: any real
                       for v in (model.rvs_to_values[rv] for rv in model.free_RVs)})
    names = [det.name for det in model.deterministics]
    reference = _checked_path(model, names, post)
    idata = az.InferenceData(posterior=post.copy())
    assert add_deterministics(model, idata) == names
    assert _deterministic_fn(model, names)[0].trust_input is True
    for name in names:
        got = idata.posterior[name].values.reshape(c, d, -1)
        assert np.isfinite(got).all(), name
        np.testing.assert_array_equal(got, reference[name], err_msg=name)


def test_draws_converted_without_the_warmup_equal_nutpies_own_conversion():
    """nutpie's raw trace turned into ArviZ data by :func:`samplers.arrow_idata` (posterior and sampler statistics only)
    is identical in values, dims and coordinates to nutpie's own conversion with ``save_warmup=False``."""
    import sys

    import nutpie
    import pandas as pd
    import xarray as xr

    from uncertainty.analyses.inference.samplers import NUTPIE_OPTIONAL_STATS, arrow_idata, trace_names

    model = _toy()
    compiled = nutpie.compile_pymc_model(model, var_names=trace_names(model))
    raw = nutpie.sample(compiled, chains=2, draws=30, tune=20, seed=3, progress_bar=False, save_warmup=False,
                        return_raw_trace=True)
    draws, stats = raw.get_arrow_trace()
    ours = arrow_idata(draws, stats, compiled.coords)
    theirs = sys.modules["nutpie.sample"]._arrow_to_arviz(   # as nutpie's own sample() calls it
        draws, stats, skip_vars=list(NUTPIE_OPTIONAL_STATS), save_warmup=False,
        coords={name: pd.Index(vals) for name, vals in compiled.coords.items()})
    assert ours.groups() == theirs.groups() == ["posterior", "sample_stats"]
    for group in ("posterior", "sample_stats"):
        xr.testing.assert_identical(ours[group].drop_attrs(), theirs[group].drop_attrs())
    assert ours.posterior.sizes["draw"] == 30 and set(ours.posterior.data_vars) == {"mu", "tau_log__", "tau", "z"}
    assert "diverging" in ours.sample_stats and "energy" in ours.sample_stats
