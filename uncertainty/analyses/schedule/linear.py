"""The linearised Bayesian design core shared by the schedules (venous cuff, blood sampling).

Finite-difference Jacobians of a forward map, per-reading Fisher information, the linearised posterior
covariance (information plus prior precision), the A / D criteria and the greedy-then-exchange choice of
K reading times on a grid (the module docstring of :mod:`uncertainty.analyses.schedule` gives the method).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from uncertainty.core.errors import InputError

_FD_STEP = 1e-5


def jacobian(forward: Callable[[np.ndarray], np.ndarray], phi: np.ndarray, step: float = _FD_STEP,
             only: Sequence[int] | None = None, batched: bool = False) -> np.ndarray:
    """Central finite-difference Jacobian of ``forward`` at ``phi``.

    ``forward`` maps (M, p) parameter points to (M, G) predictions; returns (M, G, p), in the
    predictions' unit per unit of phi. Steps are ``step * max(1, |phi|)``. ``only``: the columns to
    difference (the others are zero: parameters ``forward`` does not depend on). ``batched``: every shifted
    point in one call of ``forward`` (for a forward map with a large cost per call, such as a time course
    solved for many rows at once); the same numbers.
    """
    phi = np.atleast_2d(np.asarray(phi, dtype=float))
    M, p = phi.shape
    ks = [k for k in range(p) if only is None or k in only]
    shifted = []
    for k in ks:
        h = step * np.maximum(1.0, np.abs(phi[:, k]))
        up, dn = phi.copy(), phi.copy()
        up[:, k] += h
        dn[:, k] -= h
        shifted.append((up, dn, h))
    if batched:
        out = forward(np.vstack([x for up, dn, _ in shifted for x in (up, dn)]))
        diffs = {k: (out[2 * i * M:(2 * i + 1) * M] - out[(2 * i + 1) * M:(2 * i + 2) * M]) / (2.0 * h[:, None])
                 for i, (k, (_, _, h)) in enumerate(zip(ks, shifted, strict=True))}
    else:
        diffs = {k: (forward(up) - forward(dn)) / (2.0 * h[:, None])
                 for k, (up, dn, h) in zip(ks, shifted, strict=True)}
    cols = [diffs.get(k) for k in range(p)]
    shape = next(c for c in cols if c is not None).shape
    return np.stack([np.zeros(shape) if c is None else c for c in cols], axis=-1)


def posterior_cov(info: np.ndarray, prior_prec: np.ndarray) -> np.ndarray:
    """Linearised posterior covariance (info + prior precision)^{-1}; info (..., p, p), prior_prec (p, p)."""
    return np.linalg.inv(info + prior_prec)


def information(J: np.ndarray, noise_sd: float) -> np.ndarray:
    """Per-reading Fisher information J_j^T J_j / noise_sd^2: (M, G, p) -> (M, G, p, p)."""
    return np.einsum("mgi,mgj->mgij", J, J) / noise_sd**2


@dataclass(frozen=True)
class Criterion:
    """Design criterion over target indices ``idx`` of phi: ``A`` or ``D`` (see the module docstring)."""

    kind: str
    idx: tuple[int, ...]
    prior_cov: np.ndarray

    def __call__(self, cov: np.ndarray) -> np.ndarray:
        """Criterion of posterior covariances (..., M, p, p), averaged over M: shape (...)."""
        ix = np.array(self.idx)
        if self.kind == "A":
            ratio = np.diagonal(cov, axis1=-2, axis2=-1)[..., ix] / np.diag(self.prior_cov)[ix]
            return ratio.sum(axis=-1).mean(axis=-1)
        block = cov[..., ix[:, None], ix[None, :]]
        _, logdet = np.linalg.slogdet(block)
        _, logdet0 = np.linalg.slogdet(self.prior_cov[np.ix_(ix, ix)])
        return (logdet - logdet0).mean(axis=-1)


def select_times(O: np.ndarray, K: int, prior_prec: np.ndarray, crit: Criterion,
                 start: Sequence[int] | None = None, max_passes: int = 50) -> tuple[list[int], float]:
    """K distinct reading indices on the grid minimising ``crit``: greedy, then exchange.

    ``O``: per-reading information (M, G, p, p). With ``start`` the exchange also runs from that set
    and the better result is returned. Returns (sorted indices, criterion value).
    """
    M, G = O.shape[:2]
    if K > G:
        raise InputError("more readings than grid times", key="schedule.measurements", value=K)
    Ot = np.moveaxis(O, 1, 0)  # (G, M, p, p)

    def value(info: np.ndarray) -> np.ndarray:
        return crit(posterior_cov(info, prior_prec))

    def exchange(chosen: list[int]) -> tuple[list[int], float]:
        chosen = list(chosen)
        info = Ot[chosen].sum(axis=0)
        best = float(value(info[None])[0])
        for _ in range(max_passes):
            improved = False
            for pos in range(K):
                others = np.setdiff1d(np.arange(G), chosen)
                if others.size == 0:
                    break
                trial = info[None] - Ot[chosen[pos]][None] + Ot[others]
                vals = value(trial)
                j = int(np.argmin(vals))
                if vals[j] < best - 1e-12 * max(1.0, abs(best)):
                    info = trial[j]
                    best = float(vals[j])
                    chosen[pos] = int(others[j])
                    improved = True
            if not improved:
                break
        return sorted(chosen), best

    chosen: list[int] = []
    info = np.zeros_like(Ot[0])
    for _ in range(K):
        others = np.setdiff1d(np.arange(G), chosen)
        vals = value(info[None] + Ot[others])
        j = int(others[int(np.argmin(vals))])
        chosen.append(j)
        info = info + Ot[j]
    results = [exchange(chosen)]
    if start is not None:
        results.append(exchange(list(start)))
    return min(results, key=lambda r: r[1])


def equal_times(times: np.ndarray, K: int) -> list[int]:
    """Indices on the grid nearest to K equally spaced times T j / K, j = 1..K (distinct)."""
    T = float(times[-1])
    out: list[int] = []
    for j in range(1, K + 1):
        order = np.argsort(np.abs(times - T * j / K), kind="stable")
        out.append(int(next(i for i in order if i not in out)))
    return sorted(out)


__all__ = ["Criterion", "equal_times", "information", "jacobian", "posterior_cov", "select_times"]
