"""The result of :func:`~uncertainty.analyses.schedule.schedule`: its JSON document and the cuff model."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

from uncertainty.analyses.result import DocumentResult
from uncertainty.analyses.schedule.blood_result import BloodScheduleResult, is_blood_doc
from uncertainty.analyses.schedule.figure import plot_schedule
from uncertainty.analyses.schedule.report_section import section_html
from uncertainty.analyses.schedule.table import row_labels, table
from uncertainty.core.serialise import jsonable


@dataclass
class ScheduleResult(DocumentResult):
    """Result of :func:`~uncertainty.analyses.schedule.schedule`: the JSON document (pressures mmHg,
    times min, sds in canonical units) and the fitted ``CuffModel`` the figure draws (None when the
    result was rebuilt from its document)."""

    model: Any = None

    table_file: ClassVar[str] = "schedule.csv"

    @classmethod
    def from_dict(cls, doc: dict[str, Any]) -> DocumentResult:
        """The result around a stored document: a :class:`BloodScheduleResult` for a blood-sampling one.

        Parameters
        ----------
        doc : dict
            A ``to_dict()`` of either schedule.

        Returns
        -------
        ScheduleResult or BloodScheduleResult
        """
        return BloodScheduleResult(doc=doc) if is_blood_doc(doc) else cls(doc=doc)

    def to_dataframe(self) -> Any:
        """One row per schedule (optimised, equal spacing): pressures, times, posterior sds."""
        import pandas as pd

        rows = []
        for label in row_labels(self.doc):
            d = self.doc[label]
            rows.append({"schedule": label, "pressures": " ".join(f"{p:g}" for p in d["pressures"]),
                         "times": " ".join(f"{t:g}" for t in d["times"]), "criterion": d["criterion"],
                         **{f"sd_{k}": v for k, v in d["posterior_sd"].items()}})
        return pd.DataFrame(rows)

    def plot(self, out_dir: str) -> list[str]:
        """Protocol and expected limb-volume course with the reading times, optimised vs equal spacing."""
        return plot_schedule(self.doc, self.model, out_dir)

    def table(self) -> str:
        """The plain-text summary ``fluidshift design --schedule`` prints."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))
