"""The result of an inference run: intervals, prior vs posterior, diagnostics, checks.

``to_dict()`` gives the JSON document of DESIGN.md section 5 (``infer``):
``Jv.{mean, sd, ci95, hdi95}`` (the study's individual, or with subject labels the typical subject
of the population), ``typical.Jv``, ``subjects.<id>.Jv``, ``new_subject.Jv``,
``parameters.<param>.{mean, sd, ci95, hdi95, contraction, prior, prior_bound}``,
``diagnostics.{r_hat_max, ess_bulk_min, ess_tail_min, divergences, bfmi_min, passed, failing}``,
``identifiability``, ``checks``, ``notes`` and a ``units`` map. Values are in canonical units.
"""

from __future__ import annotations

import dataclasses
import os
from typing import Any

import numpy as np

#: contraction below which a quantity is reported as prior-bound (common practice: the data
#: leave at least 90% of the prior variance in place).
PRIOR_BOUND_CONTRACTION = 0.1
#: posterior |correlation| above which an (a priori uncorrelated) pair is reported as confounded
#: (common practice).
CONFOUNDED_CORRELATION = 0.7


def summarise(draws: Any, *, hdi: bool = True) -> dict[str, Any]:
    """Mean, sd, equal-tailed 95% interval and 95% highest-density interval of 1-d draws."""
    x = np.asarray(draws, dtype=float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {"mean": float("nan"), "sd": float("nan"), "ci95": [float("nan")] * 2,
                "hdi95": [float("nan")] * 2}
    out = {"mean": float(x.mean()), "sd": float(x.std(ddof=1)) if x.size > 1 else 0.0,
           "ci95": [float(v) for v in np.quantile(x, [0.025, 0.975])]}
    if hdi:
        out["hdi95"] = _hdi(x, 0.95)
    return out


def _hdi(x: np.ndarray, prob: float) -> list[float]:
    """Shortest interval holding ``prob`` of the draws (unimodal HDI, as ArviZ computes it)."""
    s = np.sort(x)
    n = s.size
    k = int(np.floor(prob * n))
    if k < 1 or k >= n:
        return [float(s[0]), float(s[-1])]
    widths = s[k:] - s[: n - k]
    i = int(np.argmin(widths))
    return [float(s[i]), float(s[i + k])]


def flat(idata: Any, name: str, group: str = "posterior") -> np.ndarray:
    """Draws of ``name`` with chain and draw stacked into the first axis."""
    arr = np.asarray(getattr(idata, group)[name].values)
    return arr.reshape((-1,) + arr.shape[2:])


@dataclasses.dataclass
class InferenceResult:
    """Posterior summaries of one study (see the module docstring for the JSON layout)."""

    doc: dict[str, Any]
    idata: Any = None
    built: Any = None
    prior_draws: dict[str, np.ndarray] = dataclasses.field(default_factory=dict)
    new_subject_draws: np.ndarray | None = None
    timing: dict[str, float] = dataclasses.field(default_factory=dict)   # not in to_dict (varies per run)

    @property
    def passed(self) -> bool:
        """True when the quality gate passed."""
        return bool(self.doc["diagnostics"]["passed"])

    def to_dict(self) -> dict[str, Any]:
        """The JSON document (DESIGN.md section 5, ``infer``)."""
        return self.doc

    def to_dataframe(self) -> Any:
        """One row per quantity: prior and posterior mean, sd, 95% interval and contraction."""
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
        """Write posterior.nc (ArviZ netCDF), inference.json and inference.csv into ``out_dir``."""
        from uncertainty.app.commands.common import to_json

        os.makedirs(out_dir, exist_ok=True)
        paths = {}
        if self.idata is not None:
            paths["posterior"] = os.path.join(out_dir, "posterior.nc")
            self.idata.to_netcdf(paths["posterior"])
        paths["json"] = os.path.join(out_dir, "inference.json")
        with open(paths["json"], "w", encoding="utf-8") as fh:
            fh.write(to_json(self.doc))
        paths["table"] = os.path.join(out_dir, "inference.csv")
        self.to_dataframe().to_csv(paths["table"], index=False)
        return paths

    def plot(self, out_dir: str) -> list[str]:
        """Figures: prior vs posterior per quantity, Jv per subject, posterior predictive overlay."""
        from uncertainty.analyses import inference as fig

        return fig.plot_all(self, out_dir)
