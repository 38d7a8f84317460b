"""The result of :func:`~uncertainty.analyses.calibrate.calibrate`: its JSON document and rank histograms."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

from uncertainty.analyses.calibrate.figure import plot_ranks
from uncertainty.analyses.calibrate.table import rows, section_html, table
from uncertainty.analyses.result import DocumentResult
from uncertainty.core.serialise import jsonable


@dataclass
class CalibrationResult(DocumentResult):
    """Result of a simulation-based calibration: per quantity the ranks (0..L), bin counts, the
    chi-square p-value, the 90 % coverage count and a verdict; the failed replicates (canonical units)."""

    table_file: ClassVar[str] = "calibration.csv"
    saved_note: ClassVar[str | None] = "table and rank histograms written to {out}"

    def to_dataframe(self) -> Any:
        """One row per quantity (the text table's columns)."""
        import pandas as pd

        return pd.DataFrame(rows(self.doc))

    def plot(self, out_dir: str) -> list[str]:
        """Rank histograms with the 99 % band of a uniform histogram; returns the file paths."""
        return plot_ranks(self.doc, out_dir)

    def table(self) -> str:
        """The plain-text summary ``fluidshift calibrate`` prints."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of an HTML report."""
        return section_html(jsonable(self.doc))
