"""The result of :func:`~uncertainty.analyses.rank.rank`: its JSON document (DESIGN.md section 5)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

from uncertainty.analyses.rank.figure import plot_rank
from uncertainty.analyses.rank.report_section import section_html
from uncertainty.analyses.rank.table import table
from uncertainty.analyses.result import DocumentResult
from uncertainty.core.serialise import jsonable


@dataclass
class RankResult(DocumentResult):
    """Result of :func:`~uncertainty.analyses.rank.rank`: the JSON of DESIGN.md section 5.

    Variances are in the output's unit squared, widths in its unit.
    """

    table_file: ClassVar[str] = "rank.csv"

    def to_dataframe(self) -> Any:
        """One row per single candidate."""
        import pandas as pd

        return pd.DataFrame(self.doc["candidates"])

    def plot(self, out_dir: str) -> list[str]:
        """Bar chart of expected interval narrowing per candidate (and its bound) in ``out_dir``."""
        return plot_rank(self.doc, out_dir)

    def table(self) -> str:
        """The plain-text table ``fluidshift rank`` prints."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))
