"""Recovery of a known Kf from simulated whole-body readings (slow: PyMC samples the PyTensor time course).

Three invented subjects receive crystalloid 25 mL/kg over 30 min. Their haemoglobin, cumulative urine and body
weights are simulated with the numpy time course (``observations.course.whole_body_course``) at a known Kf, every
other input fixed at the skeletal-muscle prior medians, plus normal reading noise; the model (the same course in
PyTensor, the ``haemoglobin``, ``urine`` and whole-body ``body_weight`` kinds) is then fitted with Kf uncertain
(its prior-set prior, one value shared by the subjects). Checks: the 95% interval of Kf contains the true value, the
data narrow it (posterior sd below half the prior sd), and the chains pass the gate at these small settings.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from uncertainty.analyses.inference.observations.course import interpolation, whole_body_course
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.forms.evaluate import input_values
from uncertainty.study import Study

KF_TRUE = 0.0055      # mL/min/mmHg/100g: invented, inside the prior (median 0.0035, priors/skeletal_muscle.toml)
HB_BASE = (14.0, 13.0, 15.0)   # g/dL, invented baselines of the three subjects
WEIGHT_BASE = (70.0, 82.0, 66.0)  # kg, invented
HB_SD = 0.15          # g/dL, from memory: analysers repeat to about 1-2% at 14 g/dL
URINE_SD = 15.0       # mL, invented (a graduated collection read to a few tens of mL)
WEIGHT_SD = 0.1       # kg, from memory: a ward or research scale reads to about 0.1 kg
HB_TIMES = (0.0, 20.0, 30.0, 40.0)      # min, invented protocol
URINE_TIMES = (30.0, 40.0)
WEIGHT_TIMES = (0.0, 30.0, 40.0)


def _doc() -> dict:
    obs = [{"kind": "haemoglobin", "file": "hb.csv", "unit": "g/dL", "sd": HB_SD},
           {"kind": "urine", "file": "urine.csv", "unit": "mL", "sd": URINE_SD},
           {"kind": "body_weight", "file": "weight.csv", "unit": "kg", "sd": WEIGHT_SD}]
    return {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", "seed": 11},
            "interventions": [{"kind": "infusion", "fluid": "crystalloid", "volume": "1825 mL",
                               "duration": "30 min"}],
            "timeline": {"end": "40 min", "report_every": "10 min", "draws": 16},
            "observations": obs}


def _simulate(tmp: Path) -> tuple[Study, dict[str, float]]:
    """Write the three data files from the numpy course at the true values; the study and those values."""
    for name in ("hb", "urine", "weight"):  # placeholders so that the study loads before the readings exist
        (tmp / f"{name}.csv").write_text("subject,time_min,value\nS0,0,1\nS0,30,1\n")
    study = Study.from_dict(_doc(), base_dir=tmp)
    centre = {k: float(p.median()) for k, p in study.priors.items()}
    truth = input_values(study, {**centre, "Kf": KF_TRUE})
    course = whole_body_course({k: np.asarray(v, dtype=float) for k, v in truth.items()}, study, None, np)
    rng = np.random.default_rng(20)

    def at(name: str, times: tuple[float, ...]) -> np.ndarray:
        lo, hi, w = interpolation(np.asarray(times), course["times_min"])
        grid = np.array([float(np.ravel(x)[0]) for x in course[name]])
        return (1.0 - w) * grid[lo] + w * grid[hi]

    files = {"hb": (HB_TIMES, lambda s: HB_BASE[s] * at("hb_ratio", HB_TIMES), HB_SD),
             "urine": (URINE_TIMES, lambda s: at("urine_volume", URINE_TIMES), URINE_SD),
             "weight": (WEIGHT_TIMES, lambda s: WEIGHT_BASE[s] + at("body_weight_change", WEIGHT_TIMES), WEIGHT_SD)}
    for name, (times, mean, sd) in files.items():
        rows = ["subject,time_min,value"]
        for s in range(3):
            y = mean(s) + rng.normal(0.0, sd, len(times))
            rows += [f"S{s},{t:g},{v:.4f}" for t, v in zip(times, y, strict=True)]
        (tmp / f"{name}.csv").write_text("\n".join(rows) + "\n")
    return Study.from_dict(_doc(), base_dir=tmp), {k: float(np.ravel(v)[0]) for k, v in truth.items()}


@pytest.mark.slow
def test_kf_recovered_from_haemoglobin_urine_and_weights(tmp_path: Path) -> None:
    from uncertainty.analyses.inference.api import fit

    study, truth = _simulate(tmp_path)
    problem = problem_from_study(study)
    kf_prior = dataclasses.replace(problem.priors["Kf"], between_subject=None)  # one Kf for the three subjects
    fixed = {**problem.fixed, **{k: v for k, v in truth.items() if k != "Kf"}}
    problem = dataclasses.replace(problem, priors={"Kf": kf_prior}, fixed=fixed)
    res = fit(problem, seed=5, chains=2, draws=300, tune=300)
    kf = res.idata.posterior["Kf"].values.ravel()
    lo, hi = np.quantile(kf, [0.025, 0.975])
    assert lo < KF_TRUE < hi, (lo, hi)
    assert kf.std() < 0.5 * float(kf_prior.sd()), (kf.std(), kf_prior.sd())
    assert res.doc["diagnostics"]["passed"], res.doc["diagnostics"]
    assert len(res.built.terms) == 3
