"""Validation against published measurements: the shipped table beside the model's predictions.

Each row of ``priors/validation.toml`` names a quantity (an output of the study's model form, a derived
quantity, or an input prior), the tissue, conditions and model form it refers to, a published value or band
(``low``, ``high``, ``unit``) and its full source. For each row a study is built in memory
(:meth:`uncertainty.study.Study.from_dict`), propagated for the typical subject
(:func:`uncertainty.analyses.propagate.propagate`), and the median and 95 % interval of the quantity are
set beside the band. The verdict is ``inside`` (the median lies in the band), ``outside``, or
``known gap`` for a row the table marks with ``known_gap = "reason"``.

Rows are never met by tuning: a row the model misses stays, marked as a known gap with its reason.
``kind`` says how independent the comparison is: ``prediction`` (a quantity the form computes from
priors that were not set from this row's source), ``input`` (a prior itself, checked against a
published value) or ``calibration`` (a prior was set so that this output meets this source; agreement
there is by construction and says only that the calibration still holds).

Quantities: one name (``"pi_i"``), or two names joined by `` - `` or `` / `` (``"pi_c - pi_i"``), taken
draw by draw from one run. A ``whole_body`` row gives its experiment as a study does (``interventions``,
``timeline``, ``body_mass``) and reads a time course at a time (``"infused_retained_fraction at 30 min"``, the
endpoints of ``study.endpoints``) or its largest value over the timeline (``"peak plasma_volume_change"``).
With ``reference = { ... }`` the quantity is compared with a second run of the same row under other conditions
or parameters (``op = "difference"`` or ``"ratio"``): draws are paired when both runs sample the same inputs,
otherwise only the medians are compared.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from uncertainty.analyses.propagate import propagate
from uncertainty.analyses.propagate.timeline import courses_at, values_at
from uncertainty.analyses.sampling import draw
from uncertainty.core.errors import InputError, StudyError
from uncertainty.core.resources import priors_dir
from uncertainty.forms.catalogue import output_unit
from uncertainty.physiology.whole_body import TIMELINE_UNITS
from uncertainty.study import Study
from uncertainty.study.endpoints import is_time_endpoint, parse_time_endpoint

#: File name of the table inside the shipped priors folder.
TABLE_FILE = "validation.toml"

#: Default draws per row (16 replicates of 128 scrambled Sobol' points) and the fixed seed, so that
#: the table, the command and docs/validation.md give the same numbers on every run.
DEFAULT_SAMPLES = 2048
DEFAULT_SEED = 20150

KINDS = ("prediction", "input", "calibration")
VERDICTS = ("inside", "outside", "known gap")
_OPS = {" - ": "difference", " / ": "ratio"}
_ROW_KEYS = {"id", "quantity", "tissue", "model", "conditions", "low", "high", "unit", "value", "origin",
             "band", "kind", "known_gap", "parameters", "tissue_mass", "posture_height", "reference",
             "setting", "note", "interventions", "timeline", "body_mass"}
#: A whole-body row's quantity ``"peak NAME"``: the time course's largest value over the timeline.
PEAK = "peak "


@dataclass(frozen=True)
class ValidationRow:
    """One published measurement and the study that should reproduce it.

    Attributes:
        id: a unique short name (``tissue.quantity.detail``).
        quantity: an output or input name, or ``"A - B"`` / ``"A / B"`` of two of them.
        tissue, model, conditions: the study's ``[study]`` tissue, model form and condition list.
        low, high: the published band in ``unit`` (``high`` may be ``inf`` for a one-sided band).
        unit: the quantity's canonical unit (``"1"`` for ratios).
        value: the published central value, if one was reported (same unit).
        source: the row's ``origin`` in the file: authors, year, journal or book, volume:page, and what was
            read (abstract, table), as every number in the priors folder names its origin.
        band: how the band follows from the source (mean +/- SD, the reported range, a judgement).
        kind: ``prediction``, ``input`` or ``calibration`` (module docstring).
        known_gap: why the model cannot yet meet the row ("" when it should).
        parameters: ``[parameters]`` overrides of the study (fixed settings of the experiment).
        setting: where the settings (parameters, tissue mass, posture height) come from.
        tissue_mass, posture_height: ``[study]`` keys, as strings with units.
        reference: a second run to compare with: ``conditions``, ``parameters``, ``op``.
        note: anything else a reader should know.
        interventions, timeline, body_mass: a ``whole_body`` row's experiment, as the study file gives them.
    """

    id: str
    quantity: str
    tissue: str
    model: str
    low: float
    high: float
    unit: str
    source: str
    band: str
    kind: str = "prediction"
    conditions: tuple[str, ...] = ()
    value: float | None = None
    known_gap: str = ""
    parameters: Mapping[str, Any] = field(default_factory=dict)
    setting: str = ""
    tissue_mass: str | None = None
    posture_height: str | None = None
    reference: Mapping[str, Any] | None = None
    note: str = ""
    interventions: tuple[Mapping[str, Any], ...] = ()
    timeline: Mapping[str, Any] | None = None
    body_mass: str | None = None

    @property
    def group(self) -> str:
        """Where the docs list the row: ``whole body`` for the whole-body form's rows, else the tissue."""
        return "whole body" if self.model == "whole_body" else self.tissue

    @property
    def terms(self) -> tuple[str, str | None, str | None]:
        """(first name, "difference" | "ratio" | None, second name or None) of :attr:`quantity`."""
        for sep, op in _OPS.items():
            if sep in self.quantity:
                a, b = (s.strip() for s in self.quantity.split(sep, 1))
                return a, op, b
        return self.quantity.strip(), None, None

    def study_document(self, seed: int = DEFAULT_SEED, *, reference: bool = False) -> dict[str, Any]:
        """The study document (as read from TOML) for this row, or for its reference run.

        Parameters
        ----------
        seed : int
            The study's seed.
        reference : bool
            Build the reference run (``self.reference`` conditions and parameters) instead.

        Returns
        -------
        dict
            ``{"study": {...}, "parameters": {...}}`` for :meth:`Study.from_dict`.
        """
        ref = dict(self.reference or {}) if reference else {}
        conditions = list(ref.get("conditions", self.conditions))
        params = dict(ref.get("parameters", self.parameters))
        head: dict[str, Any] = {"title": f"validation row {self.id}" + (" (reference)" if reference else ""),
                                "tissue": self.tissue, "model": self.model, "conditions": conditions,
                                "seed": int(seed)}
        if self.tissue_mass is not None:
            head["tissue_mass"] = self.tissue_mass
        if self.posture_height is not None and "posture" in conditions:
            head["posture_height"] = self.posture_height
        if self.body_mass is not None:
            head["body_mass"] = self.body_mass
        doc: dict[str, Any] = {"study": head}
        if self.interventions:
            doc["interventions"] = [dict(d) for d in self.interventions]
        if self.timeline is not None:
            doc["timeline"] = dict(self.timeline)
        if params:
            origin = self.setting or f"setting of validation row {self.id}"
            doc["parameters"] = {k: ({**v, "origin": v.get("origin", origin)} if isinstance(v, Mapping) else v)
                                 for k, v in params.items()}
        return doc


@dataclass
class RowResult:
    """A row beside the model's prediction (typical subject).

    ``median`` and ``ci95`` are in the row's unit (NaN when the model could not give the quantity, with
    the reason in ``error``); ``verdict`` is one of :data:`VERDICTS`; ``paired`` says whether a reference
    contrast was taken draw by draw (True) or from the two medians (False; no interval then).
    """

    row: ValidationRow
    median: float
    ci95: tuple[float, float]
    verdict: str
    inside: bool
    paired: bool | None = None
    error: str = ""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready row: the table's fields, the prediction and the verdict."""
        r = self.row
        return {"id": r.id, "quantity": r.quantity, "tissue": r.tissue, "model": r.model,
                "conditions": list(r.conditions), "conditions_text": _conditions(r), "unit": r.unit, "low": r.low,
                "high": r.high if math.isfinite(r.high) else None, "value": r.value, "source": r.source,
                "band": r.band, "kind": r.kind, "known_gap": r.known_gap or None,
                "setting": r.setting or None, "parameters": dict(r.parameters) or None,
                "reference": dict(r.reference) if r.reference else None,
                "median": self.median, "ci95": list(self.ci95), "inside": self.inside,
                "verdict": self.verdict, "paired": self.paired, "error": self.error or None}


@dataclass
class ValidationResult:
    """Every row's prediction and verdict, with the settings that produced them."""

    rows: list[RowResult]
    samples: int
    seed: int
    table: str

    def counts(self) -> dict[str, int]:
        """Number of rows per verdict (``inside``, ``outside``, ``known gap``)."""
        return {v: sum(1 for r in self.rows if r.verdict == v) for v in VERDICTS}

    def closed_gaps(self) -> list[str]:
        """Ids of rows marked as known gaps whose median now lies inside the band (remove the mark)."""
        return [r.row.id for r in self.rows if r.row.known_gap and r.inside]

    def to_dict(self) -> dict[str, Any]:
        """JSON document: ``rows`` (see :meth:`RowResult.to_dict`), ``counts``, ``samples``, ``seed``."""
        return {"rows": [r.to_dict() for r in self.rows], "counts": self.counts(),
                "closed_gaps": self.closed_gaps(), "samples": self.samples, "seed": self.seed,
                "layer": "typical", "table": self.table}


# --------------------------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------------------------

def table_path() -> Path:
    """Path of the shipped table (``validation.toml`` in the priors folder)."""
    return priors_dir() / TABLE_FILE


def _number(raw: Any, key: str, file: str) -> float:
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        if raw == "inf":
            return math.inf
        raise StudyError("a number is needed", file=file, key=key, value=raw)
    return float(raw)


def parse_row(raw: Mapping[str, Any], index: int, file: str = TABLE_FILE) -> ValidationRow:
    """One ``[[row]]`` table of the validation file -> :class:`ValidationRow`.

    Parameters
    ----------
    raw : mapping
        The TOML table.
    index : int
        Its position (for messages).
    file : str
        The file name (for messages).

    Returns
    -------
    ValidationRow

    Raises
    ------
    StudyError
        A missing or unknown key, a band with low > high, an unknown kind.
    """
    key = f"row[{index}]"
    extra = set(raw) - _ROW_KEYS
    if extra:
        k = sorted(extra)[0]
        raise StudyError("unknown key in a validation row", file=file, key=f"{key}.{k}", value=raw[k])
    for need in ("id", "quantity", "tissue", "model", "low", "high", "unit", "origin", "band"):
        if need not in raw or raw[need] in ("", None):
            raise StudyError(f"a validation row needs {need}", file=file, key=f"{key}.{need}")
    low, high = _number(raw["low"], f"{key}.low", file), _number(raw["high"], f"{key}.high", file)
    if not low <= high:
        raise StudyError("low must not exceed high", file=file, key=f"{key}.low", value=(low, high))
    kind = raw.get("kind", "prediction")
    if kind not in KINDS:
        raise StudyError("kind is prediction, input or calibration", file=file, key=f"{key}.kind", value=kind)
    ref = raw.get("reference")
    if ref is not None:
        if not isinstance(ref, Mapping) or ref.get("op") not in ("difference", "ratio") \
                or set(ref) - {"conditions", "parameters", "op"}:
            raise StudyError("reference takes conditions, parameters and op (difference or ratio)", file=file,
                             key=f"{key}.reference", value=ref)
    value = raw.get("value")
    return ValidationRow(
        id=str(raw["id"]), quantity=str(raw["quantity"]), tissue=str(raw["tissue"]), model=str(raw["model"]),
        low=low, high=high, unit=str(raw["unit"]), source=str(raw["origin"]), band=str(raw["band"]),
        kind=kind, conditions=tuple(raw.get("conditions", ())),
        value=None if value is None else _number(value, f"{key}.value", file),
        known_gap=str(raw.get("known_gap", "")), parameters=dict(raw.get("parameters", {})),
        setting=str(raw.get("setting", "")), tissue_mass=raw.get("tissue_mass"),
        posture_height=raw.get("posture_height"), reference=dict(ref) if ref else None,
        note=str(raw.get("note", "")), interventions=tuple(dict(d) for d in raw.get("interventions", ())),
        timeline=dict(raw["timeline"]) if "timeline" in raw else None, body_mass=raw.get("body_mass"))


def load_table(path: str | Path | None = None, tissue: str | None = None, form: str | None = None
               ) -> list[ValidationRow]:
    """Rows of the validation table, optionally those of one tissue and / or one model form.

    Parameters
    ----------
    path : str or Path, optional
        The TOML file; default the shipped ``validation.toml`` (:func:`table_path`).
    tissue : str, optional
        Keep only this tissue's rows.
    form : str, optional
        Keep only the rows of this model form (``whole_body``).

    Returns
    -------
    list of ValidationRow

    Raises
    ------
    StudyError
        A malformed row or a repeated id.
    """
    p = Path(path) if path is not None else table_path()
    try:
        doc = tomllib.loads(p.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise StudyError(f"cannot read the validation table: {exc}", file=str(p)) from None
    rows = [parse_row(r, i, p.name) for i, r in enumerate(doc.get("row", []))]
    seen: set[str] = set()
    for r in rows:
        if r.id in seen:
            raise StudyError("repeated row id", file=p.name, key="row.id", value=r.id)
        seen.add(r.id)
    if tissue is not None:
        rows = [r for r in rows if r.tissue == tissue]
    if form is not None:
        rows = [r for r in rows if r.model == form]
    return rows


# --------------------------------------------------------------------------------------------
# Predictions
# --------------------------------------------------------------------------------------------

def _draws(study: Study, names: Sequence[str], samples: int, seed: int) -> dict[str, np.ndarray]:
    """Typical-subject draws of ``names``: outputs by propagation, inputs from the priors."""
    outputs = [n for n in names if n in study.outputs()]
    inputs = [n for n in names if n not in outputs]
    if outputs and inputs:  # drawn by different streams, so the draws would not be paired
        raise InputError("a quantity combines outputs or inputs, not one of each", key="quantity",
                         value=" , ".join(names))
    for n in inputs:
        if n not in study.priors:
            raise InputError(f"the {study.model} form of {study.tissue} gives no {n} (output or input)",
                             key="quantity", value=n)
    got: dict[str, np.ndarray] = {}
    if outputs:
        res = propagate(study, samples=samples, seed=seed, outputs=list(outputs))
        got.update({n: np.asarray(res.draws["typical"][n], dtype=float) for n in outputs})
    if inputs:
        values = draw(study, samples, seed=seed, layer="typical")
        got.update({n: np.broadcast_to(np.asarray(values[n], dtype=float), (samples,)) for n in inputs})
    return got


def _combine(a: Any, op: str | None, b: Any) -> Any:
    if op is None:
        return a
    with np.errstate(divide="ignore", invalid="ignore"):
        return a - b if op == "difference" else a / b


def _course(study: Study, text: str) -> tuple[str, Any]:
    """(time course, None for its peak or the parsed endpoint) of a whole-body row's quantity, or ("", None)."""
    if study.timeline is None:
        return "", None
    if text.startswith(PEAK):
        name = text[len(PEAK):].strip()
        if name not in TIMELINE_UNITS:
            raise InputError(f"no such time course; the whole_body form reports {', '.join(TIMELINE_UNITS)}",
                             key="quantity", value=text)
        return name, None
    if is_time_endpoint(text):
        point = parse_time_endpoint(text, study.timeline, key="quantity")
        return point.name, point  # type: ignore[union-attr]
    return "", None


def _course_draws(study: Study, text: str, samples: int, seed: int) -> np.ndarray:
    """Typical-subject draws of a time course at a time, or of its largest value over the timeline."""
    name, point = _course(study, text)
    values = draw(study, samples, seed=seed, layer="typical")
    if point is not None:
        return values_at(study, point, values)
    plan = study.timeline
    sim = courses_at(study, values, plan.end, plan.report_every)  # type: ignore[union-attr]
    return np.max(np.stack([np.broadcast_to(np.asarray(x, dtype=float), (samples,)) for x in sim[name]]), axis=0)


def _quantity(row: ValidationRow, study: Study, samples: int, seed: int) -> np.ndarray:
    a, op, b = row.terms
    if _course(study, a)[0]:
        if op is not None:
            raise InputError("a time course is compared alone, not joined with another quantity", key="quantity",
                             value=row.quantity)
        return _course_draws(study, a, samples, seed)
    d = _draws(study, [a] + ([b] if b else []), samples, seed)
    return _combine(d[a], op, d[b] if b else None)


def predict_row(row: ValidationRow, *, samples: int = DEFAULT_SAMPLES, seed: int = DEFAULT_SEED) -> RowResult:
    """Build the row's study, propagate it (typical subject) and compare the median with the band.

    Parameters
    ----------
    row : ValidationRow
    samples : int
        Draws per run (split over 16 replicates; a power of two per replicate).
    seed : int
        Seed of every run (the reference run uses the same one).

    Returns
    -------
    RowResult
        Median and 95 % interval in the row's unit; verdict ``known gap`` for a row marked so, else
        ``inside`` or ``outside``. A row whose study cannot be built or lacks the quantity is
        ``outside`` (or ``known gap``) with the reason in ``error``.
    """
    paired: bool | None = None
    try:
        study = Study.from_dict(row.study_document(seed))
        y = _quantity(row, study, samples, seed)
        if row.reference:
            ref_study = Study.from_dict(row.study_document(seed, reference=True))
            y0 = _quantity(row, ref_study, samples, seed)
            op = row.reference["op"]
            paired = list(ref_study.names) == list(study.names) and y.shape == y0.shape
            if paired:
                y = _combine(y, op, y0)
            else:
                y = np.array([_combine(np.nanmedian(y), op, np.nanmedian(y0))])
        unit = _unit_of(row, study)
        if unit is not None and unit != row.unit:
            raise InputError(f"the table gives {row.unit} but the model's unit is {unit}", key="unit",
                             value=row.unit)
    except (InputError, KeyError) as exc:
        return _result(row, math.nan, (math.nan, math.nan), paired, error=str(exc))
    y = np.asarray(y, dtype=float)
    y = y[np.isfinite(y)]
    if y.size == 0:
        return _result(row, math.nan, (math.nan, math.nan), paired, error="no finite draws")
    med = float(np.median(y))
    ci = (float(np.quantile(y, 0.025)), float(np.quantile(y, 0.975))) if y.size > 1 else (math.nan, math.nan)
    return _result(row, med, ci, paired)


def _unit_of(row: ValidationRow, study: Study) -> str | None:
    """The canonical unit of the row's quantity (None when it cannot be told)."""
    a, op, b = row.terms
    if op == "ratio" or (row.reference and row.reference.get("op") == "ratio"):
        return "1"
    course = _course(study, a)[0]
    if course:
        return TIMELINE_UNITS[course]

    def unit(name: str) -> str | None:
        if output_unit(name):
            return output_unit(name)
        prior = study.priors.get(name)
        return getattr(prior, "unit", None) if prior is not None else None

    ua = unit(a)
    if b is not None and unit(b) not in (None, ua):
        return None
    return ua


def _result(row: ValidationRow, med: float, ci: tuple[float, float], paired: bool | None,
            error: str = "") -> RowResult:
    inside = bool(math.isfinite(med) and row.low <= med <= row.high)
    verdict = "known gap" if row.known_gap else ("inside" if inside else "outside")
    return RowResult(row=row, median=med, ci95=ci, verdict=verdict, inside=inside, paired=paired, error=error)


def validate(tissue: str | None = None, *, samples: int = DEFAULT_SAMPLES, seed: int = DEFAULT_SEED,
             path: str | Path | None = None, form: str | None = None) -> ValidationResult:
    """Every row of the validation table beside the model's prediction.

    Parameters
    ----------
    tissue : str, optional
        Only this tissue's rows.
    form : str, optional
        Only this model form's rows (``whole_body``).
    samples : int
        Draws per run (default :data:`DEFAULT_SAMPLES`).
    seed : int
        Seed of every run (default :data:`DEFAULT_SEED`, fixed so that results repeat).
    path : str or Path, optional
        Another table file (default the shipped one).

    Returns
    -------
    ValidationResult

    Raises
    ------
    StudyError
        A malformed table, or a tissue or form with no rows.
    """
    rows = load_table(path, tissue, form)
    if tissue is not None and not rows:
        raise StudyError("no validation rows for this tissue", key="tissue", value=tissue)
    if form is not None and not rows:
        raise StudyError("no validation rows for this model form", key="form", value=form)
    p = Path(path) if path is not None else table_path()
    return ValidationResult(rows=[predict_row(r, samples=samples, seed=seed) for r in rows], samples=samples,
                            seed=seed, table=p.name)


# --------------------------------------------------------------------------------------------
# Presentation: terminal table and Markdown
# --------------------------------------------------------------------------------------------

def _fmt(x: float | None, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if isinstance(x, float) and math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.{digits}g}"


def _band(row: ValidationRow) -> str:
    return f"[{_fmt(row.low, 4)}, {_fmt(row.high, 4)}]"


def _conditions(row: ValidationRow) -> str:
    if row.interventions:  # a whole-body row: its experiment
        return "; ".join(f"{d.get('fluid', d.get('kind', ''))} {d.get('volume', '')} over {d.get('duration', '0 min')}"
                         for d in row.interventions)
    text = ", ".join(row.conditions) or "normal"
    if row.reference:
        ref = ", ".join(row.reference.get("conditions", row.conditions)) or "normal"
        what = "minus" if row.reference["op"] == "difference" else "over"
        text += f" ({what} {ref}" + (", other settings" if row.reference.get("parameters") else "") + ")"
    elif row.parameters:
        text += " (settings)"
    return text


def table(result: ValidationResult, *, sources: bool = False) -> str:
    """Plain-text table: one line per row (tissue, quantity, conditions, form, band, median, 95 %
    interval, verdict); with ``sources``, each row's source beneath it. A footer counts the verdicts.

    Parameters
    ----------
    result : ValidationResult
    sources : bool
        Print each row's source and known-gap reason beneath it.

    Returns
    -------
    str
    """
    qw = max([15] + [len(rr.row.quantity) + 2 for rr in result.rows])  # whole-body endpoints run longer
    head = (f"{'tissue':<18}{'quantity':<{qw}}{'conditions':<34}{'form':<13}{'band':>20}{'median':>10}"
            f"{'95% interval':>22}  {'unit':<17}{'verdict':<10}")
    lines = [head, "-" * len(head)]
    for rr in result.rows:
        r = rr.row
        ci = f"[{_fmt(rr.ci95[0])}, {_fmt(rr.ci95[1])}]"
        verdict = rr.verdict + (" (calibration)" if r.kind == "calibration" else "") + \
            (" (input)" if r.kind == "input" else "")
        lines.append(f"{r.tissue:<18}{r.quantity:<{qw}}{_conditions(r)[:33]:<34}{r.model:<13}{_band(r):>20}"
                     f"{_fmt(rr.median):>10}{ci:>22}  {r.unit:<17}{verdict}")
        if sources:
            lines.append(f"{'':<18}id {r.id}; source: {r.source}")
            if r.known_gap:
                lines.append(f"{'':<18}known gap: {r.known_gap}")
            if rr.error:
                lines.append(f"{'':<18}not predicted: {rr.error}")
    c = result.counts()
    lines.append("")
    lines.append(f"{len(result.rows)} rows: {c['inside']} inside, {c['outside']} outside, {c['known gap']} known "
                 f"gaps; typical subject, {result.samples} draws per run, seed {result.seed}")
    outside = [rr.row.id for rr in result.rows if rr.verdict == "outside"]
    if outside:
        lines.append("outside their band (not marked as known gaps): " + ", ".join(outside))
    if result.closed_gaps():
        lines.append("known gaps now inside their band (the mark can go): " + ", ".join(result.closed_gaps()))
    return "\n".join(lines)


def markdown(result: ValidationResult) -> str:
    """The validation table as Markdown (``docs/validation.md``): a summary per tissue, then every row with
    its band, prediction, verdict, source and known-gap reason.

    Parameters
    ----------
    result : ValidationResult

    Returns
    -------
    str
        Deterministic text for a fixed seed and sample size.
    """
    c = result.counts()
    out = [
        "# Validation: published measurements beside the model",
        "",
        "Generated by `python -m uncertainty.app.validation_doc` from `priors/validation.toml` "
        f"(typical subject, {result.samples} draws per run, seed {result.seed}); do not edit by hand. "
        "`fluidshift validate` prints the same table.",
        "",
        "Each row names a published measurement (a value or band with its source), the study that should "
        "reproduce it (tissue, conditions, model form and any fixed settings of the experiment) and the "
        "model's median and 95 % interval for the typical subject. Verdict: **inside** when the median lies "
        "in the band, **outside** when it does not, **known gap** for a row the model cannot yet meet, with "
        "the reason. No prior is tuned to meet a row. *Kind* says how independent the comparison is: "
        "*prediction* (the form computes the quantity from priors not set from this source), *input* (a "
        "prior itself), *calibration* (a prior was set so that this output meets this source).",
        "",
        f"**{len(result.rows)} rows: {c['inside']} inside, {c['outside']} outside, {c['known gap']} known gaps.**",
        "",
        "| tissue | rows | inside | outside | known gaps |",
        "| --- | ---: | ---: | ---: | ---: |",
    ]
    tissues = list(dict.fromkeys(rr.row.group for rr in result.rows))
    for t in tissues:
        rs = [rr for rr in result.rows if rr.row.group == t]
        out.append(f"| {t} | {len(rs)} | {sum(r.verdict == 'inside' for r in rs)} | "
                   f"{sum(r.verdict == 'outside' for r in rs)} | {sum(r.verdict == 'known gap' for r in rs)} |")
    for t in tissues:
        out += ["", f"## {t}", "",
                "| id | quantity | conditions | form | kind | band | median | 95 % interval | unit | verdict |",
                "| --- | --- | --- | --- | --- | --- | ---: | --- | --- | --- |"]
        rs = [rr for rr in result.rows if rr.row.group == t]
        for rr in rs:
            r = rr.row
            ci = f"[{_fmt(rr.ci95[0])}, {_fmt(rr.ci95[1])}]"
            out.append(f"| `{r.id}` | {r.quantity} | {_conditions(r)} | {r.model} | {r.kind} | {_band(r)} | "
                       f"{_fmt(rr.median)} | {ci} | {r.unit} | {rr.verdict} |")
        out.append("")
        for rr in rs:
            r = rr.row
            out.append(f"- `{r.id}`: {r.source}. Band: {r.band}.")
            if r.setting:
                out.append(f"  Settings: {r.setting}.")
            if r.note:
                out.append(f"  Note: {r.note}")
            if r.known_gap:
                out.append(f"  **Known gap:** {r.known_gap}.")
            if rr.error:
                out.append(f"  Not predicted: {rr.error}.")
    return "\n".join(out) + "\n"
