"""The result of :func:`~uncertainty.analyses.validation.validate_study`: the published measurements of a study's
tissue and model form beside the form's predictions (its JSON document)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

from uncertainty.analyses.result import DocumentResult
from uncertainty.analyses.validation.figure import plot_validation
from uncertainty.analyses.validation.report_section import section_html, text_table
from uncertainty.core.serialise import jsonable

#: The CSV columns, in order (each row of the document keeps more).
COLUMNS = ("id", "quantity", "conditions_text", "low", "high", "unit", "median", "ci95_low", "ci95_high",
           "verdict", "kind", "source", "known_gap")


@dataclass
class FormValidationResult(DocumentResult):
    """Rows of the validation table for one tissue and model form (the document of
    ``ValidationResult.to_dict``: ``rows[]`` with band, median, 95 % interval and verdict, ``counts``, ``samples``,
    ``seed``, plus ``tissue`` and ``form``)."""

    table_file: ClassVar[str] = "validation.csv"

    def to_dataframe(self) -> Any:
        """One line per published measurement: band, the form's median and 95 % interval, verdict, source."""
        import pandas as pd

        rows = [{**r, "ci95_low": (r.get("ci95") or [None, None])[0], "ci95_high": (r.get("ci95") or [None, None])[1]}
                for r in self.doc.get("rows", [])]
        return pd.DataFrame([{c: r.get(c) for c in COLUMNS} for r in rows], columns=list(COLUMNS))

    def plot(self, out_dir: str) -> list[str]:
        """One small panel per published measurement: its band beside the form's median and 95 % interval."""
        return plot_validation(self.doc, out_dir)

    def table(self) -> str:
        """The plain-text table of the rows and their verdicts."""
        return text_table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))
