"""Every analysis, in run order, as the application layer iterates them.

The runner, the report and the commands look an analysis up here (by its section name) instead of
importing it by name; adding an analysis is one :class:`~uncertainty.analyses.result.Analysis` entry
below plus its folder (core, ``result.py``, ``figure.py``, ``table.py``, ``report_section.py``).
"""

from __future__ import annotations

import weakref
from collections.abc import Callable
from typing import Any

from uncertainty.analyses import calibrate as calibrate_
from uncertainty.analyses import design as design_
from uncertainty.analyses import propagate as propagate_
from uncertainty.analyses import rank as rank_
from uncertainty.analyses import scenarios as scenarios_
from uncertainty.analyses import schedule as schedule_
from uncertainty.analyses import sensitivity as sensitivity_
from uncertainty.analyses.calibrate import report_section as calibrate_report
from uncertainty.analyses.calibrate.result import CalibrationResult
from uncertainty.analyses.design import report_section as design_report
from uncertainty.analyses.design.result import DesignResult
from uncertainty.analyses.inference import api as inference_api
from uncertainty.analyses.inference import report_section as inference_report
from uncertainty.analyses.inference.result import InferenceResult
from uncertainty.analyses.propagate import report_section as propagate_report
from uncertainty.analyses.propagate.result import PropagateResult
from uncertainty.analyses.rank import report_section as rank_report
from uncertainty.analyses.rank.result import RankResult
from uncertainty.analyses.result import Analysis, Result
from uncertainty.analyses.scenarios import report_section as scenarios_report
from uncertainty.analyses.scenarios.result import ScenariosResult
from uncertainty.analyses.schedule import report_section as schedule_report
from uncertainty.analyses.schedule.result import ScheduleResult
from uncertainty.analyses.sensitivity import report_section as sensitivity_report
from uncertainty.analyses.sensitivity.result import SensitivityResult
from uncertainty.analyses.validation import report_section as validation_report
from uncertainty.analyses.validation import section as validation_
from uncertainty.analyses.validation.result import FormValidationResult
from uncertainty.core.errors import QualityGateError


def _has_section(name: str) -> Callable[[Any], bool]:
    def present(study: Any) -> bool:
        return getattr(study, name, None) is not None

    return present


def _has_observations(study: Any) -> bool:
    return bool(getattr(study, "observations", None))


def _run_propagate(study: Any, seed: int | None, executor: Any = None) -> Result:
    return propagate_.propagate(study, seed=seed, executor=executor)


def _run_sensitivity(study: Any, seed: int | None, executor: Any = None) -> Result:
    return sensitivity_.sensitivity(study, seed=seed, executor=executor)


#: the last posterior computed for a study in this session (study -> InferenceResult), read by scenarios
_POSTERIORS: weakref.WeakKeyDictionary[Any, Any] = weakref.WeakKeyDictionary()


def _run_infer(study: Any, seed: int | None) -> Result:
    try:
        result = inference_api.infer(study, seed=seed)
    except QualityGateError as exc:  # a flagged posterior is still the posterior the run reports
        if exc.result is not None:
            _remember(study, exc.result)
        raise
    _remember(study, result)
    return result


def _remember(study: Any, result: Any) -> None:
    try:
        _POSTERIORS[study] = result
    except TypeError:  # a stand-in study that cannot be weakly referenced
        pass


def _has_scenarios(study: Any) -> bool:
    return bool(getattr(study, "scenarios", None))


def _run_scenarios(study: Any, seed: int | None) -> Result:
    try:
        posterior = _POSTERIORS.get(study)
    except TypeError:
        posterior = None
    return scenarios_.scenarios(study, seed=seed, posterior=posterior)


def _run_rank(study: Any, seed: int | None, executor: Any = None) -> Result:
    return rank_.rank(study, seed=seed, executor=executor)


def _run_design(study: Any, seed: int | None, executor: Any = None) -> Result:
    return design_.design(study, seed=seed, executor=executor)


def _run_schedule(study: Any, seed: int | None, executor: Any = None) -> Result:
    return schedule_.schedule(study, seed=seed, executor=executor)


def _run_calibrate(study: Any, seed: int | None, executor: Any = None) -> Result:
    section = getattr(study, "calibrate", None)
    return calibrate_.calibrate(study, seed=seed, executor=executor,
                                replicates=getattr(section, "replicates", calibrate_.REPLICATES),
                                bins=getattr(section, "bins", calibrate_.BINS),
                                draws=getattr(section, "draws", calibrate_.DRAWS))


def _has_validation_rows(study: Any) -> bool:
    return bool(validation_.study_rows(study))


def _run_validation(study: Any, seed: int | None) -> Result:
    return validation_.validate_study(study, seed=seed)


#: the analyses whose ``run`` also takes ``executor=`` (:mod:`uncertainty.core.parallel`): their
#: independent tasks go through it, with the same numbers on any executor
USES_EXECUTOR = frozenset({"propagate", "sensitivity", "rank", "design", "schedule", "calibrate"})

#: the analyses in the order a whole-study run computes them
ANALYSES: tuple[Analysis, ...] = (
    Analysis(name="propagate", title="Uncertainty of Jv", label="propagate uncertainty", depends=("propagate",),
             run=_run_propagate, from_dict=PropagateResult.from_dict, present=_has_section("propagate"),
             section_html=propagate_report.section_html, summary=propagate_report.summary,
             captions=propagate_report.CAPTIONS, diagnostics=propagate_report.diagnostics),
    Analysis(name="sensitivity", title="Which inputs matter", label="global sensitivity", depends=("sensitivity",),
             run=_run_sensitivity, from_dict=SensitivityResult.from_dict, present=_has_section("sensitivity"),
             section_html=sensitivity_report.section_html, summary=sensitivity_report.summary,
             captions=sensitivity_report.CAPTIONS),
    Analysis(name="infer", title="Updating from the observations", label="Bayesian updating",
             depends=("observations", "infer"), run=_run_infer, from_dict=InferenceResult.from_dict,
             present=_has_observations, section_html=inference_report.section_html,
             summary=inference_report.summary, captions=inference_report.CAPTIONS,
             diagnostics=inference_report.diagnostics),
    Analysis(name="rank", title="Which measurement to make", label="rank measurements",
             depends=("rank", "observations"), run=_run_rank, from_dict=RankResult.from_dict,
             present=_has_section("rank"), section_html=rank_report.section_html, summary=rank_report.summary,
             captions=rank_report.CAPTIONS),
    Analysis(name="design", title="Trial design", label="trial design", depends=("design", "observations"),
             run=_run_design, from_dict=DesignResult.from_dict, present=_has_section("design"),
             section_html=design_report.section_html, summary=design_report.summary,
             captions=design_report.CAPTIONS),
    Analysis(name="schedule", title="Measurement schedule", label="measurement schedule",
             depends=("schedule", "observations"), run=_run_schedule, from_dict=ScheduleResult.from_dict,
             present=_has_section("schedule"), section_html=schedule_report.section_html,
             summary=schedule_report.summary, captions=schedule_report.CAPTIONS),
    Analysis(name="scenarios", title="What if: scenarios", label="scenarios",
             depends=("scenarios", "observations", "infer"), run=_run_scenarios, from_dict=ScenariosResult.from_dict,
             present=_has_scenarios, section_html=scenarios_report.section_html, summary=scenarios_report.summary,
             captions=scenarios_report.CAPTIONS),
    # heavy (one refit per replicate): only when the study file has a [calibrate] section
    Analysis(name="calibrate", title="Calibration of the inference", label="simulation-based calibration",
             depends=("calibrate", "observations", "infer"), run=_run_calibrate,
             from_dict=CalibrationResult.from_dict, present=_has_section("calibrate"),
             section_html=calibrate_report.section_html, summary=calibrate_report.summary,
             captions=calibrate_report.CAPTIONS),
    # every study whose tissue and model form have rows in the shipped validation table (shipped priors)
    Analysis(name="validation", title="The form against published measurements", label="published measurements",
             depends=(), run=_run_validation, from_dict=FormValidationResult.from_dict, present=_has_validation_rows,
             section_html=validation_report.section_html, summary=validation_report.summary,
             captions=validation_report.CAPTIONS),
)

#: the analyses whose diagnostics the report shows, in its order: the sampler's, then Monte Carlo's
DIAGNOSTICS: tuple[Analysis, ...] = tuple(a for name in ("infer", "propagate") for a in ANALYSES
                                          if a.name == name and a.diagnostics is not None)


def analysis(name: str) -> Analysis | None:
    """The analysis whose section is called ``name``.

    Parameters
    ----------
    name : str
        A section name of results.json ("propagate", "sensitivity", "infer", "rank", "design",
        "schedule", "scenarios", "calibrate", "validation").

    Returns
    -------
    Analysis or None
        None for any other name (such as "check").
    """
    return next((a for a in ANALYSES if a.name == name), None)
