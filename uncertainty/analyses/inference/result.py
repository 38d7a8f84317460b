"""The result of an inference run: intervals, prior vs posterior, diagnostics, checks.

``to_dict()`` gives the JSON document of DESIGN.md section 5 (``infer``):
``Jv.{mean, sd, ci95, hdi95}`` (the study's individual, or with subject labels the typical subject
of the population), ``typical.Jv``, ``subjects.<id>.Jv``, ``new_subject.Jv``,
``parameters.<param>.{mean, sd, ci95, hdi95, contraction, prior, prior_bound}``,
``diagnostics.{r_hat_max, ess_bulk_min, ess_tail_min, divergences, bfmi_min, passed, failing}``,
``identifiability``, ``checks``, ``notes`` and a ``units`` map. The answers (``answers.py``): with
subjects, ``subject_quantities`` (the quantities with a subject layer), ``subjects.<id>.<quantity>``
for each of them, ``typical.<quantity>`` and ``new_subject.<quantity>``, ``cohort_total`` (whole-tissue
Jv in mL/h and L/day summed over the subjects, with ``tissue_mass``) and ``group_effects`` (rows:
quantity, group, reference, measure, of, estimate, ci95, direction, p_direction, unit); for the study's
one individual, ``individual.<quantity>``. Values are in canonical units. ``posterior_sensitivity``
(``posterior_sensitivity.py``): first-order given-data indices of Jv (reported level, ``Jv``, and a new
subject, ``new_subject``) on posterior and on prior draws, ``{quantity: {S1, se}}``, with a ranking.
"""

from __future__ import annotations

import dataclasses
import os
from typing import Any, ClassVar

import numpy as np

from uncertainty.analyses.inference import answers_table
from uncertainty.analyses.inference.figure import plot_all
from uncertainty.analyses.inference.report_section import section_html
from uncertainty.analyses.inference.table import table
from uncertainty.analyses.result import DocumentResult
from uncertainty.core.serialise import jsonable, to_json


@dataclasses.dataclass
class InferenceResult(DocumentResult):
    """Posterior summaries of one study (see the module docstring for the JSON layout)."""

    idata: Any = None
    built: Any = None
    prior_draws: dict[str, np.ndarray] = dataclasses.field(default_factory=dict)
    new_subject_draws: np.ndarray | None = None
    timing: dict[str, float] = dataclasses.field(default_factory=dict)   # not in to_dict (varies per run)

    saved_note: ClassVar[str | None] = "posterior.nc, tables and figures written to {out}"
    #: file-name prefix of everything ``save`` and ``plot`` write when the quality gate failed
    failed_prefix: ClassVar[str] = "GATE-FAILED_"

    def _flag(self) -> str:
        return "" if self.passed else self.failed_prefix

    @property
    def passed(self) -> bool:
        """True when the quality gate passed."""
        return bool(self.doc["diagnostics"]["passed"])

    def to_dataframe(self) -> Any:
        """Tidy tables, one per kind of row: ``""`` (one row per quantity: prior and posterior mean, sd,
        95% interval and contraction; Jv per level and subject), ``subjects`` (subject x subject-level
        quantity), ``cohort`` (typical subject, new subject, cohort total or the study's individual x
        quantity) and ``group_effects``; the last three only when the result has them. Each row names
        its unit (per-tissue quantities per 100 g; whole-tissue flows mL/h, L/day)."""
        import pandas as pd

        frames = {"": self._main_frame()}
        for key, rows in (("subjects", answers_table.subject_rows(self.doc)),
                          ("cohort", answers_table.cohort_rows(self.doc)),
                          ("group_effects", answers_table.effect_rows(self.doc))):
            if rows:
                frames[key] = pd.DataFrame(rows)
        return frames

    def _main_frame(self) -> Any:
        import pandas as pd

        rows = []
        for name, p in self.doc["parameters"].items():
            rows.append({"quantity": name, "unit": self.doc["units"].get(name, ""),
                         "prior_mean": p["prior"]["mean"], "prior_sd": p["prior"]["sd"],
                         "post_mean": p["mean"], "post_sd": p["sd"], "ci95_low": p["ci95"][0],
                         "ci95_high": p["ci95"][1], "contraction": p["contraction"],
                         "prior_bound": p["prior_bound"]})
        for label, block in (("Jv", self.doc["Jv"]), ("Jv typical", self.doc["typical"]["Jv"]),
                             ("Jv new subject", self.doc["new_subject"]["Jv"])):
            rows.append({"quantity": label, "unit": self.doc["units"]["Jv"], "post_mean": block["mean"],
                         "post_sd": block["sd"], "ci95_low": block["ci95"][0],
                         "ci95_high": block["ci95"][1]})
        for sid, block in self.doc["subjects"].items():
            rows.append({"quantity": f"Jv subject {sid}", "unit": self.doc["units"]["Jv"],
                         "post_mean": block["Jv"]["mean"], "post_sd": block["Jv"]["sd"],
                         "ci95_low": block["Jv"]["ci95"][0], "ci95_high": block["Jv"]["ci95"][1]})
        return pd.DataFrame(rows)

    def save(self, out_dir: str) -> dict[str, str]:
        """Write posterior.nc (ArviZ netCDF), inference.json, inference.csv and inference-<table>.csv (the
        answers' tidy tables) into ``out_dir``; each name starts with :attr:`failed_prefix` when the
        quality gate failed."""
        os.makedirs(out_dir, exist_ok=True)
        paths = {}
        flag = self._flag()
        if self.idata is not None:
            paths["posterior"] = os.path.join(out_dir, f"{flag}posterior.nc")
            self.idata.to_netcdf(paths["posterior"])
        paths["json"] = os.path.join(out_dir, f"{flag}inference.json")
        with open(paths["json"], "w", encoding="utf-8") as fh:
            fh.write(to_json(self.doc))
        for key, frame in self.to_dataframe().items():
            name = "table" if not key else key
            paths[name] = os.path.join(out_dir, f"{flag}inference.csv" if not key else f"{flag}inference-{key}.csv")
            frame.to_csv(paths[name], index=False)
        return paths

    def plot(self, out_dir: str) -> list[str]:
        """Figures: prior vs posterior per quantity, Jv per subject, posterior predictive overlay (names
        starting with :attr:`failed_prefix` when the quality gate failed)."""
        paths = plot_all(self, out_dir)
        if self.passed:
            return paths
        flagged = []
        for path in paths:
            new = os.path.join(os.path.dirname(path), self.failed_prefix + os.path.basename(path))
            os.replace(path, new)
            flagged.append(new)
        return flagged

    def table(self) -> str:
        """The plain-text summary ``fluidshift infer`` prints."""
        return table(self.doc)

    def html_section(self) -> str:
        """This result's section of report.html."""
        return section_html(jsonable(self.doc))
