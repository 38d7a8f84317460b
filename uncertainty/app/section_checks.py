"""Checks of analysis sections that need their analysis module's rules (run by `fluidshift check` and by
the check step of `fluidshift run`, so that bad input stops before any work starts, exit 2).

:func:`check_study` is the one up-front check both commands call: the section rules below and, with
observations or ``[infer]``, the inference model declared without sampling.

The pydantic schema in ``uncertainty.study`` checks each key on its own; the rules here need the
resolved study as well: a paired design without within-subject spread, an effect on an unknown
quantity (``design.parse_design``), a rank budget below the cheapest candidate (``rank.candidates_of``), a
``[schedule]`` that does not fit the study's form (``schedule.check_blood_section``).
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.design import parse_design
from uncertainty.analyses.inference.api import check_model
from uncertainty.analyses.propagate import starting_samples
from uncertainty.analyses.propagate.thresholds import threshold_specs
from uncertainty.analyses.rank import MIN_SAMPLES, candidates_of
from uncertainty.analyses.schedule import check_blood_section
from uncertainty.core.errors import InputError
from uncertainty.forms.catalogue import study_outputs


def check_propagate(study: Any) -> None:
    """Raise InputError when ``[propagate]`` max_samples lies below the sample size propagation starts
    from (``samples`` rounded up to a power of two per replicate for qmc, at least 128 a replicate), or a
    threshold names an output the model lacks or a whole-organ value without a tissue mass."""
    sec = getattr(study, "propagate", None)
    if sec is None:
        return
    threshold_specs(study, study_outputs(study))
    if sec.max_samples is None:
        return
    start = starting_samples(sec.samples, sec.method, sec.replicates)
    if sec.max_samples < start:
        raise InputError(f"max_samples is below the sample size propagation starts from ({start:,}: samples "
                         f"rounded up to {sec.replicates} replicates of a power of two, at least 128 each)",
                         file=getattr(study, "file", None), key="propagate.max_samples", value=sec.max_samples)


def check_sections(study: Any) -> None:
    """Raise InputError (file, key, value) when the study's [propagate], [design], [rank], [schedule] or
    [calibrate] section cannot run ([schedule]: keys of the other form's schedule, blood-sampling candidates
    after the timeline's end, more samples than candidates, an unknown target)."""
    check_propagate(study)
    check_blood_section(study)
    if getattr(study, "design", None) is not None:
        parse_design(study)
    rank = getattr(study, "rank", None)
    if rank is not None:
        candidates_of(study)
        start = max(int(getattr(rank, "samples", MIN_SAMPLES) or MIN_SAMPLES), MIN_SAMPLES)
        cap = getattr(rank, "max_samples", None)
        if cap is not None and cap < start:
            raise InputError(f"max_samples is below the draws ranking starts from ({start}: samples, at least "
                             f"{MIN_SAMPLES})", file=getattr(study, "file", None), key="rank.max_samples", value=cap)
    if getattr(study, "calibrate", None) is not None and not getattr(study, "observations", None):
        raise InputError("calibration simulates the study's observations: the study has none",
                         file=getattr(study, "file", None), key="calibrate", value=None)


def check_study(study: Any) -> dict[str, Any] | None:
    """Every check `fluidshift check` runs on a loaded study, shared with the check step of `fluidshift run`
    (called there before the bundle is opened, so a refused study leaves nothing written).

    Parameters
    ----------
    study : Study
        A loaded, schema-valid study.

    Returns
    -------
    dict or None
        With ``[[observations]]`` or ``[infer]``, the summary of the declared (not compiled, not sampled)
        inference model from :func:`uncertainty.analyses.inference.api.check_model`; otherwise None.

    Raises
    ------
    InputError
        (exit 2) A section cannot run or the inference model refuses the study, naming file, key and value.
    """
    check_sections(study)
    if getattr(study, "observations", None) or getattr(study, "infer", None) is not None:
        return check_model(study)
    return None
