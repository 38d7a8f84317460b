"""The catalogue of model forms: what each form takes, solves and returns, and for which tissues.
"""

from __future__ import annotations

from uncertainty.core.errors import StudyError

#: Model forms (``[study] model``). ``glomerular`` is organ-specific: a prior set offers it only when its
#: ``[set] models`` lists it (the default is the three general forms).
MODEL_FORMS = ("classic", "steady_state", "revised", "glomerular")
GENERAL_FORMS = ("classic", "steady_state", "revised")

#: Inputs each model form needs (after derivations), and inputs it uses when present.
REQUIRED_INPUTS: dict[str, tuple[str, ...]] = {
    "classic": ("Kf", "Pc", "Pi", "pi_c", "pi_i", "sigma"),
    "steady_state": ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"),
    "revised": ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"),
    # glomerular (physiology.glomerulus): Pc = P_GC, Pi = Bowman's space pressure, Cp = afferent plasma
    # protein, RPF = renal plasma flow (whole kidney, mL/min; needs study.tissue_mass)
    "glomerular": ("Kf", "Pc", "Pi", "Cp", "RPF"),
}


OPTIONAL_INPUTS: dict[str, tuple[str, ...]] = {
    "classic": (),
    "steady_state": ("C_tis", "C_tis_high", "Pi_break"),
    "revised": ("C_tis", "C_tis_high", "Pi_break", "PS_large"),
    "glomerular": (),
}


#: Inputs a form needs for one tissue only, (form, tissue) -> symbols: the revised form of the absorbing
#: intestinal mucosa takes the epithelial fluid input J_epi (``physiology.mucosa.absorbing_steady_state``).
TISSUE_INPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    ("revised", "intestinal_mucosa"): ("J_epi",),
}


#: Optional inputs of a form that one tissue does not use, (form, tissue) -> symbols (the absorbing mucosa
#: has no large-pore route: ``absorbing_steady_state`` takes no PS_large).
TISSUE_UNUSED: dict[tuple[str, str], tuple[str, ...]] = {
    ("revised", "intestinal_mucosa"): ("PS_large",),
}


#: Optional inputs a form uses for one tissue only: the steady lung forms take EVLW0, the extravascular
#: lung water at the reference Pi (``physiology.lung.extravascular_water``).
TISSUE_OPTIONAL: dict[tuple[str, str], tuple[str, ...]] = {
    ("steady_state", "lung"): ("EVLW0",),
    ("revised", "lung"): ("EVLW0",),
}


#: Outputs a form gives for one tissue only (with C_tis and the reference Pi, as ``oedema_volume``).
TISSUE_OUTPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    ("steady_state", "lung"): ("EVLW",),
    ("revised", "lung"): ("EVLW",),
}


#: Quantities a form solves (never sampled there).
SOLVED: dict[str, tuple[str, ...]] = {
    "classic": ("pi_g",),
    "steady_state": ("Pi", "pi_i", "pi_g"),
    "revised": ("Pi", "pi_i", "pi_g"),
    "glomerular": ("pi_i", "pi_g"),
}


#: Quantities that are results, never inputs.
OUTPUT_ONLY = frozenset({"Jv", "JL", "net_pressure", "oedema_volume", "EVLW", "Jv_organ", "GFR", "ratio", "volume",
                         "swelling_rate", "time", "tissue_mass", "density", "osmotic_pressure"})


#: Display order of inputs (others follow alphabetically).
INPUT_ORDER = ("Kf", "Pc", "Pa", "Pv", "r", "LAP", "PAP", "Pi", "pi_c", "Cp", "C_alb", "C_glob", "pi_i",
               "Ci", "Ci_alb", "Ci_glob", "sigma", "PS", "PS_large", "C_tis", "L", "Pi_L0", "JL_max")


def required_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities the model form needs as inputs (before derivations such as Pc from Pa, Pv, r); with
    ``tissue``, plus the ones that tissue's form needs (:data:`TISSUE_INPUTS`, e.g. J_epi for the revised
    form of the intestinal mucosa)."""
    if model_form not in REQUIRED_INPUTS:
        raise StudyError("unknown model form; use one of " + ", ".join(MODEL_FORMS), key="study.model",
                         value=model_form)
    return REQUIRED_INPUTS[model_form] + TISSUE_INPUTS.get((model_form, tissue or ""), ())


def optional_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities the model form uses when the study has them (``OPTIONAL_INPUTS`` less ``TISSUE_UNUSED``,
    plus ``TISSUE_OPTIONAL``)."""
    unused = TISSUE_UNUSED.get((model_form, tissue or ""), ())
    return tuple(s for s in OPTIONAL_INPUTS[model_form] if s not in unused) + \
        TISSUE_OPTIONAL.get((model_form, tissue or ""), ())


#: Outputs of the glomerular form beyond the common ones (``physiology.glomerulus``).
GLOMERULAR_OUTPUTS = ["GFR", "FF", "pi_eff", "x_equilibrium", "equilibrium", "Kf_lower_bound", "no_filtration"]


#: Tissues without conventional lymphatics: lymph-flow observations are refused there, with the reason.
NO_LYMPH = {"brain": "the brain has no conventional lymphatics (interstitial fluid leaves by perivascular "
                     "and CSF routes), so a lymph flow does not measure its filtration"}


#: Observation kinds that only the glomerular form predicts.
GLOMERULAR_KINDS = ("GFR", "RPF", "filtration_fraction")


def output_names(model_form: str, tissue_mass: bool = False, derived: tuple[str, ...] = (),
                 tissue: str | None = None) -> list[str]:
    """Outputs ``model.evaluate`` returns for a model form (``derived``: derived quantities shown too;
    ``tissue``: plus that tissue's own, :data:`TISSUE_OUTPUTS`, e.g. EVLW for the steady lung forms)."""
    out = ["Jv", "net_pressure", "force_Pc", "force_Pi", "force_pi_c", "force_pi_i"]
    if model_form in ("steady_state", "revised"):
        out += ["Pi", "pi_i", "ratio", "JL", "oedema_volume"]
        out += list(TISSUE_OUTPUTS.get((model_form, tissue or ""), ()))
    if model_form == "revised":
        out += ["pi_g"]
    if model_form == "glomerular":
        out += GLOMERULAR_OUTPUTS
    if tissue_mass:
        out += ["Jv_mL_per_h", "Jv_L_per_day"]
    out += [d for d in derived if d not in out]
    return out
