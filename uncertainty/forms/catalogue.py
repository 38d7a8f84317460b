"""The catalogue of model forms: one :class:`~uncertainty.forms.spec.FormSpec` per form in :data:`FORMS`.

Everything else asks it: what a form takes (:func:`required_inputs`, :func:`optional_inputs`), solves
(:func:`solved`) and returns (:func:`outputs`, :func:`study_outputs`, :func:`output_unit`), where it is
offered (:data:`GENERAL_FORMS`, :func:`offered_in`), what it needs of the study
(:func:`tissue_mass_reason`), which observation kinds it alone predicts (:func:`forms_predicting`) and the
notes its draws call for (:func:`output_notes`). Output names and units come from here, never from
running the model; ``tests/test_forms_catalogue.py`` checks the two agree.

Adding a form is one entry in :data:`FORMS` plus its evaluate function (in ``forms/`` or physiology).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from functools import lru_cache
from typing import Any

from uncertainty.core.errors import StudyError
from uncertainty.core.units import CANONICAL
from uncertainty.forms import general, glomerular, two_pore, whole_body
from uncertainty.forms.spec import PI_REF, TISSUE_MASS, FormFunction, FormSpec, Output, TissueExtras
from uncertainty.forms.study_like import StudyLike

#: Outputs of every form, first and in this order (mL/min/100g, then mmHg).
COMMON_OUTPUTS = (
    Output("Jv", "mL/min/100g"),
    Output("net_pressure", "mmHg"),
    Output("force_Pc", "mmHg"),
    Output("force_Pi", "mmHg"),
    Output("force_pi_c", "mmHg"),
    Output("force_pi_i", "mmHg"),
)

#: Whole-tissue filtration, after the form's own outputs, when the study gives a tissue mass.
WHOLE_TISSUE_OUTPUTS = (
    Output("Jv_mL_per_h", "mL/h", (TISSUE_MASS,)),
    Output("Jv_L_per_day", "L/day", (TISSUE_MASS,)),
)

_VOLUME_NEEDS = ("C_tis", PI_REF)
_STEADY_OUTPUTS = (Output("Pi", "mmHg"), Output("pi_i", "mmHg"), Output("ratio", "1"),
                   Output("JL", "mL/min/100g"), Output("oedema_volume", "mL/100g", _VOLUME_NEEDS),
                   Output("safety_margin", "mmHg", ("Pi_break",)), Output("Pi_early", "mmHg", ("P_imb",)))
#: The safety factors of the steady forms (``general.SAFETY_INPUTS``): the break of the pressure-volume
#: curve (C_tis_high above Pi_break) and the lymph capacity JL_max.
#: P_imb: the shift of the pressure-volume relation of an injured matrix (burns): it acts inside the steady solve
#: (the injured tissue holds at Pi the volume the intact one holds at Pi - P_imb) and gives the early Pi (Pi_early).
_SAFETY_OPTIONAL = ("C_tis", "C_tis_high", "Pi_break", "JL_max", "P_imb")


def _lung(evaluate: FormFunction) -> TissueExtras:
    """The steady forms in the lung: EVLW0 (mL/100g) and M_lung (g/kg) in, the extravascular lung water EVLW
    (mL/100g) and its index EVLWI (mL/kg predicted body weight) out."""
    return TissueExtras(optional=("EVLW0", "M_lung", "G_flood", "P_flood", "k_AFC"),
                        outputs=(Output("EVLW", "mL/100g", _VOLUME_NEEDS),
                                 Output("EVLWI", "mL/kg", (*_VOLUME_NEEDS, "M_lung")),
                                 Output("flooding", "mL/min/100g", ("G_flood", "P_flood"))),
                        evaluate=evaluate)


#: The model forms (``[study] model``), in display order.
FORMS: dict[str, FormSpec] = {spec.name: spec for spec in (
    FormSpec(
        name="classic",
        summary="Jv from the six Starling quantities",
        evaluate=general.classic,
        required=("Kf", "Pc", "Pi", "pi_c", "pi_i", "sigma"),
        solved=("pi_g",),
        # the blood-brain barrier reflects small solutes too: the crystalloid osmotic term (physiology.osmotic)
        per_tissue={"brain": TissueExtras(optional=general.CRYSTALLOID_INPUTS,
                                          outputs=(Output("force_osm", "mmHg", general.CRYSTALLOID_INPUTS),),
                                          evaluate=general.brain_classic)},
    ),
    FormSpec(
        name="steady_state",
        summary="Pi and pi_i solved from the lymph and protein balance",
        evaluate=general.steady_state,
        required=("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"),
        optional=_SAFETY_OPTIONAL,
        solved=("Pi", "pi_i", "pi_g"),
        outputs=_STEADY_OUTPUTS,
        per_tissue={"lung": _lung(general.steady_state_lung)},
    ),
    FormSpec(
        name="revised",
        summary="glycocalyx filter, pi_g solved",
        evaluate=general.revised,
        required=("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"),
        optional=(*_SAFETY_OPTIONAL, "PS_large"),
        solved=("Pi", "pi_i", "pi_g"),
        outputs=(Output("pi_g", "mmHg"), *_STEADY_OUTPUTS),
        per_tissue={
            "lung": _lung(general.revised_lung),
            # the absorbing mucosa: epithelial fluid J_epi, no large-pore route (physiology.mucosa)
            "intestinal_mucosa": TissueExtras(inputs=("J_epi",), unused=("PS_large", "JL_max"),
                                              evaluate=general.absorbing_revised),
        },
    ),
    FormSpec(
        name="two_pore",
        summary=("small and large pores in parallel (Rippe & Haraldsson 1994): Pi and pi_i solved; "
                 "inflammation raises the large-pore share alpha_L"),
        evaluate=two_pore.evaluate,
        required=("Kf", "Pc", "pi_c", "L", "Pi_L0", *two_pore.PORE_INPUTS),
        optional=_SAFETY_OPTIONAL,
        solved=("Pi", "pi_i", "pi_g"),
        outputs=(Output("Pi", "mmHg"), Output("pi_i", "mmHg"), Output("ratio", "1"), Output("JL", "mL/min/100g"),
                 Output("oedema_volume", "mL/100g", _VOLUME_NEEDS), Output("safety_margin", "mmHg", ("Pi_break",)),
                 Output("Pi_early", "mmHg", ("P_imb",)), Output("Jv_large", "mL/min/100g"),
                 Output("sigma_eff", "1")),
        tissues=("skin_subcutis", "skeletal_muscle"),
    ),
    FormSpec(
        name="glomerular",
        summary="filtration along the glomerular capillary from Cp and RPF; needs tissue_mass",
        evaluate=glomerular.evaluate,
        # Pc = P_GC, Pi = Bowman's space pressure, Cp = afferent plasma protein, RPF = renal plasma flow
        required=("Kf", "Pc", "Pi", "Cp", "RPF"),
        solved=("pi_i", "pi_g"),
        outputs=(Output("GFR", "mL/min"), Output("FF", "1"), Output("pi_eff", "mmHg"), Output("x_equilibrium", "1"),
                 Output("equilibrium", "1"), Output("Kf_lower_bound", "mL/min/mmHg/100g"),
                 Output("no_filtration", "1")),
        tissues=("glomerulus",),
        note_outputs=glomerular.NOTE_OUTPUTS,
        notes=glomerular.notes,
        tissue_mass="(the kidney mass) to relate renal plasma flow (mL/min) to Kf per 100 g",
        observation_kinds=("GFR", "RPF", "filtration_fraction"),
    ),
    FormSpec(
        name="whole_body",
        summary=("plasma, red cells and two interstitial beds over time after infusions and bleeds "
                 "([[interventions]], [timeline]); scalar outputs: the resting state of the study's bed"),
        evaluate=whole_body.evaluate,
        required=("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0", "C_tis"),
        optional=("C_tis_high", "Pi_break", "JL_max", "r", "Cp", "t_el"),
        solved=("Pi", "pi_i", "pi_g"),
        outputs=_STEADY_OUTPUTS,
        tissues=("skeletal_muscle",),
    ),
)}

#: Every form's name; the general forms (offered by a prior set that lists no ``[set] models``).
MODEL_FORMS = tuple(FORMS)
GENERAL_FORMS = tuple(name for name, spec in FORMS.items() if spec.tissues is None)

#: Derived quantities a study may show as outputs (``priors.derived`` targets; units from core.units).
DERIVED_OUTPUTS = ("Pc", "pi_c", "pi_i", "JL_max")


def form(name: str) -> FormSpec:
    """The catalogue entry of a model form.

    Parameters
    ----------
    name : str
        ``[study] model``.

    Returns
    -------
    FormSpec

    Raises
    ------
    StudyError
        For an unknown form (key ``study.model``).
    """
    spec = FORMS.get(name)
    if spec is None:
        raise StudyError("unknown model form; use one of " + ", ".join(MODEL_FORMS), key="study.model", value=name)
    return spec


def required_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities a model form needs as inputs (before derivations such as Pc from Pa, Pv, r).

    Parameters
    ----------
    model_form : str
        The form.
    tissue : str, optional
        With a tissue, plus that tissue's own (e.g. J_epi, mL/min/100g, for the revised form of the
        intestinal mucosa).

    Returns
    -------
    tuple of str
        Symbols (canonical units as ``core.units.CANONICAL``).

    Raises
    ------
    StudyError
        For an unknown form.
    """
    spec = form(model_form)
    return spec.required + spec.extras(tissue).inputs


def optional_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities a model form uses when the study has them (less those the tissue does not use, plus
    the tissue's own optional inputs, e.g. EVLW0 in mL/100g for the steady lung forms).

    Raises
    ------
    StudyError
        For an unknown form.
    """
    spec = form(model_form)
    extras = spec.extras(tissue)
    return tuple(s for s in spec.optional if s not in extras.unused) + extras.optional


def tissue_inputs(model_form: str, tissue: str | None) -> tuple[str, ...]:
    """Inputs the form needs for this tissue only (mentioned in messages: "... for <tissue>").

    Raises
    ------
    StudyError
        For an unknown form.
    """
    return form(model_form).extras(tissue).inputs


def solved(model_form: str) -> tuple[str, ...]:
    """Quantities the form solves (never sampled there; a prior for one is refused).

    Raises
    ------
    StudyError
        For an unknown form.
    """
    return form(model_form).solved


def offered_in(model_form: str, tissue: str) -> bool:
    """Whether a prior set for ``tissue`` may list the form (general forms: every tissue).

    Raises
    ------
    StudyError
        For an unknown form.
    """
    tissues = form(model_form).tissues
    return tissues is None or tissue in tissues


def tissue_mass_reason(model_form: str) -> str | None:
    """Why the form needs ``[study] tissue_mass`` (completes "the <form> form needs tissue_mass ..."),
    or None when it does not.

    Raises
    ------
    StudyError
        For an unknown form.
    """
    return form(model_form).tissue_mass


def forms_predicting(kind: str) -> tuple[str, ...]:
    """The forms that alone predict an observation kind (empty: any form does).

    Parameters
    ----------
    kind : str
        An observation kind (``[[observations]] kind``).

    Returns
    -------
    tuple of str
    """
    return tuple(name for name, spec in FORMS.items() if kind in spec.observation_kinds)


def declared_outputs(model_form: str, tissue: str | None = None) -> tuple[Output, ...]:
    """Every output the form may give for a tissue, in order: the common ones, the form's own, the
    tissue's own, the whole-tissue flows (each with its unit and what it needs).

    Raises
    ------
    StudyError
        For an unknown form.
    """
    spec = form(model_form)
    return COMMON_OUTPUTS + spec.outputs + spec.extras(tissue).outputs + WHOLE_TISSUE_OUTPUTS


@lru_cache(maxsize=256)
def _outputs(model_form: str, tissue: str | None, have: frozenset[str], derived: tuple[str, ...]) -> tuple[str, ...]:
    names = [o.name for o in declared_outputs(model_form, tissue) if all(n in have for n in o.needs)]
    return tuple(names + [d for d in derived if d not in names])


def outputs(model_form: str, tissue: str | None = None, have: Iterable[str] = (),
            derived: Iterable[str] = ()) -> list[str]:
    """Output names ``evaluate`` returns for a form, in its order.

    Parameters
    ----------
    model_form : str
        The form.
    tissue : str, optional
        The tissue (its own outputs, e.g. EVLW for the steady lung forms).
    have : iterable of str
        What the study has: its input symbols, ``"tissue_mass"`` when it gives one, ``"Pi_ref"`` when
        its tissue has a reference interstitial pressure.
    derived : iterable of str
        Derived quantities, shown after the outputs.

    Returns
    -------
    list of str

    Raises
    ------
    StudyError
        For an unknown form.
    """
    return list(_outputs(model_form, tissue, frozenset(have), tuple(derived)))


def study_facts(study: StudyLike) -> frozenset[str]:
    """What a study has, in the sense of :func:`outputs`: its inputs and derived quantities,
    ``"tissue_mass"`` and ``"Pi_ref"`` when set."""
    derived: Mapping[str, Any] = getattr(study, "derived", None) or {}
    facts = set(study.priors) | set(derived)
    if getattr(study, "tissue_mass_kg", None) is not None:
        facts.add(TISSUE_MASS)
    if getattr(study, "Pi_ref", None) is not None:
        facts.add(PI_REF)
    return frozenset(facts)


def study_outputs(study: StudyLike) -> list[str]:
    """Output names ``evaluate(study, ...)`` returns, in order (from the catalogue only).

    Parameters
    ----------
    study : StudyLike
        A study (``model``, ``priors``; ``tissue``, ``derived``, ``tissue_mass_kg``, ``Pi_ref`` when set).

    Returns
    -------
    list of str

    Raises
    ------
    StudyError
        For an unknown form.
    """
    derived: Mapping[str, Any] = getattr(study, "derived", None) or {}
    return outputs(study.model, getattr(study, "tissue", None), study_facts(study), tuple(derived))


def output_names(model_form: str, tissue_mass: bool = False, derived: tuple[str, ...] = (),
                 tissue: str | None = None) -> list[str]:
    """Every output a form can give (volumes included, as if the study had C_tis and a reference Pi).

    Parameters
    ----------
    model_form : str
        The form.
    tissue_mass : bool
        Whether the study gives a tissue mass (whole-tissue flows).
    derived : tuple of str
        Derived quantities shown too.
    tissue : str, optional
        The tissue (its own outputs).

    Returns
    -------
    list of str

    Raises
    ------
    StudyError
        For an unknown form.
    """
    have = {"C_tis", PI_REF} | ({TISSUE_MASS} if tissue_mass else set())
    return outputs(model_form, tissue, have, derived)


def all_outputs() -> frozenset[str]:
    """Every output name of every form (derived quantities excluded)."""
    return frozenset(o.name for name, spec in FORMS.items()
                     for t in (None, *spec.per_tissue) for o in declared_outputs(name, t))


def output_unit(name: str) -> str:
    """Canonical unit of an output or derived quantity (``""`` when unknown).

    Parameters
    ----------
    name : str
        An output name (e.g. ``Jv``) or a derived quantity (e.g. ``Pc``).

    Returns
    -------
    str
        A pint-parsable unit (``/100g``: per 100 g of tissue).
    """
    return OUTPUT_UNITS.get(name, CANONICAL.get(name, ""))


def _units() -> dict[str, str]:
    out: dict[str, str] = {}
    for name, spec in FORMS.items():
        for t in (None, *spec.per_tissue):
            for o in declared_outputs(name, t):
                if out.setdefault(o.name, o.unit) != o.unit:
                    raise AssertionError(f"output {o.name} has two units in the catalogue")
    for s in DERIVED_OUTPUTS:
        out.setdefault(s, CANONICAL[s])
    return out


#: Canonical unit of every output (and of the derived quantities shown as outputs).
OUTPUT_UNITS: dict[str, str] = _units()

#: Outputs each form's notes read (analyses keep these draws even when not reported).
NOTE_OUTPUTS: dict[str, tuple[str, ...]] = {n: s.note_outputs for n, s in FORMS.items() if s.note_outputs}


def note_outputs(model_form: str | None) -> tuple[str, ...]:
    """Outputs whose draws the form's notes read (empty for forms without notes or an unknown form)."""
    spec = FORMS.get(model_form or "")
    return spec.note_outputs if spec is not None and spec.notes is not None else ()


def output_notes(model_form: str | None, draws: Mapping[str, Any]) -> list[str]:
    """Plain-language notes a batch of model outputs calls for (numpy arrays, one value per draw).

    Parameters
    ----------
    model_form : str or None
        The form (e.g. ``glomerular``: the "Kf is only bounded below" note of
        ``physiology.glomerulus.equilibrium_note``).
    draws : mapping
        Output name -> draws; the outputs of :func:`note_outputs` must be present.

    Returns
    -------
    list of str
        Empty for forms without notes or when a needed output is missing.
    """
    spec = FORMS.get(model_form or "")
    if spec is None or spec.notes is None or any(k not in draws for k in spec.note_outputs):
        return []
    return spec.notes(draws)


# ---- tables derived from FORMS (kept for callers that read them)

#: Inputs each form needs (after derivations), and inputs it uses when present.
REQUIRED_INPUTS: dict[str, tuple[str, ...]] = {n: s.required for n, s in FORMS.items()}
OPTIONAL_INPUTS: dict[str, tuple[str, ...]] = {n: s.optional for n, s in FORMS.items()}
#: (form, tissue) -> inputs needed there only / optional inputs unused there / used there only / outputs.
TISSUE_INPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    (n, t): e.inputs for n, s in FORMS.items() for t, e in s.per_tissue.items() if e.inputs}
TISSUE_UNUSED: dict[tuple[str, str], tuple[str, ...]] = {
    (n, t): e.unused for n, s in FORMS.items() for t, e in s.per_tissue.items() if e.unused}
TISSUE_OPTIONAL: dict[tuple[str, str], tuple[str, ...]] = {
    (n, t): e.optional for n, s in FORMS.items() for t, e in s.per_tissue.items() if e.optional}
TISSUE_OUTPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    (n, t): tuple(o.name for o in e.outputs) for n, s in FORMS.items() for t, e in s.per_tissue.items() if e.outputs}
#: Quantities a form solves (never sampled there).
SOLVED: dict[str, tuple[str, ...]] = {n: s.solved for n, s in FORMS.items()}


# ---- study vocabulary that is not per form

#: Quantities that are results, never inputs.
OUTPUT_ONLY = frozenset({"Jv", "JL", "net_pressure", "oedema_volume", "EVLW", "EVLWI", "flooding", "safety_margin",
                         "Jv_organ", "GFR", "ratio", "volume", "swelling_rate", "time", "tissue_mass", "density",
                         "osmotic_pressure", "Jv_large", "sigma_eff"})

#: Display order of inputs (others follow alphabetically).
INPUT_ORDER = ("Kf", "Pc", "Pa", "Pv", "r", "LAP", "PAP", "Pi", "pi_c", "Cp", "C_alb", "C_glob", "pi_i",
               "Ci", "Ci_alb", "Ci_glob", "sigma", "PS", "PS_large", "C_tis", "C_tis_high", "Pi_break", "L", "Pi_L0",
               "JL_max", "JL_reserve", "t_el", "G_flood", "P_flood", "Osm_p", "Osm_i", "sigma_s", "alpha_L", "r_S",
               "r_L")

#: Tissues without conventional lymphatics: lymph-flow observations are refused there, with the reason.
NO_LYMPH = {"brain": "the brain has no conventional lymphatics (interstitial fluid leaves by perivascular "
                     "and CSF routes), so a lymph flow does not measure its filtration"}
