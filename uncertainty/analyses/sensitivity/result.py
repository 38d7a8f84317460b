"""The result of :func:`~uncertainty.analyses.sensitivity.sensitivity`: indices, ranking, convergence."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, ClassVar

from uncertainty.analyses.result import Result
from uncertainty.analyses.sensitivity.figure import plot_indices, plot_over_time
from uncertainty.analyses.sensitivity.report_section import section_html
from uncertainty.analyses.sensitivity.table import table
from uncertainty.core.serialise import jsonable


@dataclass
class SensitivityResult(Result):
    """Indices per player with intervals, a ranking, a convergence table, warnings and notes.

    ``indices[player]`` holds, by method: Sobol' ``S1, S1_ci, ST, ST_ci`` (+ ``S1_se, ST_se``);
    Morris ``mu_star, mu_star_ci, sigma, mu``; Shapley ``Sh, Sh_ci`` plus the full first-order
    ``S1`` and the total ``ST`` under dependence, each with ``_ci``. Intervals are 95%.
    ``convergence`` rows ``{samples, evaluations, indices}`` at doubling sample sizes: prefixes of
    each scrambled design (Sobol'), the first R/4, R/2, R replicates (Shapley), the first T/4, T/2,
    T trajectories (Morris). With a tolerance (Sobol'): ``tol`` (dimensionless), ``converged`` and
    ``history`` rows ``{samples, evaluations, widest_half_width, widest}``, one per base sample tried.
    """

    method: str
    output: str
    unit: str
    players: list[str]
    indices: dict[str, dict[str, Any]]
    ranking: list[str]
    samples: int
    evaluations: int
    replicates: int
    convergence: list[dict[str, Any]] = field(default_factory=list)
    second_order: dict[str, dict[str, Any]] | None = None
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    nan_draws: int = 0
    layer: str | None = None
    seed: Any = None
    study: dict[str, Any] = field(default_factory=dict)
    tol: float | None = None
    converged: bool | None = None
    history: list[dict[str, Any]] = field(default_factory=list)
    over_time: dict[str, Any] | None = None

    table_file: ClassVar[str] = "sensitivity_{output}.csv"
    table_index: ClassVar[bool] = True
    saved_note: ClassVar[str | None] = "tables and figures written to {out}"

    @property
    def rank_key(self) -> str:
        """The index the ranking sorts by."""
        return {"sobol": "ST", "morris": "mu_star", "shapley": "Sh"}[self.method]

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of DESIGN.md section 5 (method, output, indices, ranking) plus extras."""
        doc: dict[str, Any] = {"method": self.method, "output": self.output, "indices": self.indices,
                               "ranking": self.ranking, "ranked_by": self.rank_key, "unit": self.unit,
                               "layer": self.layer, "samples": self.samples,
                               "evaluations": self.evaluations, "replicates": self.replicates,
                               "seed": self.seed, "nan_draws": self.nan_draws,
                               "convergence": self.convergence, "warnings": self.warnings,
                               "notes": self.notes, "study": self.study}
        if self.second_order is not None:
            doc["second_order"] = self.second_order
        if self.tol is not None:  # precision on demand: the tolerance, whether it was met, each size tried
            doc.update({"tol": self.tol, "converged": self.converged, "history": self.history})
        if self.over_time is not None:  # "NAME over time": times_min, key, indices[player][index] per time
            doc["over_time"] = self.over_time
        return doc

    def to_dataframe(self) -> Any:
        """A pandas DataFrame, one row per player, flattened index columns, in ranking order."""
        import pandas as pd

        rows = []
        for p in self.ranking:
            row: dict[str, Any] = {"parameter": p}
            for key, v in self.indices[p].items():
                if isinstance(v, list | tuple):
                    row[f"{key}_low"], row[f"{key}_high"] = v
                else:
                    row[key] = v
            rows.append(row)
        return pd.DataFrame(rows).set_index("parameter")

    def plot(self, out_dir: str) -> list[str]:
        """Write index bars with interval whiskers (and convergence, when present; indices against time for
        ``NAME over time``); PNG and SVG."""
        paths = plot_indices(self, out_dir)
        if self.over_time is not None:
            paths += plot_over_time(self, out_dir)
        return paths

    def table(self) -> str:
        """The plain-text table ``fluidshift sensitivity`` prints."""
        return table(self.to_dict())

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.to_dict()))

    @classmethod
    def from_dict(cls, doc: dict[str, Any]) -> SensitivityResult:
        """The result rebuilt from its ``to_dict()``.

        Parameters
        ----------
        doc : dict
            A ``to_dict()`` (or the sensitivity section's ``result`` in results.json).

        Returns
        -------
        SensitivityResult
            A result whose ``to_dict()`` gives ``doc`` back.
        """
        return cls(method=doc["method"], output=doc["output"], unit=doc["unit"], players=list(doc["indices"]),
                   indices=doc["indices"], ranking=list(doc["ranking"]), samples=doc["samples"],
                   evaluations=doc["evaluations"], replicates=doc["replicates"],
                   convergence=list(doc["convergence"]), second_order=doc.get("second_order"),
                   warnings=list(doc["warnings"]), notes=list(doc["notes"]), nan_draws=doc["nan_draws"],
                   layer=doc["layer"], seed=doc["seed"], study=dict(doc["study"]), tol=doc.get("tol"),
                   converged=doc.get("converged"), history=list(doc.get("history") or []),
                   over_time=doc.get("over_time"))
