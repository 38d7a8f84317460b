"""Hand a declared model to a sampler: nutpie (default) or PyMC's own NUTS.

The declaration never knows the sampler (DESIGN.md section 7). Failures of the sampler (a model
that cannot be evaluated at its initial point, a compile error) are raised as
:class:`SamplerError` with the reason, which the command line prints in one line.
"""

from __future__ import annotations

import dataclasses
import time
import weakref
from typing import Any

from uncertainty.core.errors import FluidshiftError
from uncertainty.core.stage import stage

SAMPLERS = ("nutpie", "pymc")


class SamplerError(FluidshiftError):
    """The sampler could not run (exit status 1), with the reason in the message."""

    exit_code = 1


@dataclasses.dataclass
class SampleRun:
    """Posterior draws (ArviZ InferenceData) and how long compiling and sampling took (s)."""

    idata: Any
    sampler: str
    compile_seconds: float
    sample_seconds: float
    compiled: Any = None


def trace_names(model: Any) -> list[str]:
    """Names of the variables nutpie stores while it samples ``model``: its free variables only.

    The deterministics (per-subject values, the forward map's Jv for every subject and for the typical
    subject, each observation's prediction) are left out of the compiled sampler and computed afterwards
    from the draws in one vectorised evaluation (:func:`add_deterministics`): compiled into nutpie, each
    forward map (a steady-state form's scan among them) was compiled by numba a second time, beside the
    log density and its gradient, which already hold it.

    Parameters
    ----------
    model : pymc.Model
        The declared model.

    Returns
    -------
    list of str
        The free random variables' names (dimensionless labels).
    """
    return [v.name for v in model.free_RVs]


#: compiled deterministics per model (a Session's refits reuse them): model -> {names: (function, inputs, dtypes)}
_DETERMINISTIC_FNS: weakref.WeakKeyDictionary[Any, dict[tuple[str, ...], tuple[Any, list[str], list[str]]]] = (
    weakref.WeakKeyDictionary())


def _deterministic_fn(model: Any, names: list[str]) -> tuple[Any, list[str], list[str]]:
    """A PyTensor function (PyMC's default compile mode) of the free variables' value variables (the
    unconstrained values nutpie stores) returning the deterministics ``names``: the model's own graph.
    Returns it, the names of its inputs and their dtypes.

    The function trusts its inputs (``trust_input``: no conversion or check of each argument on each call,
    which was two thirds of a call's time): :func:`add_deterministics` hands it arrays of the inputs' own
    dtypes and dimensions, views into the draws (the function never writes into its inputs)."""
    from pymc.pytensorf import compile as compile_pymc

    cache = _DETERMINISTIC_FNS.setdefault(model, {})
    if tuple(names) not in cache:
        values = [model.rvs_to_values[rv] for rv in model.free_RVs]
        outs = model.replace_rvs_by_values([model[n] for n in names])
        with model:
            fn = compile_pymc(values, outs, on_unused_input="ignore")
        fn.trust_input = True
        cache[tuple(names)] = (fn, [v.name for v in values], [str(v.type.dtype) for v in values])
    return cache[tuple(names)]


def _per_draw(fn: Any, args: list[Any], n: int) -> list[Any]:
    """``fn`` evaluated at each of the ``n`` draws of ``args`` (arrays (n, ...), each of its input's dtype and
    C order): one array (n, ...) per output. ``a[i, ...]`` is an array even for a scalar input (0-d), as a
    trusting function needs; each output is copied into its row at once (the function may reuse its buffers)."""
    import numpy as np

    first = [np.asarray(v) for v in fn(*[a[0, ...] for a in args])]
    out = [np.empty((n, *v.shape), dtype=v.dtype) for v in first]
    for o, v in zip(out, first, strict=True):
        o[0] = v
    for i in range(1, n):
        for o, v in zip(out, fn(*[a[i, ...] for a in args]), strict=True):
            o[i] = v
    return out


def add_deterministics(model: Any, idata: Any) -> list[str]:
    """Compute every deterministic of ``model`` missing from ``idata.posterior`` from the free variables'
    draws there, and add it (same names, dims and coordinates as a sampler that stores them all).

    One evaluation per draw of the model's own graph (:func:`_deterministic_fn`), compiled in PyMC's
    default mode (C) and called with trusted inputs (:func:`_per_draw`): a few seconds for a steady-state
    cohort, where compiling the same graph by numba into the sampler took tens of seconds (a graph
    vectorised over the draws compiled slower still, in C mode too: 14 s against 5 s for the demo study, and
    ran slower: 91 ms against 53 ms for 4000 draws, with values differing in the 12th digit). Values equal
    those the sampler computes up to floating-point rounding.

    Parameters
    ----------
    model : pymc.Model
        The model the draws come from.
    idata : arviz.InferenceData
        Its ``posterior`` holds every free variable's value variable (chain, draw, ...); changed in place.

    Returns
    -------
    list of str
        The names added, in the model's order.
    """
    import numpy as np

    post = idata.posterior
    names = [d.name for d in model.deterministics if d.name not in post]
    if not names:
        return []
    n = post.sizes["chain"] * post.sizes["draw"]
    fn, inputs, dtypes = _deterministic_fn(model, names)
    args = [np.ascontiguousarray(np.asarray(post[k].values).reshape((n, *post[k].shape[2:])), dtype=dt)
            for k, dt in zip(inputs, dtypes, strict=True)]
    values = _per_draw(fn, args, n)
    dims_of = model.named_vars_to_dims
    new: dict[str, Any] = {}
    for name, value in zip(names, values, strict=True):
        value = value.reshape((post.sizes["chain"], post.sizes["draw"], *value.shape[1:]))
        dims = list(dims_of.get(name) or [f"{name}_dim_{i}" for i in range(value.ndim - 2)])
        new[name] = (("chain", "draw", *dims), value)
    post.update(new)   # at once: one assignment per variable aligned the whole dataset each time (24 ms against 1)
    for dims, _ in new.values():
        for d in dims[2:]:
            if d not in post.coords:
                known = model.coords.get(d)
                post.coords[d] = list(known) if known is not None else np.arange(post.sizes[d])
    return names


#: sampler statistics nutpie records only when asked (its store_gradient, store_unconstrained, store_mass_matrix
#: and store_divergences settings, which :func:`sample` never sets); left out as nutpie's own conversion does
NUTPIE_OPTIONAL_STATS = ("gradient", "unconstrained_draw", "mass_matrix_inv", "mass_matrix_eigvals",
                         "mass_matrix_stds", "divergence_start", "divergence_end", "divergence_momentum",
                         "divergence_start_gradient")


def nutpie_idata(trace: Any, compiled: Any) -> Any:
    """nutpie's raw trace (``nutpie.sample(..., return_raw_trace=True)``) as ArviZ InferenceData: the
    ``posterior`` and ``sample_stats`` groups (:func:`arrow_idata`).

    Parameters
    ----------
    trace : nutpie raw trace
        Arrow record batches of draws and statistics per chain (taken once: nutpie hands them out once).
    compiled : nutpie compiled model
        The model sampled (its ``coords``).

    Returns
    -------
    arviz.InferenceData
        Posterior draws (chain, draw, ...) in the model's units and the sampler's statistics per draw.
    """
    draw_batches, stat_batches = trace.get_arrow_trace()
    return arrow_idata(draw_batches, stat_batches, compiled.coords)


def arrow_idata(draw_batches: list[Any], stat_batches: list[Any], coords: dict[str, Any]) -> Any:
    """nutpie's arrow record batches (one per chain, warm-up first, flagged ``tuning``) as ArviZ InferenceData
    with the ``posterior`` and ``sample_stats`` groups: the same values, dims and coordinates as nutpie's own
    conversion with ``save_warmup=False`` gives, without its conversion of the warm-up draws and statistics
    into two more groups that it then drops (about half of its time).

    Parameters
    ----------
    draw_batches, stat_batches : list of arrow record batches
        Draws and sampler statistics of each chain.
    coords : dict
        Coordinates of the model's dims (labels per dim).

    Returns
    -------
    arviz.InferenceData
        Posterior draws (chain, draw, ...) in the model's units and the sampler's statistics per draw.
    """
    import importlib

    import arviz
    import pandas as pd

    add_arrow_data = importlib.import_module("nutpie.sample")._add_arrow_data
    n_chains = len(draw_batches)
    tuning = [int(stat.column("tuning").to_numpy().sum()) for stat in stat_batches]
    length = max(d.num_rows - t for d, t in zip(draw_batches, tuning, strict=True))
    posterior: dict[str, Any] = {}
    stats: dict[str, Any] = {}
    dims: dict[str, Any] = {}
    for chain, (draw, t) in enumerate(zip(draw_batches, tuning, strict=True)):
        add_arrow_data(posterior, length, draw.slice(t, draw.num_rows - t), chain, n_chains, dims, [])
    for chain, (stat, t) in enumerate(zip(stat_batches, tuning, strict=True)):
        add_arrow_data(stats, length, stat.slice(t, stat.num_rows - t), chain, n_chains, dims,
                       list(NUTPIE_OPTIONAL_STATS))
    return arviz.from_dict(posterior, sample_stats=stats, dims=dims,
                           coords={name: pd.Index(vals) for name, vals in coords.items()})


def _with_data(model: Any, data: dict[str, Any] | None, fn: Any, *args: Any) -> Any:
    """``fn(model, *args)`` with the model's ``pm.Data`` values replaced by ``data`` meanwhile (the
    readings a reused compiled sampler was given), restored afterwards."""
    old = {k: model[k].get_value() for k in (data or {})}
    try:
        for k, v in (data or {}).items():
            model[k].set_value(v)
        return fn(model, *args)
    finally:
        for k, v in old.items():
            model[k].set_value(v)


def compile_model(model: Any, sampler: str = "nutpie") -> tuple[Any, float]:
    """Compile ``model`` for ``sampler``; returns (compiled object or None, seconds).

    nutpie compiles the log density, its gradient and the free variables only (:func:`trace_names`);
    :func:`sample` adds the deterministics afterwards.
    """
    t0 = time.perf_counter()
    if sampler == "nutpie":
        import nutpie
        import pytensor

        try:
            # no creation traceback on each node of the log density and its gradient (pytensor records 8 stack
            # levels per node by default; with a time course's loop that was about 40 % of the compile)
            with pytensor.config.change_flags(traceback__limit=0):
                compiled = nutpie.compile_pymc_model(model, var_names=trace_names(model))
        except Exception as exc:  # noqa: BLE001 - reported with its reason, no traceback
            raise SamplerError(f"nutpie could not compile the model: {type(exc).__name__}: {exc}") from None
        return compiled, time.perf_counter() - t0
    if sampler == "pymc":
        return None, 0.0
    raise SamplerError(f"unknown sampler {sampler!r} (known: {', '.join(SAMPLERS)})")


#: half-width of the uniform jitter (unconstrained scale) around a given start point, as PyMC and
#: nutpie jitter their default starts (common practice: overdispersed starts for R-hat)
START_JITTER = 1.0


def posterior_mode(model: Any) -> tuple[dict[str, Any], float]:
    """Posterior mode of ``model`` (PyMC's L-BFGS ``find_MAP``) and the seconds it took: a dict with
    every free variable's value on both scales (value-variable names for the unconstrained values,
    variable names for the constrained ones). Raises SamplerError when the optimiser fails."""
    import warnings

    import pymc as pm

    t0 = time.perf_counter()
    try:
        with model, warnings.catch_warnings():
            warnings.simplefilter("ignore")
            mode = pm.find_MAP(progressbar=False, maxeval=20000, include_transformed=True)
    except Exception as exc:  # noqa: BLE001
        raise SamplerError(f"the optimiser for the start point failed: {type(exc).__name__}: {exc}") from None
    names = [n for v in model.free_RVs for n in (v.name, model.rvs_to_values[v].name)]
    return {n: mode[n] for n in names}, time.perf_counter() - t0


def _jittered_start(model: Any, start: dict[str, Any]) -> Any:
    """nutpie start-point function: ``start`` (unconstrained, per value variable, in the order of
    the model's free variables, as nutpie flattens them) plus uniform jitter, seeded per chain."""
    import numpy as np

    flat = np.concatenate([np.ravel(np.asarray(start[model.rvs_to_values[v].name], dtype=float))
                           for v in model.free_RVs])

    def initial_point(seed: Any = None) -> Any:
        rng = np.random.default_rng(seed)
        return flat + rng.uniform(-START_JITTER, START_JITTER, flat.size)

    return initial_point


def sample(model: Any, *, sampler: str = "nutpie", chains: int = 4, draws: int = 1000,
           tune: int = 1000, seed: int | None = None, compiled: Any = None,
           data: dict[str, Any] | None = None, target_accept: float | None = None,
           low_rank: bool = False, start: dict[str, Any] | None = None, progress: bool = False,
           cores: int | None = None) -> SampleRun:
    """Draw ``chains`` x ``draws`` posterior samples after ``tune`` warm-up steps, seeded.

    ``progress`` shows the sampler's own live table on the terminal (stderr) while it samples: per
    chain the draws, the divergences so far, the step size and the time left (nutpie's terminal
    display; PyMC's rich progress bars); the caller decides (e.g. only when stderr is a terminal).

    ``cores`` caps the threads nutpie samples the chains in (one on a cluster worker that has one core, so
    that workers do not oversubscribe the machine); the draws do not depend on it (each chain has its own seed).

    ``compiled`` reuses a nutpie compiled model (``data`` then replaces its ``pm.Data``
    values, e.g. simulated readings in a trial loop). ``start`` (from :func:`posterior_mode`)
    starts every chain there plus uniform jitter instead of at the priors' central points. Returns a :class:`SampleRun`.
    """
    import warnings

    if sampler not in SAMPLERS:
        raise SamplerError(f"unknown sampler {sampler!r} (known: {', '.join(SAMPLERS)})")
    compile_s = 0.0
    if sampler == "nutpie":
        import nutpie

        if compiled is None:
            # (short enough for the spinner and the elapsed time on an 80-column terminal; a design's first fit
            # on a machine compiles for minutes, a later fit of the same design finds it in the disk cache)
            with stage(progress, "compiling the model (a new design takes minutes)", "compiled the model"):
                compiled, compile_s = compile_model(model, "nutpie")
        run_model = compiled.with_data(**data) if data else compiled
        if start is not None:
            run_model = dataclasses.replace(run_model, initial_point_func=_jittered_start(model, start))
        kwargs: dict[str, Any] = {}
        if target_accept is not None:
            kwargs["target_accept"] = target_accept
        if cores is not None:  # threads for the chains (nutpie's default: every core of the machine)
            kwargs["cores"] = int(cores)
        if low_rank:  # mass matrix that adapts to correlated directions (nutpie option)
            kwargs["low_rank_modified_mass_matrix"] = True
        t0 = time.perf_counter()
        try:
            idata = nutpie.sample(run_model, chains=chains, draws=draws, tune=tune, seed=seed,
                                  progress_bar=progress, save_warmup=False, return_raw_trace=True, **kwargs)
            if hasattr(idata, "get_arrow_trace"):   # (a stand-in sampler in tests returns its own object)
                idata = nutpie_idata(idata, run_model)
        except Exception as exc:  # noqa: BLE001
            raise SamplerError(f"nutpie failed: {type(exc).__name__}: {exc}") from None
        if model is not None and hasattr(idata, "posterior"):   # (a stand-in sampler in tests returns neither)
            _with_data(model, data, add_deterministics, idata)
        return SampleRun(idata, sampler, compile_s, time.perf_counter() - t0, compiled)
    import pymc as pm

    t0 = time.perf_counter()
    try:
        with model:
            if data:
                pm.set_data(data)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                # PyMC takes start values on the constrained scale (posterior_mode gives both)
                initvals = None if start is None else {v.name: start[v.name] for v in model.free_RVs}
                idata = pm.sample(draws=draws, tune=tune, chains=chains, cores=min(chains, 2),
                                  random_seed=seed, progressbar=progress, compute_convergence_checks=False,
                                  target_accept=target_accept or 0.8, initvals=initvals)
    except Exception as exc:  # noqa: BLE001
        raise SamplerError(f"PyMC NUTS failed: {type(exc).__name__}: {exc}") from None
    return SampleRun(idata, sampler, 0.0, time.perf_counter() - t0, None)
