"""The result of :func:`~uncertainty.analyses.scenarios.scenarios`: its JSON document and the paired draws."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, ClassVar

from uncertainty.analyses.result import DocumentResult
from uncertainty.analyses.scenarios.figure import plot_scenarios
from uncertainty.analyses.scenarios.report_section import section_html
from uncertainty.analyses.scenarios.rows import rows
from uncertainty.analyses.scenarios.table import table
from uncertainty.core.serialise import jsonable


@dataclass
class ScenariosResult(DocumentResult):
    """Paired changes per scenario (the JSON document: ``scenarios[].prior.{typical, individual}.<output>``,
    ``scenarios[].posterior.{typical, subjects.<id>}.<output>``, each a change summary in the output's
    canonical unit, ``units``, ``notes``) and the prior draws (``draws[name]["prior"][layer]`` with
    ``inputs``, ``base``, ``scenario``; not in the document)."""

    draws: dict[str, Any] = field(default_factory=dict)

    table_file: ClassVar[str] = "scenarios.csv"

    def to_dataframe(self) -> Any:
        """One row per scenario, source, who and output: median change, 95 % interval, P(<0), P(>0)."""
        import pandas as pd

        return pd.DataFrame(list(rows(self.doc)))

    def plot(self, out_dir: str) -> list[str]:
        """Forest plot of the paired change of Jv per scenario."""
        return plot_scenarios(self.doc, out_dir)

    def table(self) -> str:
        """The plain-text summary of the paired changes."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))
