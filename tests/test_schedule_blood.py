"""Blood-sampling times for a whole_body study with haemoglobin readings (analyses.schedule.blood): the
criterion against the cuff schedule's A criterion, the batched Jacobian against the closed form, the search
against exhaustive enumeration, and refusals. A 90-min timeline and few linearisation points keep it quick.
"""

from __future__ import annotations

import itertools
import json

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


# ---------------------------------------------------------------------------------------------
# the [schedule] section of a whole_body study: `fluidshift design --schedule`, `fluidshift run`, refusals

# invented settings: the fixture's subject and infusion, as a study file
_WB = ('[study]\ntitle = "invented"\ntissue = "skeletal_muscle"\nmodel = "whole_body"\nbody_mass = "73 kg"\n'
       'seed = 4\n[[interventions]]\nkind = "infusion"\nfluid = "crystalloid"\nvolume = "1000 mL"\n'
       'duration = "30 min"\n[timeline]\nend = "90 min"\nreport_every = "10 min"\n')
_SCHEDULE = ('[schedule]\ncandidates = [10, 20, "30 min", 45, 60, "1.5 h"]\nsamples = 2\n'
             'target = "infused_retained_fraction at 60 min"\nlinearisation_draws = 2\n')


def _write(tmp_path, text: str):
    path = tmp_path / "s.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_cli_design_schedule_chooses_blood_times(tmp_path) -> None:
    from click.testing import CliRunner

    from uncertainty.app.cli import main

    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["design", str(_write(tmp_path, _WB + _SCHEDULE)), "--schedule", "--json",
                                    "--out", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert doc["kind"] == "blood_sampling"
    assert set(doc) >= {"optimised", "equal_spacing", "sd_ratio", "prior_sd", "candidates", "samples", "target",
                        "by_samples", "hb_course", "units"}
    target = "infused_retained_fraction at 60 min"
    assert doc["candidates"] == CANDIDATES  # "30 min" and "1.5 h" converted to min
    chosen = doc["optimised"]["times"]
    assert len(chosen) == 2 and set(chosen) <= set(CANDIDATES)
    assert doc["optimised"]["criterion"] <= doc["equal_spacing"]["criterion"] + 1e-12
    assert doc["sd_ratio"][target] <= 1 + 1e-9
    assert 0 < doc["optimised"]["posterior_sd"][target] < doc["prior_sd"][target]
    ks = doc["by_samples"]["samples"]
    assert ks == list(range(1, len(CANDIDATES) + 1))
    sds = doc["by_samples"]["optimised"]
    assert all(b <= a + 1e-12 for a, b in itertools.pairwise(sds))  # more samples never widen the posterior
    assert (out / "blood_schedule.png").stat().st_size > 0 and (out / "schedule.csv").exists()


@pytest.mark.parametrize("section, key", [
    ('[schedule]\ncandidates = [10, 30, 60]\nsamples = 4\n', "schedule.samples"),       # k above the candidates
    ('[schedule]\ncandidates = [10, 30, 120]\n', "schedule.candidates[2]"),              # after the 90 min end
    ('[schedule]\ncandidates = [10, "30 mmHg"]\n', "schedule.candidates"),              # not a time
    ('[schedule]\ncandidates = [0, 30]\n', "schedule.candidates"),                      # the baseline itself
    ('[schedule]\nsamples = 0\n', "schedule.samples"),
    ('[schedule]\nsteps = 3\n', "schedule.steps"),                                      # a venous-cuff key
    ('[schedule]\ntarget = "Jv_total"\n', "schedule.target"),                           # no quantity of the study
    ('[schedule]\ntarget = "hb_ratio at 3 h"\n', "schedule.target"),                    # after the end
])
def test_cli_refuses_a_bad_blood_schedule(tmp_path, section: str, key: str) -> None:
    from click.testing import CliRunner

    from uncertainty.app.cli import main

    path = _write(tmp_path, _WB + section)
    for args in (["design", str(path), "--schedule", "--out", str(tmp_path / "out")], ["check", str(path)]):
        res = CliRunner().invoke(main, args)
        assert res.exit_code == 2, res.output
        lines = [ln for ln in res.output.splitlines() if ln.strip()]
        assert len(lines) == 1 and key in lines[0] and "s.toml" in lines[0], res.output
    assert not (tmp_path / "out").exists()  # nothing half-written


def test_blood_key_in_a_cuff_study_is_refused(tmp_path) -> None:
    from click.testing import CliRunner

    from uncertainty.app.cli import main

    path = _write(tmp_path, '[study]\ntitle = "invented"\ntissue = "skeletal_muscle"\n[schedule]\nsamples = 3\n')
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2 and "schedule.samples" in res.output, res.output


def test_run_reports_the_blood_schedule(tmp_path) -> None:
    from uncertainty.analyses.schedule.blood_result import BloodScheduleResult
    from uncertainty.analyses.schedule.result import ScheduleResult
    from uncertainty.app.run import run

    res = run(_write(tmp_path, _WB + _SCHEDULE), tmp_path / "out", progress=False)
    doc = json.loads((tmp_path / "out" / "results.json").read_text())
    sec = doc["sections"]["schedule"]
    assert sec["status"] == "done", sec.get("message")
    assert any(f["kind"] == "figure" and "blood_schedule" in f["path"] for f in sec["files"])
    assert isinstance(ScheduleResult.from_dict(sec["result"]), BloodScheduleResult)
    html = (tmp_path / "out" / "report.html").read_text()
    assert 'id="section-schedule"' in html and "Blood-sampling times" in html and "equal spacing" in html
    assert any(line.startswith("Blood sampling: draw at 0 and") for line in res.summary)
