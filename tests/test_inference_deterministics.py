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
