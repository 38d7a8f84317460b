"""Generate docs/study-file.md, the study-file reference, from the pydantic schema in study.py.

Every key of every section model is listed with its type, default and constraints, read from the
models themselves; meanings and units come from :data:`MEANINGS`. ``tests/test_docs.py`` fails when the
committed file differs from what this module generates, so the reference cannot drift from the code.

It also writes docs/results.md, the results.json reference, from the models in bundle.py.
Regenerate with ``python -m uncertainty.app.docs_gen`` (writes both in a source checkout).
"""

from __future__ import annotations

import sys
import types
import typing
from pathlib import Path
from typing import Any

from uncertainty import priors, study
from uncertainty.app import bundle
from uncertainty.core import units
from uncertainty.forms.catalogue import FORMS

#: (section heading, TOML form, model name in uncertainty.study, introduction)
SECTIONS: list[tuple[str, str, str, str]] = [
    ("study", "[study]", "StudySection",
     "What the study is about. Required; every other section is optional."),
    ("correlations", "[correlations]", "CorrelationsSection",
     "Correlations between uncertain inputs, as correlations of normal scores (a Gaussian copula). A prior "
     "set's pairs that involve a quantity the study overrides are dropped (and say so in the study notes)."),
    ("propagate", "[propagate]", "PropagateSection",
     "Forward uncertainty: the distribution of Jv and other outputs, for the study's individual and for the "
     "typical subject. Its Monte Carlo error comes from independent randomised replicates."),
    ("propagate.thresholds", "thresholds = [{ ... }]", "Threshold",
     "A threshold question: P(output above or below a value), e.g. `{ output = \"oedema_volume\", above = \"50 "
     "mL\" }` (a whole-organ value needs `[study] tissue_mass`) or `{ output = \"Jv\", below = 0 }` (absorption). "
     "Answered for the individual and the typical subject, with the Monte Carlo standard error from the "
     "replicates and, for each input, its first-order share of the variance of the event's indicator "
     "(given-data estimate on the same draws), in the terminal table, results.json (`thresholds`) and the "
     "report."),
    ("sensitivity", "[sensitivity]", "SensitivitySection",
     "Global sensitivity of one output to the uncertain inputs, with confidence intervals and a ranking."),
    ("observations", "[[observations]]", "Observation",
     "Data for Bayesian updating, one table per observation; `kind` decides which keys are required."),
    ("observations.step", "step = { ... } / steps = [{ ... }]", "StepSpec",
     "A venous-cuff pressure step of a `volume_time_course` (one step, or a cumulative protocol)."),
    ("observations.columns", "columns = { ... }", "ColumnMap",
     "Which column of an observation's data file plays which part. A data file is read in long format, one "
     "reading a row: subject, optional group, optional time, the value (`volume` for a `volume_time_course`) "
     "and an optional per-row sd (in `unit`; a blank sd cell takes the observation's `sd`). Columns the map "
     "does not name are not read, so a wide file (a column per quantity) serves several observations, each "
     "naming its value column. A blank subject, value or (time course) time cell is a missing reading: the "
     "row is skipped and counted in a note. Negative volumes are kept: the curve model fits a per-subject "
     "baseline offset, so zeroed strain-gauge readings slightly below zero are data, not errors. Errors name "
     "the data file, the line and the column, and show at most the offending cell, shortened."),
    ("observations.columns.time", "time = { column = ..., unit = ... }", "TimeColumn",
     "A time column with its unit (seconds, minutes, hours or days; times are converted to minutes)."),
    ("infer", "[infer]", "InferSection",
     "Sampler settings and quality gate for Bayesian updating from the observations. `fluidshift infer` flags "
     "override these keys; `fluidshift run` uses them as they stand."),
    ("rank", "[rank]", "RankSection",
     "Which single measurement (and which pair or set within a budget) would narrow the Jv interval most."),
    ("rank.candidates", "candidates = [{ ... }]", "Candidate", "One candidate measurement."),
    ("design", "[design]", "DesignSection", "Trial sizing: power, assurance and sample size."),
    ("design.effect", "effect = { ... } / extra_effects = [{ ... }]", "Effect",
     "The treatment effect on one quantity: a ratio (`multiply`) or a difference (`shift`)."),
    ("design.spread", "between_subject / within_subject / measurement = { sd | cv }", "Spread",
     "A spread: `sd` in the quantity's canonical unit, or `cv` (a fraction)."),
    ("design.responder", "responder = { cut = ..., side = ... }", "Responder",
     "A binary responder endpoint: a subject responds when the endpoint lies below or above `cut`; the arms' "
     "response proportions are compared by the z test with continuity correction (n by its exact binomial power, "
     "Fleiss' formula beside it). Parallel groups without baseline; two-sided or one-sided test."),
    ("interventions", "[[interventions]]", "Intervention",
     "The `whole_body` form's infusions and bleeds, one table each, in any order. Refused (exit 2, naming the "
     "key and value): a volume that is not positive, a start at or after the timeline's end, an unknown fluid, "
     "bleeds that together reach the blood volume (70 mL/kg of `[study] body_mass`), interventions in another "
     "form."),
    ("timeline", "[timeline]", "TimelineSection",
     "How long the `whole_body` time courses run and how often `propagate` reports them (its `timeline` entry: "
     "median and 95% interval per reported time for the typical subject and the individual; with timed "
     "`haemoglobin`, `haematocrit`, `plasma_protein`, `urine`, `body_weight` or `fluid_balance` observations also "
     "`observed`: each subject's Hb, Hct or protein readings over its first, weights minus its first (kg), urine "
     "volumes as read (urine flows as the volumes they add up to), charted balances less the insensible loss the "
     "chart omits (kg at 1 kg per L, on `body_weight_change`), drawn on the fan chart). Besides the volumes and "
     "ratios it "
     "reports `body_weight_change` (kg since 0: infused minus whole blood bled minus all urine minus insensible "
     "loss, 1 kg per L). "
     "`[sensitivity] output`, `[rank] output` and `[design] endpoint` read a time course at a time written "
     "\"NAME at TIME\", e.g. \"infused_retained_fraction at 60 min\"."),
    ("schedule", "[schedule]", "ScheduleSection",
     "Venous-cuff measurement schedule: the cuff pressures and K reading times that minimise the expected "
     "posterior sd of Kf and Pvi (linearised Fisher information plus the prior precision), against equal "
     "spacing. Run by `fluidshift design STUDY --schedule` and by `fluidshift run`; defaults apply when the section "
     "is absent. In a `whole_body` study the section chooses blood-sampling times instead: `samples` of the "
     "`candidates` (a baseline at 0 min is always drawn) that most narrow `target` (an uncertain quantity or "
     "\"NAME at TIME\") from serial haemoglobin read with sd `hb_sd`, against equal spacing, with a figure of the "
     "prior haemoglobin-ratio band with the chosen times and of the posterior sd against the number of samples. "
     "The venous-cuff keys are refused in a `whole_body` study and the blood-sampling keys (`candidates`, "
     "`samples`, `target`, `hb_sd`, `hb_baseline`) in any other (exit 2); so are candidate times after the "
     "timeline's end and more samples than candidates."),
    ("calibrate", "[calibrate]", "CalibrateSection",
     "Simulation-based calibration of the study's own inference model (Talts et al. 2018): truths from the "
     "prior (correlations included), the study's observations simulated from them, a refit per replicate "
     "(sampler settings and quality gate of `[infer]`; failed refits counted and left out) and the rank of "
     "each truth among `draws` posterior draws, tested for uniformity (chi-square) with the 90% interval's "
     "coverage against Binomial(N, 0.9). Run by `fluidshift calibrate STUDY` (its flags "
     "override these keys; defaults apply when the section is absent) and by `fluidshift run` when the study "
     "file has this section (heavy: one refit per replicate); the run's results.json then has a `calibrate` "
     "section (ranks, bin counts, p-values, 90% coverage, verdict) and the report its rank histograms."),
    ("scenarios", "[[scenarios]]", "Scenario",
     "What-ifs, one table per scenario: quantities shifted or scaled and conditions added or removed. Each is "
     "evaluated on the same draws as the baseline (the prior draws, and the posterior draws when inference "
     "ran), so its effect is the paired change of every output (scenario minus baseline on one draw): median, "
     "95% interval and P(change < 0) / P(change > 0), for the typical subject, the individual and each "
     "subject of the posterior. A changed condition keeps each draw's quantile of the prior. Run by "
     "`fluidshift run`; in Python `uncertainty.analyses.scenarios.scenarios(study, posterior=...)`."),
]

#: "section.key" -> meaning, with the unit where there is one
MEANINGS: dict[str, str] = {
    "study.title": "a short title shown in outputs and the report",
    "study.tissue": "the prior set to start from: a file name in priors/ (skeletal_muscle, skin_subcutis, lung, "
                    "myocardium, intestinal_mucosa, brain, glomerulus)",
    "study.conditions": "condition modifiers from priors/conditions.toml, applied in order",
    "study.model": "model form: " + ", ".join(f"{name} ({spec.summary})" for name, spec in FORMS.items()),
    "study.posture_height": "height of the tissue below the heart for the posture condition (default 30 cm, "
                            "from priors/conditions.toml); a number in cm or a string with a unit (\"40 cm\"); "
                            "Pa and Pv rise by 0.7725 mmHg per cm",
    "study.seed": "random seed; the same study and seed give the same numbers",
    "study.tissue_mass": "mass of the limb or organ for whole-tissue shifts (Jv in mL/h and L/day); a number in "
                         "kg or a string with a unit (\"3.2 kg\")",
    "study.body_mass": "whole_body form: body mass, which scales the tissue beds, blood volume and vascular "
                       "compliance; a number in kg or a string with a unit (\"73 kg\"); default 70 kg",
    "interventions.kind": "infusion (of `fluid`) or bleed (whole blood lost at the current haematocrit)",
    "interventions.fluid": "infusions: crystalloid (no protein), albumin_5 (5 g/dL), albumin_20 (20 g/dL)",
    "interventions.volume": "volume given or lost: a number in mL or a string with a unit (\"1750 mL\")",
    "interventions.start": "when it starts: a number in min or a string with a unit (\"0 min\")",
    "interventions.duration": "how long it lasts (constant rate): min or a string with a unit; 0 gives it at once",
    "interventions.note": "free text",
    "timeline.end": "end of the time courses: a number in min or a string with a unit (\"4 h\")",
    "timeline.report_every": "reporting interval: min or a string with a unit; the solver's fixed step (at most "
                             "0.5 min) divides it",
    "timeline.draws": "draws per layer (typical, individual) of the time courses in propagate",
    "study.description": "free text",
    "study.note": "free text",
    "correlations.pairs": "[[a, b, rho], ...]: normal-score correlation rho (-1..1) between inputs a and b",
    "correlations.between_subject": "[[a, b, rho], ...]: normal-score correlation rho (-1..1) between the "
                                    "between-subject deviations of a and b (quantities coupled between people, "
                                    "e.g. LAP and PAP); both need a `between_subject` spread. Used by the "
                                    "individual draws of propagate and by inference's subject effects; replaces "
                                    "a prior set's `layer = \"between_subject\"` value for the same pair",
    "propagate.samples": "total number of draws over all replicates (rounded up to a power of two per replicate "
                         "for qmc)",
    "propagate.method": "mc (pseudo-random), qmc (scrambled Sobol'), lhs (Latin hypercube)",
    "propagate.tol": "optional: double the sample until the 95% Monte Carlo margin (t x standard error over the "
                     "replicates) of both 95% interval ends is below this, in the first output's canonical unit",
    "propagate.max_samples": "optional: upper limit for the doubling under `tol` (quality gate, exit 3, when "
                             "reached)",
    "observations.kind": "measurement (a direct noisy reading of one quantity), lymph_flow (pre-nodal JL = Jv at "
                         "steady state), clearance_rate, swelling_rate, volume_time_course (limb volume after "
                         "venous-cuff steps), protein_ratio (lymph/plasma protein); glomerular form only: GFR, "
                         "RPF (renal plasma flow), filtration_fraction (strictly between 0 and 1); lymph_flow is "
                         "refused for brain; body_weight (bed-scale weights, kg: each subject's changes from its "
                         "first reading, 1 kg = 1 L) and fluid_balance (charted cumulative balance since time 0, L), "
                         "from a data file with times: the organ's Jv x tissue mass x days is the declared `share` "
                         "of the body's net fluid gain, filtration constant over the period, charted balances "
                         "omitting insensible losses (needs [study] tissue_mass; sd only); in a whole_body study "
                         "both take no share and no tissue mass: body_weight is each subject's weight change from "
                         "its earliest reading (kg or any mass unit, sd only) against the body's own balance since "
                         "time 0, infused minus whole blood bled minus all urine minus insensible loss (0.52 mL/min, "
                         "Institute of Medicine 2005), 1 kg per L, nothing taken by mouth; fluid_balance is the "
                         "charted balance since time 0 (L, sd only) against the same balance without the insensible "
                         "loss a chart does not record (infused minus bled minus all urine); whole_body form only: "
                         "haemoglobin (serial blood Hb per subject from a data file with times, g/dL, sd only: each "
                         "subject's readings relative to its earliest one against the time course of Hb relative "
                         "to rest), haematocrit (serial Hct per subject from a data file with times, as a fraction, "
                         "`unit = \"1\"` (default), or in per cent, `unit = \"%\"`, strictly between 0 and 1 "
                         "(0 and 100 %), sd only: fitted as haemoglobin, to the same time course), urine (per subject "
                         "from a data file with times, sd only, `how`: the cumulative volume since time 0, mL, "
                         "against the time course of urine, or the mean flow since the subject's previous reading "
                         "or time 0, mL/min or any flow unit, against the change of that course over the interval) "
                         "and plasma_protein (serial "
                         "plasma total protein or albumin, `protein`, per subject from a data file with times, g/dL "
                         "or any concentration unit, sd only: each subject's readings relative to its earliest one "
                         "against the time course of plasma protein concentration, mass over plasma volume, relative "
                         "to rest)",
    "observations.name": "optional label",
    "observations.parameter": "the quantity a measurement reads (a trade symbol)",
    "observations.value": "the observed value, in `unit`",
    "observations.sd": "normal measurement error, in `unit` (with a data file: for rows whose sd cell is "
                       "blank or absent)",
    "observations.cv": "lognormal measurement error, as a fraction",
    "observations.unit": "unit of `value` and `sd` (any unit pint converts to the quantity's canonical unit)",
    "observations.instrument": "optional: noise, bias prior and what it reads from priors/instruments.toml; "
                               "value, sd and unit are then those of the reading (the implanted osmometer reads "
                               "pi_i - Pi in mmHg, the albumin escape rate TER in %/h)",
    "observations.file": "CSV data file relative to the study file, long format, one reading a row: subject, "
                         "value (volume for volume_time_course), optional group, optional time (time_s, "
                         "time_min, time_h or time_day; required for volume_time_course), optional sd; other "
                         "names through `columns`. One likelihood term covers all its rows",
    "observations.columns": "which column plays which part, e.g. { subject = \"patient_id\", time = \"day\", "
                            "value = \"COP_mmHg\" } (see below)",
    "observations.columns.subject": "the subject label column (default `subject`)",
    "observations.columns.group": "the group label column, e.g. a trial arm (default `group`, when present)",
    "observations.columns.time": "the time column: a name that states its unit (`day`, `hours`, `t_s`, "
                                 "`time (min)`) or { column, unit }; default one of time_s, time_min, time_h, "
                                 "time_day",
    "observations.columns.value": "the reading column, in the observation's `unit` (default `value`; `volume` "
                                  "for volume_time_course, mL/100 mL, negative readings allowed)",
    "observations.columns.sd": "a per-row normal error column, in `unit` (default `sd`, when present; not for "
                               "volume_time_course)",
    "observations.columns.time.column": "the column's name in the file's first line",
    "observations.columns.time.unit": "s, min, h or day",
    "observations.subject": "subject label of a single value",
    "observations.group": "group label (e.g. a trial arm)",
    "observations.step": "one venous-cuff step (volume_time_course)",
    "observations.steps": "a cumulative step protocol (volume_time_course); each step with `at_min`",
    "observations.note": "free text",
    "observations.declared_unit": "set by the loader (the unit as written); not for study files",
    "observations.volume": "clearance_rate: a prior declaration of the tracer's distribution volume (mL/100g)",
    "observations.lymph": "swelling_rate: a prior declaration of the lymph flow (mL/min/100g)",
    "observations.effects": "quantities given a group effect (with grouped data)",
    "observations.share": "body_weight / fluid_balance: a prior declaration (e.g. { dist = \"beta\", mean = 0.4, "
                          "sd = 0.15 }) of the organ's share of the body's net fluid gain over the period "
                          "(dimensionless); it carries the other tissues, lymph return and plasma-volume change "
                          "(refused for body_weight in a whole_body study, which balances the whole body itself)",
    "observations.site": "lymph_flow: where lymph was collected, pre_nodal or post_nodal",
    "observations.protein": "plasma_protein: the protein read, total (default) or albumin (albumin readings are "
                            "refused in a study that infuses albumin: the form has one plasma protein pool)",
    "observations.how": "urine: what each reading is, cumulative (default: volume since time 0, mL) or rate (mean "
                        "flow since the subject's previous reading or time 0, mL/min or any flow unit; a negative "
                        "rate, a first rate at time 0 and two rates of one subject at one time are refused)",
    "observations.every": "volume_time_course: fit every k-th reading of each subject (1 = all; fewer is faster)",
    "observations.step.parameter": "the stepped pressure (Pv)",
    "observations.step.to": "the pressure after the step, in `unit` (default mmHg)",
    "observations.step.unit": "unit of `to`",
    "observations.step.at_min": "start of the step, min (protocols)",
    "rank.candidates": "candidate measurements; empty: the tissue's instruments from priors/instruments.toml",
    "rank.budget": "optional: the best set of candidates whose total cost stays within this",
    "rank.output": "the output whose interval should narrow; in a whole_body study also a time course at a time, "
                   "\"NAME at TIME\" (e.g. \"infused_retained_fraction at 60 min\"; after 0, at most [timeline] end)",
    "rank.samples": "Monte Carlo sample size of the value-of-information estimate",
    "rank.tol": "optional: double the draws (earlier draws and their simulated readings kept) until the 95% Monte "
                "Carlo half-width (t x standard error) of every candidate's expected variance reduction is below "
                "tol times that reduction (relative; times 1% of the output's variance for a candidate that "
                "removes less)",
    "rank.max_samples": "optional: upper limit for the doubling under `tol` (default 65536; quality gate, exit 3, "
                        "when reached)",
    "rank.candidates.name": "label (unique)",
    "rank.candidates.parameter": "the quantity measured (a trade symbol)",
    "rank.candidates.sd": "measurement noise, in `unit` (default the quantity's canonical unit)",
    "rank.candidates.cv": "measurement noise as a fraction (lognormal)",
    "rank.candidates.unit": "unit of `sd`",
    "rank.candidates.instrument": "noise, bias and what it reads from priors/instruments.toml (sd in the "
                                  "reading's unit)",
    "rank.candidates.cost": "relative cost (any consistent unit), used by `per_cost` and `budget`",
    "rank.candidates.n": "number of repeated readings averaged",
    "design.design": "parallel (two arms), paired (each subject before and after) or crossover (AB/BA two-period "
                     "crossover, n per sequence; needs `within_subject`; no carry-over assumed)",
    "design.endpoint": "a quantity, \"Jv\", or an observation kind; in a whole_body study also a time course at a "
                       "time, \"NAME at TIME\" (e.g. \"hb_ratio at 60 min\"; after 0, at most [timeline] end)",
    "design.effect": "the treatment effect to detect",
    "design.between_subject": "spread of individuals around the typical value, per quantity",
    "design.within_subject": "test-retest spread per quantity (paired designs)",
    "design.measurement": "measurement error of the endpoint",
    "design.alpha": "two-sided significance level",
    "design.target_power": "power the sample size must reach",
    "design.target_assurance": "optional: assurance (power averaged over the design prior) to reach",
    "design.dropout": "fraction of subjects lost; n is inflated by 1/(1 - dropout)",
    "design.n_range": "[low, high] subjects per arm searched",
    "design.design_prior": "a prior declaration over the effect (the shift, or the log ratio) for assurance",
    "design.analysis_prior": "optional prior declaration for Bayesian success",
    "design.simulations": "simulated trials per design point",
    "design.baseline": "analyse with a baseline covariate (ANCOVA)",
    "design.extra_effects": "further effects of the same treatment (fixed)",
    "design.n_points": "points on the power curve",
    "design.exact_trials": "trials refitted by full MCMC on the exact path",
    "design.target_half_width": "optional: interval half-width to reach, in the endpoint's unit",
    "design.half_width_probability": "probability of reaching `target_half_width`",
    "design.typical": "stated typical subject for a model-output endpoint (canonical units; default each prior's "
                      "median): the conditional power is computed at these values, the expected power over the prior",
    "design.benefit": "direction of benefit, `increase` or `decrease` (default: the sign of the effect); power, "
                      "assurance and Bayesian success count only significant results in this direction",
    "design.test": "the test of each trial: `two_sided` (default; `alpha` two-sided), `one_sided` or "
                   "`non_inferiority` (`alpha` one-sided, success only in the direction of benefit)",
    "design.margin": "non-inferiority margin (needed by and only for `test = \"non_inferiority\"`): the loss of "
                     "benefit tolerated, > 0 in the endpoint's canonical unit for a shift effect; for a ratio "
                     "effect a ratio on the harmful side of 1 (e.g. 1.1 when a decrease is the benefit)",
    "design.looks": "group-sequential analyses at K equally spaced information fractions (1, the default: a fixed "
                    "design; more than 1 needs `test = \"two_sided\"`): the maximum n is the fixed n times the "
                    "inflation factor; boundaries and expected n under H0 and H1 are in `group_sequential`",
    "design.spending": "Lan-DeMets alpha-spending shape for `looks` > 1: `obrien_fleming` (default) or `pocock`",
    "design.futility": "optional non-binding futility bound for `looks` > 1: the beta-spending shape, "
                       "`obrien_fleming` or `pocock` (Pampallona, Tsiatis & Kim 2001); the efficacy bounds ignore it, "
                       "the maximum n gives the target power with it followed; per-look stopping probabilities and "
                       "expected n under no effect and the stated effect are reported",
    "design.responder": "optional binary endpoint: responder when the endpoint lies `side` of `cut` (canonical "
                        "unit); power from the exact binomial distribution of the corrected z test of two proportions",
    "design.followups": "repeated measures: follow-up readings per subject (parallel designs, with or without "
                        "`baseline`), their mean analysed; the sd shrinks by the compound-symmetry factor "
                        "(1 + (k - 1) rho) / k, less rho^2 with a baseline (rho: the between-subject share of the "
                        "variance)",
    "design.bayes_width": "optional Bayesian sample size (needs a normal `design_prior` on a quantity endpoint): "
                          "the target width of the 95 % posterior interval of the effect on the analysis scale "
                          "(conjugate normal analysis prior, `analysis_prior` or else the design prior); the "
                          "`bayesian_sample_size` entry also gives the EVSI of adopting on the posterior mean",
    "design.bayes_success": "optional Bayesian sample size: the target probability (prior predictive) that the 95 % "
                            "posterior interval excludes no effect in the direction of benefit",
    "design.responder.cut": "the responder cut in the endpoint's canonical unit (> 0 for a ratio effect)",
    "design.responder.side": "`below` or `above` the cut (default: the side the benefit moves the endpoint to)",
    "design.effect.parameter": "the quantity the treatment changes",
    "design.effect.multiply": "ratio of treated to control (e.g. 0.7)",
    "design.effect.shift": "difference treated minus control, in `unit`",
    "design.effect.unit": "unit of `shift`",
    "design.spread.sd": "standard deviation in the quantity's canonical unit",
    "design.spread.cv": "coefficient of variation, a fraction",
}

PARAMETERS_TEXT = """\
## [parameters]

Override a prior of the tissue's set, or add one, by trade symbol. Each entry is a declaration:

| dist | parameters (in `unit`) |
|---|---|
{rows}

Common keys of a declaration: `unit` (any unit pint converts to the quantity's canonical unit; filtration
quantities carry a basis such as `/100g` or `/100mL`), `between_subject = {{ sd = .. }}` or `{{ cv = .. }}`
(spread of individuals around the typical value), `origin` (where the numbers come from), `note`.
A bare number, or a string with a unit (`"12 mmHg"`), fixes the value (`fixed`).
`from_protein = {{ <declaration in g/dL>, kind = "total" | "albumin" }}` or
`from_protein = {{ albumin = {{...}}, globulin = {{...}} }}` derives an oncotic pressure from protein.
An override replaces the whole declaration, between-subject spread included, unless it states one.

Canonical units: {units}.
"""


def _type(annotation: Any) -> str:
    if annotation is Any:
        return "declaration or value"
    origin = typing.get_origin(annotation)
    args = typing.get_args(annotation)
    if origin is typing.Literal:
        return "one of " + ", ".join(f"`{a}`" for a in args)
    if origin in (typing.Union, types.UnionType):
        parts = [_type(a) for a in args if a is not type(None)]
        return " or ".join(parts) + (" (optional)" if type(None) in args else "")
    if origin in (list, tuple):
        return f"list of {_type(args[0])}" if args else "list"
    if origin is dict:
        return f"table of {_type(args[1])}" if len(args) == 2 else "table"
    if isinstance(annotation, type):
        return {"str": "string", "int": "integer", "float": "number", "bool": "true/false"}.get(
            annotation.__name__, f"table ({annotation.__name__})")
    return str(annotation).replace("typing.", "")


def _default(field: Any) -> str:
    from pydantic_core import PydanticUndefined

    if field.is_required():
        return "required"
    value = field.default_factory() if field.default_factory is not None else field.default
    if value is PydanticUndefined or value is None:
        return "none"
    return "`" + _toml(value) + "`"


def _toml(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {_toml(v)}" for k, v in value.items()) + "}" if value else "{}"
    return repr(value)


def _constraints(field: Any) -> str:
    names = {"gt": ">", "ge": ">=", "lt": "<", "le": "<=", "min_length": "length >=", "max_length": "length <="}
    out = []
    for m in field.metadata:
        for attr, sym in names.items():
            v = getattr(m, attr, None)
            if v is not None:
                out.append(f"{sym} {v}")
    return ", ".join(out)


def fields_of(model: Any) -> list[tuple[str, str, str, str]]:
    """(key, type, default, constraints) of every field of a pydantic model, in declaration order."""
    return [(name, _type(f.annotation), _default(f), _constraints(f)) for name, f in model.model_fields.items()]


def _parameters() -> str:
    rows = []
    for dist, (required, optional) in priors.DISTRIBUTIONS.items():
        params = ", ".join(f"`{p}`" for p in required)
        if optional:
            params += " (optional: " + ", ".join(f"`{p}`" for p in optional) + ")"
        rows.append(f"| `{dist}` | {params} |")
    unit_list = ", ".join(f"{k} {v}" if v else f"{k} (dimensionless)" for k, v in units.CANONICAL.items())
    return PARAMETERS_TEXT.format(rows="\n".join(rows), units=unit_list)


def render() -> str:
    """The study-file reference as Markdown."""

    out = ["# Study file reference", "",
           "<!-- Generated by `python -m uncertainty.app.docs_gen` from the study schema (uncertainty/study/); "
           "do not edit by hand (tests/test_docs.py checks it). -->", "",
           "A study is one TOML file. `[study]` is required; each analysis section present (`[propagate]`, "
           "`[sensitivity]`, `[[observations]]`, `[rank]`, `[design]`) is run by `fluidshift run`. Unknown keys, "
           "wrong types and out-of-range values are errors naming the file, the key path and the value (exit "
           "status 2). Values are in the canonical units of DESIGN.md unless a `unit` key or a unit string says "
           "otherwise.", ""]
    for heading, form, model_name, intro in SECTIONS:
        model = getattr(study, model_name)
        if heading == "correlations":
            out.append(_parameters())
        out += [f"## {form}" if "." not in heading else f"### {form}", "", intro, "",
                "| key | type | default | constraints | meaning |", "|---|---|---|---|---|"]
        prefix = heading
        for name, typ, default, cons in fields_of(model):
            meaning = (MEANINGS.get(f"{prefix}.{name}") or model.model_fields[name].description
                       or "(not described yet)")
            out.append(f"| `{name}` | {typ} | {default} | {cons} | {meaning} |")
        out.append("")
    return "\n".join(out).rstrip() + "\n"


RESULTS_INTRO = """\
# results.json reference

<!-- Generated by `python -m uncertainty.app.docs_gen` from the pydantic models in uncertainty/app/bundle.py;
do not edit by hand (tests/test_docs.py checks it). -->

`fluidshift run STUDY --out DIR` (and `fluidshift demo`) write DIR/results.json, validated against this
schema when written and when read back (`uncertainty.app.bundle.read_results`). The file is rewritten
atomically after every section, so while a run is under way, or after it was interrupted, `complete` is
false and `sections` holds the sections finished so far. Each section's `result` is the JSON document
of that analysis (DESIGN.md section 5, the same as `fluidshift <analysis> --json`); values are in
canonical units with a `units` map beside them. The JSON Schema itself:
`python -c "import json, uncertainty.app.bundle as b; print(json.dumps(b.results_schema(), indent=2))"`.

Other files of the bundle: `tables/<section>.csv` (each result's `to_dataframe()`; a result with several
kinds of row also writes `tables/<section>-<kind>.csv`, e.g. infer's `subjects`, `cohort` and `group_effects`),
`figures/<name>.png` and `.svg` (each name begins with its section's: `propagate_timeline`,
`inference_timeline`, `schedule-blood_schedule`), `posterior.nc` (ArviZ InferenceData, where inference ran) and
`report.html` (self-contained). A hidden `.partial/` folder holds temporary files during a run.
"""


def render_results() -> str:
    """The results.json reference as Markdown, from uncertainty.app.bundle's models."""

    out = [RESULTS_INTRO]
    for model in (bundle.ResultsDoc, bundle.StudyInfo, bundle.Provenance, bundle.SectionRecord, bundle.FileRecord,
                  bundle.GateInfo):
        out += [f"## {model.__name__}", "", (model.__doc__ or "").strip().splitlines()[0] if model.__doc__ else "",
                "", "| key | type | default | description |", "|---|---|---|---|"]
        for name, f in model.model_fields.items():
            key = f.alias or name
            out.append(f"| `{key}` | {_type(f.annotation)} | {_default(f)} | {f.description or ''} |")
        out.append("")
    return "\n".join(out).rstrip() + "\n"


def results_doc_path() -> Path:
    """docs/results.md of the source checkout."""
    return Path(__file__).resolve().parents[2] / "docs" / "results.md"


def doc_path() -> Path:
    """docs/study-file.md of the source checkout."""
    return Path(__file__).resolve().parents[2] / "docs" / "study-file.md"


def main(argv: list[str] | None = None) -> int:
    """Write docs/study-file.md and docs/results.md (or print the study-file reference with ``-``)."""
    argv = sys.argv[1:] if argv is None else argv
    text = render()
    if argv and argv[0] == "-":
        sys.stdout.write(text)
        return 0
    for path, content in ((doc_path(), text), (results_doc_path(), render_results())):
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(content, encoding="utf-8")
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
