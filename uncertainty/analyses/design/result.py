"""The result of :func:`~uncertainty.analyses.design.design`: its JSON document and the curves."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

from uncertainty.analyses.design.figure import plot_design
from uncertainty.analyses.design.report_section import protocol_markdown, section_html
from uncertainty.analyses.design.table import table
from uncertainty.analyses.result import DocumentResult
from uncertainty.core.serialise import jsonable


@dataclass
class DesignResult(DocumentResult):
    """Result of :func:`~uncertainty.analyses.design.design`: the JSON of DESIGN.md section 5 plus the
    curves (canonical units; n per arm, power and assurance dimensionless)."""

    table_file: ClassVar[str] = "design_curve.csv"

    def to_dataframe(self) -> Any:
        """The power / assurance curve as a pandas DataFrame (one row per sample size)."""
        import pandas as pd

        return pd.DataFrame(self.doc["curve"])

    def plot(self, out_dir: str) -> list[str]:
        """Power and assurance curves as figures in ``out_dir``; returns the file paths."""
        return plot_design(self.doc, out_dir)

    def table(self) -> str:
        """The plain-text summary and curve ``fluidshift design`` prints."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))

    def protocol(self) -> str:
        """The protocol-ready sample-size summary in Markdown (assumptions with sources, n enrolled and
        completing, total N, power and assurance with their Monte Carlo errors)."""
        return protocol_markdown(jsonable(self.doc))
