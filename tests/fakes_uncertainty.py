"""Light stand-ins for Study/Prior (duck-typed per DEVELOPERS.md "Module contracts") so the
sampling, propagation and sensitivity machinery can be checked against closed forms on its own."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats
from scipy.special import ndtr


@dataclass
class FakePrior:
    symbol: str
    frozen_dist: Any  # a scipy.stats frozen distribution; None for fixed
    value: float | None = None
    between_subject: dict | None = None
    exact_normal: tuple[float, float] | None = None  # (mean, sd) for an exact score map

    def ppf(self, u):
        return self.frozen_dist.ppf(u)

    def from_normal_scores(self, z):
        if self.exact_normal is not None:
            return self.exact_normal[0] + self.exact_normal[1] * np.asarray(z)
        return self.frozen_dist.ppf(ndtr(z))

    def median(self):
        return self.value if self.frozen_dist is None else float(self.frozen_dist.median())

    def individual(self, typical, z):
        bs = self.between_subject
        if "sd" in bs:
            return typical + bs["sd"] * np.asarray(z)
        s = np.sqrt(np.log1p(bs["cv"] ** 2))
        return typical * np.exp(s * np.asarray(z))


def normal(symbol, mean, sd, **kw):
    return FakePrior(symbol, stats.norm(mean, sd), exact_normal=(mean, sd), **kw)


def fixed(symbol, value, **kw):
    return FakePrior(symbol, None, value=value, **kw)


def starling(Kf, Pc, Pi, pi_c, pi_i, sigma):
    """Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)) (Starling 1896; common practice)."""
    return Kf * (Pc - Pi - sigma * (pi_c - pi_i))


def evaluate(study, values, xp=np):
    v = values
    net = v["Pc"] - v["Pi"] - v["sigma"] * (v["pi_c"] - v["pi_i"])
    return {"Jv": v["Kf"] * net, "net_pressure": net, "force_Pc": v["Pc"], "force_Pi": -v["Pi"],
            "force_pi_c": -v["sigma"] * v["pi_c"], "force_pi_i": v["sigma"] * v["pi_i"]}


@dataclass
class FakeStudy:
    priors: dict
    names: list
    correlation: Any = None
    seed: int = 1
    model: str = "classic"
    path: str | None = None
    title: str = "fake"
    hash: str = "0"
    propagate: Any = None
    sensitivity: Any = None
    notes: list = field(default_factory=list)


# Invented demo values (a plausible resting skeletal-muscle-like set, not a prior set).
CLASSIC = {"Kf": (0.004, 0.0008), "Pc": (25.0, 3.0), "Pi": (-2.0, 1.5), "pi_c": (25.0, 2.0),
           "pi_i": (8.0, 1.5)}
SIGMA = 0.9  # invented, fixed


def classic_study(corr=None, between=True, sigma_fixed=True, seed=1, pairs=None):
    """A study-like object with real Prior declarations (uncertainty.priors.parse_prior)."""
    from uncertainty.priors import parse_prior

    units = {"Kf": "mL/min/mmHg/100g", "Pc": "mmHg", "Pi": "mmHg", "pi_c": "mmHg", "pi_i": "mmHg"}
    bs = {"Kf": {"cv": 0.3}, "Pc": {"sd": 3.0}} if between else {}
    pri = {}
    for s, (m, sd) in CLASSIC.items():
        decl = {"dist": "normal", "mean": m, "sd": sd, "unit": units[s]}
        if s in bs:
            decl["between_subject"] = bs[s]
        pri[s] = parse_prior(s, decl)
    pri["sigma"] = parse_prior("sigma", SIGMA) if sigma_fixed else parse_prior(
        "sigma", {"dist": "normal", "mean": SIGMA, "sd": 0.03})
    names = [s for s, p in pri.items() if not p.is_fixed]
    if pairs:
        corr = np.eye(len(names))
        for a, b, r in pairs:
            i, j = names.index(a), names.index(b)
            corr[i, j] = corr[j, i] = r
    return FakeStudy(priors=pri, names=names, correlation=corr, seed=seed)
