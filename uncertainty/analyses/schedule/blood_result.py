"""The result of :func:`~uncertainty.analyses.schedule.blood.blood_schedule`: its JSON document."""

from __future__ import annotations

from typing import Any, ClassVar

from uncertainty.analyses.result import DocumentResult
from uncertainty.analyses.schedule.blood_figure import plot_blood_schedule
from uncertainty.analyses.schedule.blood_report import KIND, is_blood_doc, section_html, table
from uncertainty.core.serialise import jsonable


class BloodScheduleResult(DocumentResult):
    """Blood-sampling times of a ``whole_body`` study: the JSON document (times min, sds in the target's unit)."""

    table_file: ClassVar[str] = "schedule.csv"

    def to_dataframe(self) -> Any:
        """One row per schedule (optimised, equal spacing): times (min), criterion, the target's posterior sd."""
        import pandas as pd

        rows = []
        for label in ("optimised", "equal_spacing"):
            d = self.doc[label]
            rows.append({"schedule": label, "times": " ".join(f"{t:g}" for t in d["times"]),
                         "criterion": d["criterion"],
                         **{f"sd_{k}": v for k, v in d["posterior_sd"].items()}})
        return pd.DataFrame(rows)

    def plot(self, out_dir: str) -> list[str]:
        """The prior haemoglobin-ratio band with the chosen times, and the target's sd against the samples."""
        return plot_blood_schedule(self.doc, out_dir)

    def table(self) -> str:
        """The plain-text summary ``fluidshift design --schedule`` prints."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))



__all__ = ["KIND", "BloodScheduleResult", "is_blood_doc"]
