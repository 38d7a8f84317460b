"""The validation section of a whole-study run: the shipped rows of a study's tissue and model form beside the
form's predictions (the report's answer to how far the form can be trusted in which conditions)."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.validation import ValidationRow, load_table, validate
from uncertainty.analyses.validation.result import FormValidationResult
from uncertainty.core.errors import StudyError


def study_rows(study: Any) -> list[ValidationRow]:
    """The shipped rows of a study's tissue and model form (none for a study without a tissue or form).

    Parameters
    ----------
    study : Study
        Any object with ``tissue`` and ``model`` attributes (a stand-in without them has no rows).

    Returns
    -------
    list of ValidationRow
    """
    tissue, form = getattr(study, "tissue", None), getattr(study, "model", None)
    if not isinstance(tissue, str) or not isinstance(form, str):
        return []
    return load_table(tissue=tissue, form=form)


def validate_study(study: Any, seed: int | None = None) -> FormValidationResult:
    """The published measurements of a study's tissue and model form beside the form's predictions, with the
    shipped priors (not the study's own) for the typical subject, as ``fluidshift validate --tissue T --form F``
    gives them: the report's section on how far the form can be trusted in which conditions.

    Parameters
    ----------
    study : Study
        The study (its ``tissue`` and ``model``).
    seed : int, optional
        Ignored: every row runs at :data:`DEFAULT_SEED`, so the section repeats the table's numbers.

    Returns
    -------
    FormValidationResult
        Its document: :meth:`ValidationResult.to_dict` plus ``tissue`` and ``form``.

    Raises
    ------
    StudyError
        No row for the study's tissue and form.
    """
    if not study_rows(study):
        raise StudyError("no validation rows for this tissue and model form", key="study.model",
                         value=getattr(study, "model", None))
    doc = validate(study.tissue, form=study.model).to_dict()
    return FormValidationResult(doc={**doc, "tissue": study.tissue, "form": study.model})
