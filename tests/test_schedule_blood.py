"""Blood-sampling times for a whole_body study with haemoglobin readings (analyses.schedule.blood): the
criterion against the cuff schedule's A criterion, the batched Jacobian against the closed form, the search
against exhaustive enumeration, and refusals. A 90-min timeline and few linearisation points keep it quick.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from uncertainty.analyses.schedule import Criterion, jacobian
from uncertainty.analyses.schedule.blood import TargetCriterion, blood_design, blood_sampling_times
from uncertainty.core.errors import InputError, StudyError
from uncertainty.study import Study

CANDIDATES = [10.0, 20.0, 30.0, 45.0, 60.0, 90.0]


@pytest.fixture(scope="module")
def study() -> Study:
    # invented settings: a 73 kg subject given 1000 mL of crystalloid over 30 min
    return Study.from_dict({
        "study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", "seed": 4},
        "interventions": [{"kind": "infusion", "fluid": "crystalloid", "volume": "1000 mL", "duration": "30 min"}],
        "timeline": {"end": "90 min", "report_every": "10 min"}})


def test_target_criterion_on_a_quantity_is_the_a_criterion() -> None:
    # closed check: g = e_k gives Var_post(phi_k) / Var_prior(phi_k), the cuff schedule's A criterion on one target
    rng = np.random.default_rng(0)
    p, M = 4, 3
    a = rng.standard_normal((p, p))
    prior = a @ a.T + p * np.eye(p)
    b = rng.standard_normal((M, p, p))
    post = np.linalg.inv(np.linalg.inv(prior) + np.einsum("mij,mkj->mik", b, b))
    g = np.zeros((M, p))
    g[:, 2] = 1.0
    assert TargetCriterion(g, prior)(post) == pytest.approx(float(Criterion("A", (2,), prior)(post)), rel=1e-12)


def test_batched_jacobian_is_the_same() -> None:
    # closed form: f(phi) = phi A + phi_0^2 has J = A^T plus 2 phi_0 in column 0
    A = np.array([[1.0, 2.0, 0.5], [0.0, -1.0, 3.0]])

    def f(phi: np.ndarray) -> np.ndarray:
        return phi @ A + phi[:, :1] ** 2

    phi = np.array([[0.3, -1.2], [2.0, 0.5]])
    J = jacobian(f, phi, batched=True)
    np.testing.assert_allclose(J, jacobian(f, phi), rtol=1e-12)
    want = np.broadcast_to(A.T, (2, 3, 2)).copy()
    want[:, :, 0] += 2.0 * phi[:, :1]
    np.testing.assert_allclose(J, want, rtol=1e-6)


@pytest.mark.parametrize("target", ["Kf", "infused_retained_fraction at 60 min"])
def test_chosen_times_are_the_best_subset(study: Study, target: str) -> None:
    k = 2
    got = blood_sampling_times(study, CANDIDATES, k, target, points=2, draws=2000)
    d = blood_design(study, CANDIDATES, target, points=2, draws=2000)
    best = min(itertools.combinations(range(len(CANDIDATES)), k), key=lambda idx: float(d.crit(d.posterior(idx))))
    assert got["times_min"] == [CANDIDATES[i] for i in best]
    assert got["criterion"] <= got["equal_spacing"]["criterion"] + 1e-12
    assert 0 < got["posterior_sd"] < got["prior_sd"]


@pytest.mark.parametrize("args, key", [
    (([0.0, 30.0], 1, "Kf"), "candidates"),        # not after 0
    (([30.0, 120.0], 1, "Kf"), "candidates"),      # after the timeline's 90 min
    (([30.0, 60.0], 3, "Kf"), "k"),                # more samples than candidates
    (([30.0, 60.0], 1, "Jv_total"), "target"),     # not a quantity of the study
])
def test_refusals(study: Study, args: tuple, key: str) -> None:
    with pytest.raises(InputError) as exc:
        blood_sampling_times(study, *args, points=1, draws=200)
    assert exc.value.key == key


def test_endpoint_beyond_the_end_is_refused(study: Study) -> None:
    with pytest.raises(StudyError) as exc:
        blood_sampling_times(study, [30.0], 1, "hb_ratio at 3 h", points=1, draws=200)
    assert exc.value.key == "target"
