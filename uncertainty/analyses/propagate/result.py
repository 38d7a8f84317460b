"""The result of :func:`~uncertainty.analyses.propagate.propagate`: summaries per layer and output."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from uncertainty.analyses.propagate.figure import plot_distribution, plot_timeline
from uncertainty.analyses.propagate.report_section import section_html
from uncertainty.analyses.propagate.table import table
from uncertainty.analyses.result import Result
from uncertainty.core.serialise import jsonable


@dataclass
class Summary:
    """Distribution summary of one output in one layer, with Monte Carlo standard errors.

    Values are in the output's canonical unit (``unit``). ``mc_se`` holds the standard error of
    ``mean``, ``sd``, ``median`` and of each end of ``ci95`` (from R replicates); ``p_negative``
    is P(output < 0); ``n`` counts finite draws, ``nan_draws`` the non-finite ones left out.
    """

    name: str
    unit: str
    mean: float
    sd: float
    median: float
    ci95: tuple[float, float]
    mc_se: dict[str, Any]
    p_negative: float
    p_negative_se: float
    n: int
    nan_draws: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict: mean, sd, median, ci95, mc_se (DESIGN.md section 5) plus extras."""
        return {"mean": self.mean, "sd": self.sd, "median": self.median, "ci95": list(self.ci95),
                "mc_se": self.mc_se, "p_negative": self.p_negative, "unit": self.unit,
                "n": self.n, "nan_draws": self.nan_draws}



@dataclass
class PropagateResult(Result):
    """Forward-uncertainty result: summaries and draws per layer and output, names and units.

    ``summaries[layer][output]`` is a :class:`Summary`; ``draws[layer][output]`` the pooled draws
    (canonical units, non-finite draws kept as NaN); ``units[output]`` the canonical unit;
    :meth:`to_xarray` gives the draws as one labelled Dataset (names, units, replicate labels).
    """

    method: str
    samples: int
    replicates: int
    seed: Any
    outputs: list[str]
    units: dict[str, str]
    summaries: dict[str, dict[str, Summary]]
    draws: dict[str, dict[str, np.ndarray]]
    notes: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    flags: list[dict[str, Any]] = field(default_factory=list)
    tol: float | None = None
    converged: bool | None = None
    history: list[dict[str, Any]] = field(default_factory=list)
    study: dict[str, Any] = field(default_factory=dict)
    timeline: dict[str, Any] | None = None  # whole_body form: time courses (analyses.propagate.timeline)
    thresholds: list[dict[str, Any]] = field(default_factory=list)

    table_file: ClassVar[str] = "propagate_summary.csv"
    table_index: ClassVar[bool] = True
    saved_note: ClassVar[str | None] = "tables and figures written to {out}"

    @property
    def p_absorption(self) -> float:
        """P(Jv < 0) for the study's individual (both layers of uncertainty)."""
        return self.summaries["individual"]["Jv"].p_negative if "Jv" in self.summaries["individual"] \
            else float("nan")

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of DESIGN.md section 5 (``outputs``, ``typical``, ``p_absorption``)."""
        ind, typ = self.summaries["individual"], self.summaries["typical"]
        doc: dict[str, Any] = {
            "outputs": {k: ind[k].to_dict() for k in self.outputs},
            "typical": {k: typ[k].to_dict() for k in self.outputs},
        }
        if "Jv" in ind:
            doc["p_absorption"] = ind["Jv"].p_negative
            doc["p_absorption_mc_se"] = ind["Jv"].p_negative_se
            doc["typical_p_absorption"] = typ["Jv"].p_negative
        doc.update({
            "units": {k: self.units.get(k, "") for k in self.outputs},
            "method": self.method, "samples": self.samples, "replicates": self.replicates,
            "seed": self.seed,
            "nan_draws": {layer: {k: s.nan_draws for k, s in self.summaries[layer].items()}
                          for layer in ("individual", "typical")},
            "tol": self.tol, "converged": self.converged, "history": self.history,
            "notes": self.notes, "warnings": self.warnings, "flags": self.flags, "study": self.study,
        })
        if self.timeline is not None:
            doc["timeline"] = self.timeline
        if self.thresholds:  # threshold questions ([propagate] thresholds), only when asked
            doc["thresholds"] = self.thresholds
        return doc

    def to_dataframe(self) -> Any:
        """A pandas DataFrame, one row per (layer, output), columns for each statistic and SE."""
        import pandas as pd

        rows = []
        for layer in ("individual", "typical"):
            for k in self.outputs:
                s = self.summaries[layer][k]
                rows.append({"layer": layer, "output": k, "unit": s.unit, "mean": s.mean, "sd": s.sd,
                             "median": s.median, "ci95_low": s.ci95[0], "ci95_high": s.ci95[1],
                             "mc_se_mean": s.mc_se["mean"], "mc_se_ci95_low": s.mc_se["ci95"][0],
                             "mc_se_ci95_high": s.mc_se["ci95"][1], "p_negative": s.p_negative,
                             "n": s.n, "nan_draws": s.nan_draws})
        return pd.DataFrame(rows).set_index(["layer", "output"])

    def to_xarray(self) -> Any:
        """The draws as a labelled ``xarray.Dataset``: one variable per output over the dimensions
        ``layer`` (individual, typical) and ``draw``, its canonical unit in ``attrs["units"]``; the
        coordinate ``replicate`` says which independent replicate each draw belongs to (non-finite
        draws kept as NaN)."""
        import xarray as xr

        layers = ["individual", "typical"]
        # pooled draws are replicate after replicate (propagate_arrays), each samples / R long
        replicate = np.repeat(np.arange(self.replicates), self.samples // self.replicates)
        data = {name: (("layer", "draw"), np.vstack([self.draws[layer][name] for layer in layers]),
                       {"units": self.units.get(name, "")}) for name in self.outputs}
        return xr.Dataset(data, coords={"layer": layers, "draw": np.arange(self.samples),
                                        "replicate": ("draw", replicate)},
                          attrs={"method": self.method, "samples": self.samples,
                                 "replicates": self.replicates, "seed": str(self.seed)})

    def plot(self, out_dir: str) -> list[str]:
        """Write the Jv distribution figure (individual beside typical) as PNG and SVG, and with a timeline
        the fan charts of the time courses; paths."""
        paths = plot_distribution(self, out_dir)
        if self.timeline is not None:
            paths += plot_timeline(self.timeline, out_dir)
        return paths

    def table(self) -> str:
        """The plain-text table ``fluidshift propagate`` prints."""
        return table(self.to_dict())

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.to_dict()))

    @classmethod
    def from_dict(cls, doc: dict[str, Any]) -> PropagateResult:
        """The result rebuilt from its ``to_dict()``; the draws are not stored there, so they are empty.

        Parameters
        ----------
        doc : dict
            A ``to_dict()`` (or the propagate section's ``result`` in results.json).

        Returns
        -------
        PropagateResult
            A result whose ``to_dict()`` gives ``doc`` back.
        """
        outputs = list(doc["outputs"])
        summaries: dict[str, dict[str, Summary]] = {}
        for layer, key in (("individual", "outputs"), ("typical", "typical")):
            summaries[layer] = {}
            for name in outputs:
                s = doc[key][name]
                se = doc.get("p_absorption_mc_se") if (layer, name) == ("individual", "Jv") else float("nan")
                summaries[layer][name] = Summary(
                    name=name, unit=s["unit"], mean=s["mean"], sd=s["sd"], median=s["median"],
                    ci95=tuple(s["ci95"]), mc_se=s["mc_se"], p_negative=s["p_negative"], p_negative_se=se,
                    n=s["n"], nan_draws=s["nan_draws"])
        return cls(method=doc["method"], samples=doc["samples"], replicates=doc["replicates"], seed=doc["seed"],
                   outputs=outputs, units=dict(doc["units"]), summaries=summaries, draws={},
                   notes=list(doc["notes"]), warnings=list(doc["warnings"]), flags=list(doc["flags"]), tol=doc["tol"],
                   converged=doc["converged"], history=list(doc["history"]), study=dict(doc["study"]),
                   timeline=doc.get("timeline"), thresholds=list(doc.get("thresholds") or []))
