"""The chains of one fit as tasks of an executor: a chain per task, on the workers of a cluster.

Each task samples one chain; its sampler seed is derived from the fit's seed and the chain's index only
(:func:`uncertainty.core.parallel.task_seeds`), so the same study and seed give the same draws on 1, 2 or
4 workers, in-process or on a cluster. Each worker process builds and compiles the model once, on its first
chain, and reuses it for every further chain it is given (the compiled model is never pickled).

When this is faster: nutpie already samples the chains of one fit in parallel threads of one process after a
single compile, so on one machine the chains gain nothing from separate workers (every worker compiles the
model again). Across machines, a long fit gains: wall time is one compile plus the sampling of
``ceil(chains / workers)`` chains instead of all of them on the local cores.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.samplers import SampleRun, compile_model, sample


class ChainTask:
    """Task function of the executor: sample one chain of ``problem`` (picklable; the compiled model is
    made once per worker process, on first use, and never pickled).

    Parameters
    ----------
    problem : Problem
        The inference problem (model form, priors, observations).
    sampler : str
        ``nutpie`` or ``pymc``.
    draws, tune : int
        Posterior draws and warm-up steps of the chain.
    target_accept : float
        NUTS target acceptance rate.
    start : dict or None
        Start point (from :func:`~uncertainty.analyses.inference.samplers.posterior_mode`), jittered per chain.
    """

    def __init__(self, problem: Any, *, sampler: str, draws: int, tune: int, target_accept: float,
                 start: dict[str, Any] | None) -> None:
        self.problem, self.sampler, self.draws, self.tune = problem, sampler, int(draws), int(tune)
        self.target_accept, self.start = float(target_accept), start
        self._compiled: tuple[Any, Any, float] | None = None  # (built model, compiled model, compile seconds)

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_compiled"] = None
        return state

    def compiled(self) -> tuple[Any, Any, float]:
        """(built model, compiled model, compile seconds) of this process (made on first use)."""
        if self._compiled is None:
            built = build_model(self.problem)
            self._compiled = (built, *compile_model(built.model, self.sampler))
        return self._compiled

    def __call__(self, chain: int, ss: np.random.SeedSequence) -> dict[str, Any]:
        """Sample chain ``chain``; its draws (InferenceData with one chain) and the seconds it took."""
        built, compiled, compile_seconds = self.compiled()
        seed = int(ss.generate_state(1)[0] % (2**31))
        run = sample(built.model, sampler=self.sampler, chains=1, draws=self.draws, tune=self.tune, seed=seed,
                     compiled=compiled, target_accept=self.target_accept, start=self.start)
        return {"chain": int(chain), "idata": run.idata, "compile_seconds": float(compile_seconds),
                "sample_seconds": float(run.sample_seconds)}


def sample_on_workers(executor: Any, problem: Any, *, sampler: str, chains: int, draws: int, tune: int,
                      target_accept: float, seed: int | None, start: dict[str, Any] | None = None) -> SampleRun:
    """Sample ``chains`` chains of ``problem``, a task per chain on ``executor``; the draws of all chains.

    Parameters
    ----------
    executor : InProcess or DaskExecutor
        Where the chains run (:mod:`uncertainty.core.parallel`).
    problem : Problem
        The inference problem.
    sampler : str
        ``nutpie`` or ``pymc``.
    chains, draws, tune : int
        Chains, posterior draws and warm-up steps per chain.
    target_accept : float
        NUTS target acceptance rate.
    seed : int or None
        Seed of the fit (each chain's seed derives from it and the chain index; None is 0).
    start : dict or None
        Start point for every chain (jittered per chain), or the priors' central points.

    Returns
    -------
    SampleRun
        Draws of all chains (chain coordinate 0 .. chains - 1); compile seconds the longest of any worker,
        sample seconds the sum over chains (CPU seconds of sampling, not wall time).
    """
    import arviz as az

    task = ChainTask(problem, sampler=sampler, draws=draws, tune=tune, target_accept=target_accept, start=start)
    parts = executor.map(task, list(range(int(chains))), seed=int(seed or 0), label="chains")
    groups = [g for g in ("posterior", "sample_stats") if all(g in p["idata"].groups() for p in parts)]
    pieces = []
    for p in parts:
        one = az.InferenceData(**{g: getattr(p["idata"], g).assign_coords(chain=[p["chain"]]) for g in groups})
        pieces.append(one)
    idata = az.concat(pieces, dim="chain")
    return SampleRun(idata, sampler, max(p["compile_seconds"] for p in parts),
                     sum(p["sample_seconds"] for p in parts), None)
