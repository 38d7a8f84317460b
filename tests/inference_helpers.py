"""Small stand-in problems for the inference tests: the real Prior class and the real Starling
formula, with every quantity but one or two fixed."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference.problem import Problem, normalise_observations
from uncertainty.physiology import starling
from uncertainty.priors import Prior

# Fixed forces of the stand-in tissue: invented round values (test scaffolding, not physiology data)
FIXED = {"Kf": 0.004, "Pi": -1.0, "pi_c": 25.0, "pi_i": 8.0, "sigma": 0.9}


def starling_outputs(v: dict[str, Any], xp: Any) -> dict[str, Any]:
    """Jv and net pressure through the physiology functions (numpy or PyTensor)."""
    return {"Jv": starling.filtration(v["Kf"], v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"]),
            "net_pressure": starling.net_pressure(v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"])}


def problem(priors: dict[str, Prior], observations: list[dict], fixed: dict | None = None) -> Problem:
    """A Problem over ``priors`` with the remaining Starling quantities fixed at FIXED."""
    fx = {k: v for k, v in (fixed or FIXED).items() if k not in priors}
    return Problem(priors=priors, fixed=fx, evaluate=starling_outputs,
                   observations=normalise_observations(observations, file="stand-in.toml"),
                   file="stand-in.toml")


def normal(symbol: str, mean: float, sd: float, **kw: Any) -> Prior:
    return Prior(symbol, "normal", {"mean": mean, "sd": sd}, **kw)


def lognormal(symbol: str, median: float, gsd: float, **kw: Any) -> Prior:
    return Prior(symbol, "lognormal", {"median": median, "gsd": gsd}, **kw)
