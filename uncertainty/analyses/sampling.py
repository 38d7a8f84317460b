"""Unit cube and normal scores -> values of the Starling quantities.

Everything samples the open unit cube (0, 1)^k. A point's columns are laid out as follows
(see :func:`cube_columns`):

- first, one column per uncertain input of the typical subject, in ``study.names`` order;
- then, for the ``individual`` layer only, one column per quantity with a between-subject spread
  (``prior.between_subject`` set), in ``study.priors`` order.

A cube column ``u`` becomes a normal score ``z = Phi^-1(u)``. The typical-subject scores are
correlated through the study's correlation matrix (a Gaussian copula, Cholesky factor applied to
independent scores); the between-subject scores are correlated likewise by the study's between-subject
pairs (``Study.between_correlations``; independent without them). The priors' distribution
families map scores to values (``uncertainty.distributions``: ``Distribution.from_scores``, with a
spline of the exact map for large beta and gamma batches; ``Prior.individual`` for the
between-subject layer).

Designs: ``qmc`` scrambled Sobol' (scipy.stats.qmc, LMS + digital shift), ``lhs`` Latin hypercube,
``mc`` plain pseudo-random. Replicated designs (independent scrambles / independent streams) are
how Monte Carlo error of QMC results is measured: never by treating one QMC design as independent
draws.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from uncertainty.core.errors import InputError

METHODS = ("qmc", "mc", "lhs")
LAYERS = ("individual", "typical")

# Smallest distance from the cube's faces: scrambled Sobol' points are multiples of 2^-30 (scipy's
# default 30 bits), so 0 can occur; Phi^-1(2^-40) is about -7.0, far beyond any prior's 95% interval.
_EDGE = 2.0**-40


def open_cube(u: np.ndarray) -> np.ndarray:
    """Clip points into the open unit cube (0, 1)^k (dimensionless)."""
    return np.clip(u, _EDGE, 1.0 - _EDGE)


def is_power_of_two(n: int) -> bool:
    """True when n is a positive power of two."""
    return n > 0 and (n & (n - 1)) == 0


def next_power_of_two(n: int) -> int:
    """Smallest power of two >= n (n >= 1)."""
    return 1 << max(0, math.ceil(math.log2(max(1, n))))


def _check_method(method: str) -> str:
    if method not in METHODS:
        raise InputError(f"unknown sampling method; use one of {', '.join(METHODS)}",
                         key="propagate.method", value=method)
    return method


def _check_layer(layer: str) -> str:
    if layer not in LAYERS:
        raise InputError(f"unknown layer; use one of {', '.join(LAYERS)}", key="layer", value=layer)
    return layer


def between_subject_names(study: Any) -> list[str]:
    """Quantities with a between-subject spread, in ``study.priors`` order."""
    return [s for s, p in study.priors.items() if getattr(p, "between_subject", None)]


def cube_columns(study: Any, layer: str = "individual") -> list[tuple[str, str]]:
    """Column layout of the cube for a study and layer: a list of ``(symbol, part)`` pairs.

    ``part`` is ``"typical"`` for the typical-subject columns (over ``study.names``) and
    ``"between_subject"`` for the between-subject columns (``individual`` layer only).
    """
    _check_layer(layer)
    cols = [(s, "typical") for s in study.names]
    if layer == "individual":
        cols += [(s, "between_subject") for s in between_subject_names(study)]
    return cols


def correlation_of(study: Any) -> np.ndarray:
    """The normal-score correlation matrix over ``study.names`` (identity when absent)."""
    d = len(study.names)
    corr = getattr(study, "correlation", None)
    if corr is None:
        return np.eye(d)
    corr = np.asarray(corr, dtype=float)
    if corr.shape != (d, d):
        raise InputError("correlation matrix does not match the uncertain inputs",
                         key="correlations", value=corr.shape)
    return corr


def between_correlation_of(study: Any) -> np.ndarray | None:
    """The normal-score correlation matrix of the between-subject layer, over
    :func:`between_subject_names` (dimensionless), or None when the study declares no such pair.

    Built from ``study.between_correlations`` (pairs checked positive definite when the study was
    resolved); a pair on a quantity without a spread raises InputError.
    """
    pairs = list(getattr(study, "between_correlations", None) or ())
    if not pairs:
        return None
    names = between_subject_names(study)
    idx = {n: i for i, n in enumerate(names)}
    corr = np.eye(len(names))
    for a, b, rho in pairs:
        if a not in idx or b not in idx:
            raise InputError("a between-subject correlation names a quantity without a between-subject spread",
                             key="correlations.between_subject", value=[a, b, rho])
        corr[idx[a], idx[b]] = corr[idx[b], idx[a]] = float(rho)
    return corr


def correlate_scores(study: Any, z: np.ndarray, layer: str = "individual") -> np.ndarray:
    """Independent normal scores (n, k) in the :func:`cube_columns` layout -> correlated ones, in place.

    The typical columns through the Cholesky factor of :func:`correlation_of`; in the ``individual``
    layer the between-subject columns through that of :func:`between_correlation_of`. Columns without
    a declared correlation are left exactly as they are.
    """
    d = len(study.names)
    corr = correlation_of(study)
    if d and not is_independent(corr):
        z[:, :d] = z[:, :d] @ cholesky(corr).T
    if layer == "individual":
        between = between_correlation_of(study)
        if between is not None and not is_independent(between):
            z[:, d:] = z[:, d:] @ cholesky(between).T
    return z


def correlate_between(study: Any, scores: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Independent between-subject normal scores (name -> array, all one shape) -> correlated as the study's
    declared between-subject pairs say (:func:`between_correlation_of`, restricted to the names given; the
    scores of other names and a study without pairs come back unchanged).

    Parameters
    ----------
    study : Study
        With ``between_correlations`` (pairs of quantities and their normal-score correlation).
    scores : dict
        Quantity -> standard-normal scores (dimensionless), every array the same shape.

    Returns
    -------
    dict
        The same names, scores z = L u over the correlated names (L the Cholesky factor of their correlation).
    """
    corr = between_correlation_of(study)
    if corr is None:
        return scores
    names = between_subject_names(study)
    keep = [i for i, n in enumerate(names) if n in scores]
    sub = corr[np.ix_(keep, keep)]
    if is_independent(sub):
        return scores
    picked = [names[i] for i in keep]
    u = np.stack([scores[n] for n in picked], axis=-1)
    z = u @ cholesky(sub).T
    return {**scores, **{n: z[..., j] for j, n in enumerate(picked)}}


def is_independent(corr: np.ndarray, tol: float = 1e-12) -> bool:
    """True when a correlation matrix is the identity (within tol)."""
    return bool(np.all(np.abs(corr - np.eye(len(corr))) <= tol))


def cholesky(corr: np.ndarray) -> np.ndarray:
    """Lower Cholesky factor of a correlation matrix; InputError if it is not positive definite."""
    try:
        return np.linalg.cholesky(corr)
    except np.linalg.LinAlgError as exc:
        raise InputError("correlation matrix is not positive definite", key="correlations",
                         value=None) from exc


def cube(n: int, d: int, method: str = "qmc", seed: Any = None) -> np.ndarray:
    """n points in the open unit cube (0,1)^d by ``method`` (qmc | mc | lhs).

    ``seed`` is anything numpy's ``default_rng`` accepts (an int, a SeedSequence, a Generator).
    For ``qmc`` a non-power-of-two ``n`` loses the Sobol' balance; callers round up first.
    """
    from scipy.stats import qmc

    _check_method(method)
    if n <= 0:
        raise InputError("the number of samples must be positive", key="samples", value=n)
    rng = np.random.default_rng(seed)
    if d == 0:
        return np.empty((n, 0))
    if method == "qmc":
        u = qmc.Sobol(d, scramble=True, rng=rng).random(n)
    elif method == "lhs":
        u = qmc.LatinHypercube(d, rng=rng).random(n)
    else:
        u = rng.random((n, d))
    return open_cube(u)


def replicate_seeds(seed: Any, replicates: int) -> list[np.random.SeedSequence]:
    """Independent child seeds, one per replicate, derived from one seed (reproducible)."""
    ss = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    return ss.spawn(replicates)


def normal_scores(study: Any, u: np.ndarray, layer: str = "individual") -> np.ndarray:
    """Cube points (n, k) -> normal scores (n, k), correlated (Gaussian copula) by :func:`correlate_scores`."""
    from scipy.special import ndtri

    cols = cube_columns(study, layer)
    u = np.atleast_2d(np.asarray(u, dtype=float))
    if u.shape[1] != len(cols):
        raise InputError(f"cube has {u.shape[1]} columns; the {layer} layer needs {len(cols)}",
                         key="u", value=u.shape)
    z = np.asfortranarray(ndtri(u))  # columns contiguous for the per-quantity maps
    return correlate_scores(study, z, layer)


def scores_to_values(prior: Any, z: np.ndarray, *, exact: bool = False) -> np.ndarray:
    """One prior's values (canonical unit) at normal scores z.

    Through the prior's distribution family (``Distribution.from_scores``): closed forms where the
    family has one, a cubic spline of the exact inverse-CDF map for large batches of beta and gamma
    priors (unless ``exact``; the exact map outside the spline's grid, |z| > 8), the exact map
    otherwise. A prior-like object without a ``distribution`` uses its ``from_normal_scores``.

    Parameters
    ----------
    prior : Prior
        The declaration.
    z : array
        Standard normal scores (dimensionless).
    exact : bool
        Never use the spline.

    Returns
    -------
    array
        Values in the canonical unit of the prior's quantity, shaped like ``z``.
    """
    z = np.asarray(z, dtype=float)
    dist = getattr(prior, "distribution", None)
    if dist is None:
        return np.asarray(prior.from_normal_scores(z), dtype=float)
    return np.asarray(dist.from_scores(z, np, fast=not exact), dtype=float)


def from_scores(study: Any, z: np.ndarray, layer: str = "individual") -> dict[str, np.ndarray]:
    """Normal scores (n, k), already correlated, -> values of every prior (canonical units).

    Every quantity in ``study.priors`` gets an array of length n: uncertain inputs from their
    scores, fixed quantities repeated; in the ``individual`` layer the between-subject spread is
    added through ``Prior.individual``.
    """
    cols = cube_columns(study, layer)
    z = np.atleast_2d(np.asarray(z, dtype=float))
    n = z.shape[0]
    index = {name: i for i, name in enumerate(study.names)}
    values: dict[str, np.ndarray] = {}
    for symbol, prior in study.priors.items():
        if symbol in index:
            values[symbol] = scores_to_values(prior, z[:, index[symbol]])
        else:
            values[symbol] = np.full(n, float(prior.median()))
    if layer == "individual":
        for j, (symbol, part) in enumerate(cols):
            if part == "between_subject":
                prior = study.priors[symbol]
                values[symbol] = np.asarray(prior.individual(values[symbol], z[:, j]), dtype=float)
    return values


def from_cube(study: Any, u: np.ndarray, layer: str = "individual") -> dict[str, np.ndarray]:
    """Points in the open unit cube (n, k) -> values of every prior (canonical units).

    Columns as :func:`cube_columns`: ``study.names`` first, then (``individual`` layer) one column
    per quantity with a between-subject spread.
    """
    return from_scores(study, normal_scores(study, u, layer), layer)


def draw(study: Any, n: int, *, method: str = "qmc", seed: Any = None,
         layer: str = "individual") -> dict[str, np.ndarray]:
    """n draws of every quantity of a study (canonical units), by ``method`` (qmc | mc | lhs).

    ``seed`` defaults to ``study.seed``. For ``qmc`` a non-power-of-two n is drawn from the next
    power of two and the first n points are kept (balance is lost; prefer a power of two).
    """
    _check_method(method)
    _check_layer(layer)
    if n <= 0:
        raise InputError("the number of samples must be positive", key="samples", value=n)
    seed = getattr(study, "seed", None) if seed is None else seed
    k = len(cube_columns(study, layer))
    if method == "mc":  # plain MC: normal scores drawn directly (same law as Phi^-1 of uniforms)
        z = np.random.default_rng(seed).standard_normal((k, n)).T  # columns contiguous
        return from_scores(study, correlate_scores(study, z, layer), layer)
    m = next_power_of_two(n) if method == "qmc" else n
    u = cube(m, k, method, seed)[:n]
    return from_cube(study, u, layer)


def stack(values: dict[str, np.ndarray], names: Sequence[str]) -> np.ndarray:
    """Values dict -> (n, len(names)) matrix in the given column order."""
    return np.column_stack([np.asarray(values[s], dtype=float) for s in names])
