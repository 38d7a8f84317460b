"""Light stand-ins for a Study and the analyses, duck-typed to DEVELOPERS.md "Module contracts", so the
whole-study runner, bundle and report can be checked on their own (and killed mid-way cheaply).

The fake analyses compute seeded numpy statistics of the Starling sum (numbers are invented, not a
prior set); their ``plot`` writes real matplotlib PNG and SVG files. ``SLOW`` makes each analysis
and figure write take a while, so a subprocess can be interrupted mid-way.
"""

from __future__ import annotations

import hashlib
import os
import sys
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

SLOW = float(os.environ.get("FAKE_SLOW", "0"))  # seconds of work per analysis
# FAKE_HOLD=SECTION:PATH: that section's SVG stops half-written, PATH is created, and the run waits there
# for a signal, so a test can interrupt it mid-file however fast or loaded the machine is
HOLD_SECTION, _, HOLD_MARK = os.environ.get("FAKE_HOLD", "").partition(":")


@dataclass
class FakePrior:
    symbol: str
    dist: str
    params: dict
    unit: str
    origin: str
    between_subject: dict | None = None
    basis: str | None = None
    note: str = ""

    def median(self) -> float:
        return self.params.get("mean", self.params.get("value", 0.0))

    def interval(self, level: float) -> tuple[float, float]:
        m, s = self.params.get("mean", 0.0), self.params.get("sd", 0.0)
        return (m - 1.96 * s, m + 1.96 * s)


@dataclass
class FakeSource:
    """What a Study keeps of its file (``Study.source``): the document as written."""

    document: dict


@dataclass
class FakeStudy:
    path: str
    hash: str
    title: str
    seed: int
    priors: dict
    model: str = "classic"
    tissue: str = "fake_tissue"
    conditions: list = field(default_factory=list)
    names: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    propagate: Any = None
    sensitivity: Any = None
    observations: Any = None
    rank: Any = None
    design: Any = None
    source: FakeSource | None = None


def load_fake(path: str | os.PathLike) -> FakeStudy:
    """A FakeStudy from a TOML file with [study] title/seed and any of the analysis sections."""
    from uncertainty.core.errors import StudyError

    data = Path(path).read_bytes()
    try:
        doc = tomllib.loads(data.decode())
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"not valid TOML: {exc}", file=str(path)) from exc
    st = doc.get("study", {})
    if "seed" in st and not isinstance(st["seed"], int):
        raise StudyError("seed must be a whole number", file=str(path), key="study.seed", value=st["seed"])
    # invented values, for runner tests only
    priors = {"Pc": FakePrior("Pc", "normal", {"mean": 25.0, "sd": 3.0}, "mmHg", "invented (test stand-in)"),
              "Kf": FakePrior("Kf", "normal", {"mean": 0.004, "sd": 0.0008}, "mL/min/mmHg/100g",
                              "invented (test stand-in)")}
    return FakeStudy(path=str(path), hash=hashlib.sha256(data).hexdigest(), title=st.get("title", "fake"),
                     seed=st.get("seed", 1), priors=priors, names=list(priors),
                     propagate=doc.get("propagate"), sensitivity=doc.get("sensitivity"),
                     observations=doc.get("observations"), rank=doc.get("rank"), design=doc.get("design"),
                     source=FakeSource(document=doc))


@dataclass
class FakeResult:
    name: str
    doc: dict
    gate_failed: bool = False

    def to_dict(self) -> dict:
        return self.doc

    def to_dataframe(self) -> Any:
        import pandas as pd

        flat = {k: v for k, v in self.doc.items() if isinstance(v, int | float)}
        return pd.DataFrame([flat])

    def plot(self, out_dir: str) -> list[str]:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        fig, ax = plt.subplots(figsize=(4, 3))
        ax.plot(np.arange(50), np.sin(np.arange(50) / 5.0) * self.doc.get("scale", 1.0))
        ax.set_title(self.name)
        paths = []
        for ext in ("png", "svg"):
            p = Path(out_dir) / f"{self.name}_figure.{ext}"
            if SLOW and ext == "svg":  # write slowly, in chunks, so a kill can land mid-file
                import io

                buf = io.BytesIO()
                fig.savefig(buf, format="svg")
                data = buf.getvalue() * 1
                with open(p, "wb") as fh:
                    step = max(1, len(data) // 20)
                    for i in range(0, len(data), step):
                        fh.write(data[i:i + step])
                        fh.flush()
                        time.sleep(SLOW / 20)
                        if self.name == HOLD_SECTION and i >= len(data) // 2:
                            Path(HOLD_MARK).touch()
                            while True:  # until interrupted
                                time.sleep(0.1)
            else:
                fig.savefig(p)
            paths.append(str(p))
        plt.close(fig)
        return paths


def _stats(name: str, study: FakeStudy, seed: int | None, n: int = 4000) -> dict:
    rng = np.random.default_rng([seed or 0, len(name)])
    if SLOW:
        time.sleep(SLOW)
    pc = rng.normal(25.0, 3.0, n)
    kf = rng.normal(0.004, 0.0008, n)
    jv = kf * (pc - (-2.0) - 0.9 * (25.0 - 8.0))
    q = np.quantile(jv, [0.025, 0.5, 0.975])
    return {"mean": float(jv.mean()), "sd": float(jv.std(ddof=1)), "median": float(q[1]),
            "ci95": [float(q[0]), float(q[2])], "mc_se": {"mean": float(jv.std() / np.sqrt(n))}}


CALLS: list[str] = []


def fake_propagate(study: FakeStudy, seed: int | None) -> FakeResult:
    CALLS.append("propagate")
    s = _stats("propagate", study, seed)
    doc = {"outputs": {"Jv": s}, "typical": {"Jv": s}, "p_absorption": 0.01, "units": {"Jv": "mL/min/100g"},
           "method": "mc", "samples": 4000, "replicates": 16, "scale": 1.0}
    return FakeResult("propagate", doc)


def fake_sensitivity(study: FakeStudy, seed: int | None) -> FakeResult:
    CALLS.append("sensitivity")
    s = _stats("sensitivity", study, seed)
    doc = {"method": "sobol", "output": "Jv", "ranking": ["Pc", "Kf"],
           "indices": {"Pc": {"S1": 0.6, "S1_ci": [0.5, 0.7], "ST": 0.65, "ST_ci": [0.55, 0.75]},
                       "Kf": {"S1": 0.3, "S1_ci": [0.2, 0.4], "ST": 0.35, "ST_ci": [0.25, 0.45]}},
           "check": s["mean"], "scale": 2.0}
    return FakeResult("sensitivity", doc)


def fake_design(study: FakeStudy, seed: int | None) -> FakeResult:
    from uncertainty.core.errors import QualityGateError

    CALLS.append("design")
    doc = {"n_per_arm": 42, "power": 0.81, "assurance": 0.6,
           "curve": [{"n_per_arm": 40, "power": 0.79, "power_mc_se": 0.01, "assurance": 0.58, "assurance_mc_se": 0.01},
                     {"n_per_arm": 42, "power": 0.81, "power_mc_se": 0.01, "assurance": 0.6, "assurance_mc_se": 0.01}]}
    res = FakeResult("design", doc)
    if (study.design or {}).get("fail_gate"):
        raise QualityGateError("Monte Carlo error of power above tolerance (fake)", result=res)
    return res


def fake_rank(study: FakeStudy, seed: int | None) -> FakeResult:
    CALLS.append("rank")
    if (study.rank or {}).get("crash"):
        raise RuntimeError("fake crash in rank")
    doc = {"candidates": [{"name": "micropipette Pc", "parameter": "Pc", "expected_variance_reduction": 0.4},
                          {"name": "wick Pi", "parameter": "Pi", "expected_variance_reduction": 0.1}]}
    return FakeResult("rank", doc)


def fake_infer(study: FakeStudy, seed: int | None) -> FakeResult:
    CALLS.append("infer")
    s = _stats("infer", study, seed)
    doc = {"Jv": {k: s[k] for k in ("mean", "sd", "ci95")} | {"hdi95": s["ci95"]},
           "diagnostics": {"r_hat_max": 1.001, "ess_bulk_min": 900.0, "divergences": 0, "passed": True}}
    return FakeResult("infer", doc)


FAKES = {"propagate": fake_propagate, "sensitivity": fake_sensitivity, "infer": fake_infer, "rank": fake_rank,
         "design": fake_design}


def install() -> None:
    """Point the runner at the stand-ins."""
    import importlib

    run_mod = importlib.import_module("uncertainty.app.run")

    run_mod.LOADER = load_fake
    run_mod.ANALYSES.update(FAKES)


STUDY_TEXT = """
[study]
title = "Fake study for the runner (invented)"
seed = 7

[propagate]
samples = 4000

[sensitivity]
method = "sobol"

[design]
n_range = [10, 100]
"""


if __name__ == "__main__":  # python run_fakes.py STUDY OUT : a fake run in a subprocess
    install()
    from uncertainty.app.run import run

    run(sys.argv[1], sys.argv[2], progress=False)
