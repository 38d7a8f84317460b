"""Calibration's part of report.html and of the one-screen summary, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.calibrate.table import section_html
from uncertainty.analyses.result import Caption

CAPTIONS: tuple[Caption, ...] = (
    ("rank_histograms", "", "For each quantity, how the ranks of the true values among the posterior draws of the "
                            "refits spread over the bins: a calibrated posterior gives flat bars inside the grey "
                            "99 % band of a uniform histogram; a U shape says intervals too narrow, a hump too "
                            "wide, a slope a shifted posterior."),
)


def summary(doc: dict[str, Any]) -> list[str]:
    """One-screen summary line: the calibration's verdict.

    Parameters
    ----------
    doc : dict
        The stored ``CalibrationResult.to_dict()``.

    Returns
    -------
    list of str
        One line, or none without a verdict.
    """
    verdict = doc.get("verdict")
    if not verdict:
        return []
    return [f"Calibration ({doc.get('replicates_used')} of {doc.get('replicates')} refits used): {verdict}"]


__all__ = ["CAPTIONS", "section_html", "summary"]
