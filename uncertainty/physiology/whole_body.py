"""Whole-body fluid shifts over time: plasma, red cells and two interstitial beds (model form ``whole_body``).

State (one value per draw; shape ``(n,)`` arrays or scalars):

- plasma volume ``Vp`` (mL) and plasma protein mass ``Qp`` (g); red-cell volume ``Vrbc`` (mL), constant
  except when blood is lost (whole blood leaves at the current haematocrit);
- for each tissue bed (skeletal muscle; skin and subcutis): interstitial pressure ``Pi`` (mmHg; the volume
  follows from the bed's pressure-volume curve) and interstitial protein mass ``Qi`` (g);
- cumulative urine ``U`` (mL) and cumulative plasma lost by bleeding ``B`` (mL).

Exchange in each bed uses the steady forms' physiology: Starling filtration (``starling.filtration``) with
the capillary pressure raised by blood-volume expansion (``capillary``: a venous pressure change dPv gives
dPc = dPv/(1 + r)); the smooth two-slope pressure-volume curve and volume-driven saturating lymph of the
safety factors (the curve of ``interstitium.smooth_tissue_volume``, ``tissue_compliance`` and
``volume_lymph_flow``, evaluated once per stage with its constant terms computed before the step loop); protein
by convection and diffusion (``solute.protein_flux``, Patlak); oncotic pressures from concentration by the
Landis-Pappenheimer total-protein cubic (``oncotic.pi_cubic``). Each bed starts in its own safety-factor
steady state (``balance.safety_steady_state``), so without interventions nothing moves.

Renal elimination follows volume kinetics (Hahn's models): above a basal urine flow, fluid leaves at a
clearance constant k_r (mL/min) times the relative plasma dilution (Vp - Vp0)/Vp0, i.e. at the rate constant
k_r/Vp0 (1/min) times the plasma volume expansion. The crystalloid's rate constant is ln 2 over the elimination
half-life of infused Ringer's acetate in male volunteers, 38 min (95% CI 33-42; 24 min in females), which Hahn RG
2016 Biol Sex Differ 7:54 (abstract) defines exactly so: excreted urine divided by the modelled plasma volume
expansion over time, from 67 infusions in male volunteers (population kinetics, urine measured). An older
single-study constant multiplied the dilution of a larger expandable space (Svensen C, Hahn RG 1997, 95 mL/min on
a 4.8 L space; Drobin D, Hahn RG 1999 Anesthesiology 90:81, 133 mL/min in a two-volume model); applied to the
plasma dilution it doubles the early urine (about 720 mL by 30 min after 25 mL/kg against a peak of 19 (13-31)
mL/min of urine in conscious volunteers, Rodhe P et al. 2010 Comput Math Methods Med 11:341, abstract), which is
why the half-life form is used. The ``whole_body`` form draws the half-life per subject from its prior ``t_el``
(``priors/skeletal_muscle.toml``: median 38 min, wider for saline and concentrated urine), so that renal
elimination is uncertain and readings of urine or haemoglobin update it; the constant is the default without it.
Here urine = max(u_basal + k_r(t) (Vp - Vp0)/Vp0, 0); the basal urine is taken as
balanced by basal intake, so only the excess leaves the plasma. Colloids have their own clearance constant on the
plasma dilution (7.1 mL/min, Lee et al. 2010, see :data:`K_R_COLLOID_ML_MIN`); k_r(t) (:func:`renal_terms`) is the
volume-weighted mean of the constants of the fluids infused by t (the crystalloid's before any infusion and for
bleeds).

Infused albumin enters the plasma protein mass (total protein, whose oncotic pressure the Landis-Pappenheimer
total-protein cubic gives) as the total-protein mass of equal oncotic pressure: the fluid's oncotic pressure from
its albumin concentration by the albumin cubic, then the total-protein concentration with that pressure
(:data:`FLUID_TOTAL_PROTEIN_EQUIVALENT_G_PER_DL`; 5% albumin, 20 mmHg, counts as about 6.0 g/dL of plasma
protein, not 5). Albumin is the more effective protein per gram (smaller molecule), which treating its grams as
total protein ignores.

Units: volumes mL, protein mass g, concentrations g/dL (g per 100 mL), pressures mmHg, flows mL/min, times
min. Per-bed conductances and compliances are per 100 g of tissue (as in the prior sets) and are scaled by
the bed mass ``m`` in units of 100 g. Everything is ``xp`` arithmetic (numpy or pytensor.tensor);
:func:`simulate` steps a fixed number of classical fourth-order Runge-Kutta steps (a Python loop, the same
count for every draw), with the intervention rates held at their mean over each step.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.physiology.balance import safety_steady_state
from uncertainty.physiology.interstitium import BREAK_WIDTH
from uncertainty.physiology.oncotic import pi_cubic, pi_cubic_slope
from uncertainty.physiology.starling import filtration

Array = Any

# --- whole-body constants (each with its origin) ------------------------------------------------------

#: Elimination half-life of infused crystalloid, min: Hahn RG 2016 Biol Sex Differ 7:54 (abstract; population
#: kinetics of 67 infusions of Ringer's acetate in male volunteers): 38 min (95% CI 33-42), defined as excreted urine
#: over the modelled plasma volume expansion; 24 min (21-27) in females.
ELIMINATION_HALF_LIFE_MIN = 38.0
#: Basal urine flow, mL/min: common practice (about 1 mL/kg/h in an adult, 1.2 mL/min at 70 kg).
U_BASAL_ML_MIN_PER_KG = 1.0 / 60.0
#: Blood volume, mL/kg: common practice (about 70 mL/kg in an adult man).
BLOOD_VOLUME_ML_PER_KG = 70.0
#: Haematocrit (large-vessel), 1: common practice (adult reference about 0.40-0.45).
HAEMATOCRIT = 0.42
#: Whole-body vascular compliance, mL/mmHg per kg: from memory (Guyton: about 100 mL/mmHg for the systemic
#: circulation of an adult, i.e. about 1.5 mL/mmHg/kg; Rothe CF 1993 J Appl Physiol 74:499 reviews the
#: measurement of mean circulatory filling pressure).
VASCULAR_COMPLIANCE_ML_PER_MMHG_PER_KG = 1.5

#: Body weight per volume of fluid gained or lost, kg/L: common practice (1 kg for 1 L at the bedside; water and
#: near-isotonic fluids are about 1.0 kg/L, whole blood about 1.06, a difference of 3% of a bleed's volume, from
#: memory, within a scale's error for a single unit).
KG_PER_L = 1.0
#: Insensible water loss of a resting adult, mL/min: Institute of Medicine 2005, Dietary Reference Intakes for
#: Water, Potassium, Sodium, Chloride, and Sulfate (National Academies Press), chapter 4 (read through the search
#: tool): diffusion through the skin about 450 mL/day (p. 83, after Kuno 1956) and respiratory loss about 250-350
#: mL/day for sedentary persons (p. 86, after Hoyt and Honig 1996); (450 + 300) mL/day over 1440 min/day. Not
#: scaled by body mass; fever, sweating, a warm room and hyperpnoea raise it several-fold.
INSENSIBLE_LOSS_ML_MIN = (450.0 + 300.0) / 1440.0

#: Clearance constant of volume kinetics for a colloid, mL/min: Lee EH, Kim SK, Yeo YG, Choi KT 2010 Korean J
#: Anesthesiol 58(6):514-520 (abstract, PMC2892583, read through the search tool): elimination rate constant
#: 7.1 +/- 3.5 mL/min in wakeful volunteers given 500 mL of 6% hydroxyethyl starch over 20 min after donating
#: 400 mL of blood (19.4 +/- 4.6 under desflurane). A starch value, used for albumin too (no volume-kinetic
#: clearance constant for albumin found); their fluid space was 7.7 L, larger than the plasma volume whose
#: dilution it multiplies here, so if anything it overstates the colloid's renal elimination in this model.
K_R_COLLOID_ML_MIN = 7.1

#: Protein content of the fluids, g/dL (common practice: the labelled concentrations; albumin solutions).
FLUID_PROTEIN_G_PER_DL: dict[str, float] = {"crystalloid": 0.0, "albumin_5": 5.0, "albumin_20": 20.0}
#: Clearance constant of volume kinetics by colloid, mL/min on the relative plasma dilution (origin at
#: K_R_COLLOID_ML_MIN); the crystalloid's is the body's own (:func:`body_parameters`).
FLUID_CLEARANCE_ML_MIN: dict[str, float] = {"albumin_5": K_R_COLLOID_ML_MIN, "albumin_20": K_R_COLLOID_ML_MIN}


def total_protein_equivalent(albumin_g_per_dl: float) -> float:
    """Total-protein concentration (g/dL) with the oncotic pressure of an albumin solution of ``albumin_g_per_dl``.

    The albumin Landis-Pappenheimer cubic gives the solution's oncotic pressure (mmHg), the total-protein cubic
    inverted gives the plasma-protein concentration of equal pressure (``oncotic.COEFFICIENTS``).

    Parameters
    ----------
    albumin_g_per_dl : float
        Albumin concentration, g/dL (>= 0).

    Returns
    -------
    float
        Total-protein concentration of equal oncotic pressure, g/dL.
    """
    return float(protein_from_oncotic(pi_cubic(float(albumin_g_per_dl), "albumin"), n_steps=40))


#: The tissue beds, in order.
BEDS = ("muscle", "skin")


@dataclass(frozen=True)
class Dose:
    """One intervention in canonical units.

    Attributes
    ----------
    kind : str
        ``infusion`` or ``bleed``.
    volume : float
        mL (> 0).
    start, duration : float
        min (duration 0: given within the step that contains ``start``).
    protein : float
        Protein concentration of an infused fluid as labelled, g/dL (0 for crystalloid and for bleeds).
    clearance : float or None
        Volume-kinetic clearance constant of an infused colloid on the relative plasma dilution, mL/min
        (:data:`FLUID_CLEARANCE_ML_MIN`); None for a crystalloid (the body's own constant) and for bleeds.
    protein_equivalent : float
        Total-protein concentration of equal oncotic pressure, g/dL (:func:`total_protein_equivalent`; what
        :func:`simulate` adds to the plasma protein mass).
    """

    kind: str
    volume: float
    start: float
    duration: float
    protein: float = 0.0
    clearance: float | None = None
    protein_equivalent: float = 0.0


def infusion(fluid: str, volume: float, start: float = 0.0, duration: float = 0.0) -> Dose:
    """An infusion of ``fluid`` (a key of :data:`FLUID_PROTEIN_G_PER_DL`) with its protein and clearance.

    Parameters
    ----------
    fluid : str
        ``crystalloid``, ``albumin_5`` or ``albumin_20``.
    volume : float
        mL.
    start, duration : float
        min.

    Returns
    -------
    Dose

    Raises
    ------
    KeyError
        An unknown fluid (the study schema refuses it first).
    """
    c = FLUID_PROTEIN_G_PER_DL[fluid]
    return Dose("infusion", volume, start, duration, c, FLUID_CLEARANCE_ML_MIN.get(fluid),
                total_protein_equivalent(c) if c > 0 else 0.0)


def delivered(d: Dose, t: float) -> float:
    """Volume (mL) of the dose ``d`` given by time ``t`` (min), as :func:`step_rates` delivers it."""
    if d.duration > 0:
        return d.volume * max(0.0, min(t, d.start + d.duration) - d.start) / d.duration
    return d.volume if d.start < t else 0.0


def renal_terms(doses: Sequence[Dose], t: float) -> tuple[float, float]:
    """The clearance constant for the fluids infused by time ``t`` (min), as k_r(t) = a k_r + b.

    Each fluid has its own clearance constant (the body's crystalloid constant ``k_r``, or a colloid's
    :data:`FLUID_CLEARANCE_ML_MIN`); a mixed or sequential regimen takes the mean of the constants of the fluids
    infused so far, weighted by the volume of each given by ``t``, so a colloid alone is cleared at its own
    constant, a crystalloid alone at its own, and a crystalloid given after a colloid more slowly than alone (the
    direction, not the size, of the interaction reported by Hahn RG and colleagues 2013 Crit Care 17:R104,
    abstract: Ringer's elimination half-life five times longer after 6% starch). Bleeds do not enter; before any
    infusion the constant is the crystalloid's (a = 1, b = 0).

    Parameters
    ----------
    doses : sequence of Dose
        The interventions.
    t : float
        Time, min.

    Returns
    -------
    a : float
        Volume share of the crystalloids among the fluids given by ``t`` (1).
    b : float
        Volume-weighted colloid clearance, sum over colloids V_i(t) k_i / sum over fluids V_i(t), mL/min.
    """
    vol = cryst = weighted = 0.0
    for d in doses:
        if d.kind == "bleed":
            continue
        v = delivered(d, t)
        vol += v
        if d.clearance is None:
            cryst += v
        else:
            weighted += v * d.clearance
    return (cryst / vol, weighted / vol) if vol > 0 else (1.0, 0.0)


def step_rates(doses: Sequence[Dose], t0: float, dt: float, equivalent: bool = False
               ) -> tuple[float, float, float]:
    """Mean infusion rate (mL/min), infused protein (g/min) and bleeding rate (mL/min of whole blood)
    over the step [t0, t0 + dt) (min).

    Parameters
    ----------
    doses : sequence of Dose
        The interventions.
    t0, dt : float
        Step start and length, min.
    equivalent : bool
        Protein as total-protein mass of equal oncotic pressure (``Dose.protein_equivalent``, what
        :func:`simulate` uses) rather than as labelled (``Dose.protein``).

    Returns
    -------
    tuple of float
        (infusion mL/min, protein g/min, bleed mL/min), each the volume delivered in the step over dt.
    """
    inf = prot = bleed = 0.0
    for d in doses:
        if d.duration > 0:
            overlap = max(0.0, min(t0 + dt, d.start + d.duration) - max(t0, d.start))
            vol = d.volume * overlap / d.duration
        else:
            vol = d.volume if t0 <= d.start < t0 + dt else 0.0
        if d.kind == "bleed":
            bleed += vol / dt
        else:
            inf += vol / dt
            prot += vol * (d.protein_equivalent if equivalent else d.protein) / 100.0 / dt
    return inf, prot, bleed


def protein_from_oncotic(pi: Array, xp: Any = np, n_steps: int = 8) -> Array:
    """Total protein (g/dL) whose Landis-Pappenheimer oncotic pressure is ``pi`` (mmHg), by fixed Newton steps.

    The cubic is increasing and convex for C >= 0, and the start pi/a1 lies at or right of the root, so the
    steps fall monotonically to it (``xp`` arithmetic; 8 steps reach double precision over 0-60 mmHg).

    Parameters
    ----------
    pi : array
        Oncotic pressure, mmHg (>= 0).
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Newton steps.

    Returns
    -------
    array
        Protein concentration, g/dL.
    """
    C = pi / 2.1  # a1 of the total-protein cubic (oncotic.COEFFICIENTS)
    for _ in range(n_steps):
        C = C - (pi_cubic(C, "total") - pi) / pi_cubic_slope(C, "total")
    return C


def body_parameters(body_mass_kg: float, *, haematocrit: Array = HAEMATOCRIT,
                    blood_volume_per_kg: Array = BLOOD_VOLUME_ML_PER_KG, k_r: Array | None = None,
                    compliance_per_kg: Array = VASCULAR_COMPLIANCE_ML_PER_MMHG_PER_KG) -> dict[str, Array]:
    """The plasma and renal parameters of a body of ``body_mass_kg`` (kg).

    Parameters
    ----------
    body_mass_kg : float
        Body mass, kg.
    haematocrit, blood_volume_per_kg, k_r, compliance_per_kg : array, optional
        Haematocrit (1), blood volume (mL/kg), crystalloid clearance constant on the relative plasma dilution
        (mL/min; default ln 2 / :data:`ELIMINATION_HALF_LIFE_MIN` times the resting plasma volume), vascular
        compliance (mL/mmHg/kg); other defaults are the module constants.

    Returns
    -------
    dict
        ``Vp0`` and ``Vrbc0`` (mL), ``C_vasc`` (mL/mmHg), ``k_r`` and ``u_basal`` (mL/min).
    """
    bv = blood_volume_per_kg * body_mass_kg
    vp0 = bv * (1.0 - haematocrit)
    if k_r is None:
        k_r = math.log(2.0) / ELIMINATION_HALF_LIFE_MIN * vp0
    return {"Vp0": vp0, "Vrbc0": bv * haematocrit, "C_vasc": compliance_per_kg * body_mass_kg,
            "k_r": k_r, "u_basal": U_BASAL_ML_MIN_PER_KG * body_mass_kg}


def blood_volume(body_mass_kg: float) -> float:
    """Blood volume (mL) of a body of ``body_mass_kg`` kg at :data:`BLOOD_VOLUME_ML_PER_KG` (common practice)."""
    return BLOOD_VOLUME_ML_PER_KG * body_mass_kg


# --- initial state and right-hand side --------------------------------------------------------------

def _bed_curve(b: Mapping[str, Array]) -> tuple[Array, Array, Array]:
    """C_tis, C_high, P_break of a bed (no break: C_high = C_tis)."""
    C = b["C_tis"]
    return C, b.get("C_tis_high", C), b.get("Pi_break", 0.0 * C)


def initial_state(body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]], Cp0: Array,
                  xp: Any = np) -> tuple[dict[str, Array], dict[str, Array]]:
    """The resting state: each bed at its safety-factor steady state.

    Parameters
    ----------
    body : mapping
        :func:`body_parameters` (plus ``r``, 1, the post- to pre-capillary resistance ratio).
    beds : mapping
        bed name -> ``m`` (mass, units of 100 g), ``Vi0`` (interstitial fluid volume, mL), ``Kf``
        (mL/min/mmHg/100g), ``Pc`` (mmHg), ``sigma`` (1), ``PS`` (mL/min/100g), ``L`` (mL/min/mmHg/100g),
        ``Pi_L0`` (mmHg), ``C_tis`` (mL/mmHg/100g) and optionally ``C_tis_high``, ``Pi_break``, ``JL_max``.
    Cp0 : array
        Resting plasma total protein, g/dL.
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    state : dict
        ``Vp``, ``Qp``, ``Vrbc``, ``U``, ``B`` and per bed ``Pi_<bed>``, ``Qi_<bed>``.
    rest : dict
        Resting references: ``Pi0_<bed>`` (mmHg), ``Cp0``.
    """
    pi_c0 = pi_cubic(Cp0, "total")
    zero = 0.0 * Cp0
    state = {"Vp": body["Vp0"] + zero, "Qp": body["Vp0"] * Cp0 / 100.0, "Vrbc": body["Vrbc0"] + zero,
             "U": zero, "B": zero}
    rest: dict[str, Array] = {"Cp0": Cp0}
    for name, b in beds.items():
        C, Ch, Pb = _bed_curve(b)
        ss = safety_steady_state(b["Kf"], b["Pc"], b["sigma"], b["PS"], pi_c0, b["L"], b["Pi_L0"], C_tis=C,
                                 C_high=Ch, P_break=Pb, JL_max=b.get("JL_max"), Cp=Cp0, xp=xp)
        state[f"Pi_{name}"] = ss["Pi"] + zero
        state[f"Qi_{name}"] = ss["ratio"] * Cp0 * b["Vi0"] / 100.0 + zero
        rest[f"Pi0_{name}"] = ss["Pi"] + zero
    return state, rest


class _Prepared:
    """What :func:`fluxes` needs that does not change over time, computed once per simulation.

    The tissue curve is that of ``interstitium.smooth_tissue_volume`` / ``tissue_compliance`` /
    ``volume_lymph_flow`` with its terms regrouped per bed so that each stage costs one softplus and no
    constant work: z = (Pi - P_break)/w; the bed's interstitial volume above rest
    Vx = m C Pi + m (C_high - C) w sp(z) - [m C Pi0 + m (C_high - C) w sp(z0)]; the lymph drive
    u = L Pi + (L/C)(C_high - C) w sp(z) - [L Pi_L0 + (L/C)(C_high - C) w sp(zL)] (mL/min per 100 g; with JL_max,
    JL = m JL_max tanh(u / JL_max), else m u); the bed compliance m C + m (C_high - C) logistic(z), the
    logistic sharing the softplus's exponential. Filtration and protein flux take the bed's Kf and PS
    times its mass (the Peclet number is unchanged). Same quantities as the physiology functions, regrouped
    (agreement to rounding, checked against the stored reference in the tests).
    """

    def __init__(self, body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]],
                 rest: Mapping[str, Array], xp: Any) -> None:
        w = BREAK_WIDTH
        self.xp = xp
        self.Vp0, self.Vrbc0 = body["Vp0"], body["Vrbc0"]
        self.Vb0 = body["Vp0"] + body["Vrbc0"]
        self.Cp0 = rest["Cp0"]
        self.vasc = body["C_vasc"] * (1.0 + body["r"])
        self.k_r, self.u_basal = body["k_r"], body["u_basal"]
        self.beds: list[tuple[str, dict[str, Array]]] = []
        for name, b in beds.items():
            C, Ch, Pb = _bed_curve(b)
            m, L, jmax = b["m"], b["L"], b.get("JL_max")
            Pi0 = rest[f"Pi0_{name}"]
            dCw = (Ch - C) * w
            sp0 = _softplus((Pi0 - Pb) / w, xp)
            spL = _softplus((b["Pi_L0"] - Pb) / w, xp)
            lv = (L / C) * dCw  # lymph drive per unit softplus
            lin = (L, lv, L * b["Pi_L0"] + lv * spL) if jmax is None else (
                L / jmax, lv / jmax, (L * b["Pi_L0"] + lv * spL) / jmax)
            self.beds.append((name, {
                "Pb": Pb, "inv_w": 1.0 / w,
                "vC": m * C, "vS": m * dCw, "v0": m * C * Pi0 + m * dCw * sp0, "Vi0": b["Vi0"],
                "lP": lin[0], "lS": lin[1], "l0": lin[2], "lm": m if jmax is None else m * jmax,
                "sat": jmax is not None,
                "cS": m * (Ch - C),
                "mKf": m * b["Kf"], "mPS": m * b["PS"], "Pc": b["Pc"], "sigma": b["sigma"]}))


def _softplus(x: Array, xp: Any) -> Array:
    """log(1 + e^x) without overflow (the expression of ``interstitium.smooth_tissue_volume``)."""
    return xp.maximum(x, 0.0) + xp.log1p(xp.exp(-xp.abs(x)))


def _softplus_and_logistic(x: Array, xp: Any) -> tuple[Array, Array]:
    """log(1 + e^x) and 1 / (1 + e^-x) from one exponential e^-|x| (no overflow; numpy and PyTensor).

    log(1 + e) rather than log1p(e): e lies in (0, 1], so the absolute error stays at rounding (1e-16) and numpy's
    log is about twice as fast as its log1p (the softplus only enters the bed volume, an absolute quantity).
    """
    e = xp.exp(-xp.abs(x))
    d = 1.0 + e
    r = 1.0 / d
    return xp.maximum(x, 0.0) + xp.log(d), xp.where(x >= 0, r, e * r)


#: Below this |Pe| the Bernoulli function q / (1 - e^-q) is taken from its series 1 + q/2 + q^2/12 (error
#: q^4/720, below 1e-19 here); above it 1 - e^-q from the one exponential loses at most 1e-16 / q relative.
_PE_SERIES = 1e-4


def _protein_flux(Jv: Array, sigma: Array, PS: Array, Cp: Array, Ci: Array, xp: Any) -> Array:
    """``solute.protein_flux`` (Patlak; same units) from one exponential e^-|Pe| instead of an exponential and an
    expm1 (the Bernoulli factor q / (1 - e^-q) from the same e^-q, its series below :data:`_PE_SERIES`)."""
    pe = Jv * (1.0 - sigma) / PS
    q = xp.abs(pe)
    decay = xp.exp(-q)
    small = q < _PE_SERIES
    bern = xp.where(small, 1.0 + q * (0.5 + q / 12.0), q / xp.where(small, 1.0, 1.0 - decay))
    return PS * bern * xp.where(pe >= 0, Cp - Ci * decay, Cp * decay - Ci)


def _fluxes(state: Mapping[str, Array], p: _Prepared, xp: Any, renal: Sequence[float] = (1.0, 0.0),
            compliance: bool = True) -> dict[str, Array]:
    """:func:`fluxes` on prepared constants (``renal``: (a, b) of :func:`renal_terms`; without ``compliance`` the
    per-bed compliance ``C_<bed>`` is left out, as :func:`report` does not need it)."""
    Vp, Qp = state["Vp"], state["Qp"]
    Cp = 100.0 * Qp / Vp
    pi_c = pi_cubic(Cp, "total")
    dVb = Vp + state["Vrbc"] - p.Vb0
    dPc = dVb / p.vasc  # dPv = dVb / C_vasc, dPc = dPv / (1 + r)
    dil = (Vp - p.Vp0) / p.Vp0
    out: dict[str, Array] = {"Cp": Cp, "urine": xp.maximum(p.u_basal + (p.k_r * renal[0] + renal[1]) * dil, 0.0)}
    for name, b in p.beds:
        Pi, Qi = state[f"Pi_{name}"], state[f"Qi_{name}"]
        dP = Pi - b["Pb"]
        sp, lg = _softplus_and_logistic(dP * b["inv_w"], xp)
        Vx = b["vC"] * Pi + b["vS"] * sp - b["v0"]  # smooth_tissue_volume, whole bed (mL)
        ci = Qi / (b["Vi0"] + Vx)  # g/mL
        Ci = 100.0 * ci  # g/dL
        Jv = filtration(b["mKf"], b["Pc"] + dPc, Pi, pi_c, pi_cubic(Ci, "total"), b["sigma"])  # whole bed
        u = b["lP"] * Pi + b["lS"] * sp - b["l0"]  # volume_lymph_flow's drive (over JL_max when saturating)
        JL = b["lm"] * (xp.tanh(u) if b["sat"] else u)
        out[f"Jv_{name}"] = Jv
        out[f"JL_{name}"] = JL
        out[f"Js_{name}"] = _protein_flux(Jv, b["sigma"], b["mPS"], Cp, Ci, xp) / 100.0  # g/min
        out[f"JLs_{name}"] = JL * ci
        out[f"Vx_{name}"] = Vx
        if compliance:  # tissue_compliance, whole bed (mL/mmHg)
            out[f"C_{name}"] = b["vC"] + b["cS"] * lg
    return out


def fluxes(state: Mapping[str, Array], body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]],
           rest: Mapping[str, Array], xp: Any = np, renal: Sequence[float] = (1.0, 0.0)) -> dict[str, Array]:
    """Flows (mL/min, g/min) and derived quantities at ``state`` (arguments as :func:`initial_state`).

    Parameters
    ----------
    state, body, beds, rest : mapping
        As :func:`initial_state`.
    xp : module
        numpy or pytensor.tensor.
    renal : pair of float, optional
        (a, b) of :func:`renal_terms`: the clearance constant is a ``body["k_r"]`` + b (mL/min); (1, 0).

    Returns
    -------
    dict
        ``Cp`` (g/dL), ``urine`` (mL/min), per bed ``Jv_<bed>``, ``JL_<bed>`` (mL/min), ``Js_<bed>``,
        ``JLs_<bed>`` (protein by filtration and by lymph, g/min), ``Vx_<bed>`` (interstitial volume above
        rest, mL), ``C_<bed>`` (bed compliance, mL/mmHg).
    """
    return _fluxes(state, _Prepared(body, beds, rest, xp), xp, renal)


def _derivatives(state: Mapping[str, Array], f: Mapping[str, Array], rates: Sequence[Array], p: _Prepared
                 ) -> dict[str, Array]:
    """d/dt of the state from the fluxes ``f`` at it (``rates`` as in :func:`derivatives`)."""
    inf, prot, bleed = rates[0], rates[1], rates[2]
    Vp, Vrbc = state["Vp"], state["Vrbc"]
    hct = Vrbc / (Vp + Vrbc)
    bleed_plasma = bleed * (1.0 - hct)
    renal = f["urine"] - p.u_basal  # the basal part is balanced by basal intake
    dVp = inf - bleed_plasma - renal
    dQp = prot - bleed_plasma * f["Cp"] / 100.0
    d: dict[str, Array] = {}
    for name, _ in p.beds:
        dVp = dVp - f[f"Jv_{name}"] + f[f"JL_{name}"]
        dQp = dQp - f[f"Js_{name}"] + f[f"JLs_{name}"]
        d[f"Pi_{name}"] = (f[f"Jv_{name}"] - f[f"JL_{name}"]) / f[f"C_{name}"]
        d[f"Qi_{name}"] = f[f"Js_{name}"] - f[f"JLs_{name}"]
    d.update({"Vp": dVp, "Qp": dQp, "Vrbc": -bleed * hct, "U": f["urine"], "B": bleed_plasma})
    return d


def derivatives(state: Mapping[str, Array], rates: Sequence[Array], body: Mapping[str, Array],
                beds: Mapping[str, Mapping[str, Array]], rest: Mapping[str, Array], xp: Any = np
                ) -> dict[str, Array]:
    """Time derivatives (per min) of every state variable.

    Parameters
    ----------
    state, body, beds, rest : mapping
        As :func:`initial_state`.
    rates : sequence
        (infusion mL/min, infused protein g/min, bleeding mL/min of whole blood) of :func:`step_rates`,
        optionally followed by (a, b) of :func:`renal_terms` ((1, 0) when absent).
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    dict
        d/dt of each key of ``state`` (mL/min, g/min, mmHg/min).
    """
    p = _Prepared(body, beds, rest, xp)
    return _derivatives(state, _fluxes(state, p, xp, _renal(rates)), rates, p)


def _renal(rates: Sequence[Array]) -> tuple[float, float]:
    """(a, b) of :func:`renal_terms` from a rates tuple ((1, 0) when it has only the three rates)."""
    return (rates[3], rates[4]) if len(rates) > 4 else (1.0, 0.0)


Args3 = tuple[Mapping[str, Array], Mapping[str, Mapping[str, Array]], Mapping[str, Array]]


def _rk4(state: dict[str, Array], rates: Sequence[Array], dt: float, args: Args3 | _Prepared, xp: Any,
         f1: Mapping[str, Array] | None = None) -> dict[str, Array]:
    """One classical Runge-Kutta step of length ``dt`` (min); ``f1``: the fluxes at ``state`` if known."""
    p = args if isinstance(args, _Prepared) else _Prepared(*args, xp)
    scale = _renal(rates)
    h, h2 = dt, 0.5 * dt
    k1 = _derivatives(state, _fluxes(state, p, xp, scale) if f1 is None else f1, rates, p)
    s2 = {k: v + h2 * k1[k] for k, v in state.items()}
    k2 = _derivatives(s2, _fluxes(s2, p, xp, scale), rates, p)
    s3 = {k: v + h2 * k2[k] for k, v in state.items()}
    k3 = _derivatives(s3, _fluxes(s3, p, xp, scale), rates, p)
    s4 = {k: v + h * k3[k] for k, v in state.items()}
    k4 = _derivatives(s4, _fluxes(s4, p, xp, scale), rates, p)
    h6 = dt / 6.0
    return {k: v + h6 * (k1[k] + 2.0 * k2[k] + 2.0 * k3[k] + k4[k]) for k, v in state.items()}


#: Time courses :func:`simulate` reports (units).
TIMELINE_UNITS: dict[str, str] = {
    "plasma_volume_change": "mL", "infused_retained_fraction": "1", "hb_ratio": "1",
    "interstitial_volume_change_muscle": "mL", "interstitial_volume_change_skin": "mL",
    "urine_volume": "mL", "lymph_flow": "mL/min", "plasma_protein_ratio": "1", "body_weight_change": "kg",
}


def report(state: Mapping[str, Array], given: float, body: Mapping[str, Array],
           beds: Mapping[str, Mapping[str, Array]], rest: Mapping[str, Array], xp: Any = np, t: float = 0.0
           ) -> dict[str, Array]:
    """The reported quantities (:data:`TIMELINE_UNITS`) at ``state``.

    Parameters
    ----------
    state, body, beds, rest : mapping
        As :func:`initial_state`.
    given : float
        Volume infused so far, mL.
    xp : module
        numpy or pytensor.tensor.
    t : float, optional
        Time since 0, min (the insensible loss of ``body_weight_change``; 0 when not given).

    Returns
    -------
    dict
        ``plasma_volume_change`` (mL), ``infused_retained_fraction`` (1: plasma volume change over the net
        volume put into the plasma, infused minus plasma bled; for a bleed alone, the share of the plasma lost
        still missing; NaN before anything is given), ``hb_ratio`` (haemoglobin concentration relative to
        rest), ``interstitial_volume_change_<bed>`` (mL), ``urine_volume`` (mL since 0), ``lymph_flow``
        (both beds, mL/min), ``plasma_protein_ratio`` (plasma total-protein concentration 100 Qp / Vp relative to
        rest, 1; infused albumin counted at its oncotic total-protein equivalent, ``Dose.protein_equivalent``),
        ``body_weight_change`` (kg since 0, :func:`weight_change`).
    """
    return _report(state, given, _Prepared(body, beds, rest, xp), xp, t=t)


def weight_change(given: Array, bled: Array, urine: Array, t: Array) -> Array:
    """Body weight change since time 0 (kg): what went in minus what came out, at :data:`KG_PER_L`.

    (infused - whole blood bled - cumulative urine - insensible loss) x 1 kg/L. Every urine counts, the basal flow
    included, and nothing is taken by mouth: a subject on a scale loses what it passes (the urine course the
    ``urine`` observation kind fits) and its insensible loss at :data:`INSENSIBLE_LOSS_ML_MIN`, while the plasma
    balance of :func:`derivatives` takes the basal urine as balanced by basal intake (a difference of at most the
    basal flow, about 1 mL/kg/h, over the timeline). Weight changes by no other route (no sweating, stool or
    vomiting; metabolic water and the mass of gases exchanged neglected).

    Parameters
    ----------
    given, bled, urine : array
        Volume infused, whole blood bled and urine passed since 0, mL.
    t : array or float
        Time since 0, min.

    Returns
    -------
    array
        Weight change, kg (negative: lighter than at 0).
    """
    return (given - bled - urine - INSENSIBLE_LOSS_ML_MIN * t) * (KG_PER_L / 1000.0)


def _report(state: Mapping[str, Array], given: Array, p: _Prepared, xp: Any,
            f: Mapping[str, Array] | None = None, t: Array = 0.0) -> dict[str, Array]:
    """:func:`report` on prepared constants; ``f``: the fluxes at ``state`` if known; ``t``: time, min (``given`` and
    ``t`` may be columns over report times, the state then (reports, draws))."""
    if f is None:
        f = _fluxes(state, p, xp, compliance=False)
    dVp = state["Vp"] - p.Vp0
    net = given - state["B"]
    safe = xp.where(xp.abs(net) > 1e-9, net, 1.0)
    hct = state["Vrbc"] / (state["Vp"] + state["Vrbc"])
    hct0 = p.Vrbc0 / (p.Vp0 + p.Vrbc0)
    out = {"plasma_volume_change": dVp,
           "infused_retained_fraction": xp.where(xp.abs(net) > 1e-9, dVp / safe, np.nan),
           "hb_ratio": hct / hct0}
    for name, _ in p.beds:
        out[f"interstitial_volume_change_{name}"] = f[f"Vx_{name}"]
    out["urine_volume"] = state["U"]
    out["lymph_flow"] = sum(f[f"JL_{name}"] for name, _ in p.beds)
    out["plasma_protein_ratio"] = f["Cp"] / p.Cp0
    bled = state["B"] + (p.Vrbc0 - state["Vrbc"])  # plasma and red cells lost, mL of whole blood
    out["body_weight_change"] = weight_change(given, bled, state["U"], t)
    return out


def time_grid(end: float, report_every: float, max_step: float = 0.5) -> tuple[float, int, int]:
    """The fixed step (min), the number of steps and the steps per report for a timeline.

    Parameters
    ----------
    end, report_every : float
        Timeline end and report interval, min.
    max_step : float
        Largest step, min.

    Returns
    -------
    tuple
        (dt min, n_steps, steps_per_report): dt divides report_every.
    """
    per = max(1, math.ceil(report_every / max_step - 1e-9))
    dt = report_every / per
    n_reports = max(1, math.ceil(end / report_every - 1e-9))
    return dt, n_reports * per, per


def simulate(body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]], Cp0: Array,
             doses: Sequence[Dose], end: float, report_every: float, *, max_step: float = 0.5,
             xp: Any = np) -> dict[str, Any]:
    """Time courses after the interventions ``doses``, every ``report_every`` min from 0 to ``end``.

    Parameters
    ----------
    body, beds, Cp0 : as :func:`initial_state`
        Arrays broadcast (one value per draw, shape (n,)).
    doses : sequence of Dose
        The interventions.
    end, report_every : float
        Timeline end and reporting interval, min.
    max_step : float
        Largest Runge-Kutta step, min (the step divides ``report_every``).
    xp : module
        numpy or pytensor.tensor (PyTensor: the steps compiled as one node, :func:`_simulate_compiled`).

    Returns
    -------
    dict
        ``times_min`` (list of float) and, for each name of :data:`TIMELINE_UNITS`, a list of arrays (one
        per report time, each over the draws).
    """
    if xp is not np:
        return _simulate_compiled(body, beds, Cp0, doses, end, report_every, max_step)
    dt, n_steps, per = time_grid(end, report_every, max_step)
    # float64, contiguous: one memory layout for every operand of the step loop
    body = {k: _f64(v) for k, v in body.items()}
    beds = {name: {k: _f64(v) for k, v in b.items()} for name, b in beds.items()}
    Cp0 = _f64(Cp0)
    state, rest = initial_state(body, beds, Cp0, xp)
    p = _Prepared(body, beds, rest, xp)
    # the intervention rates of every step depend on time only: computed once, before the loop
    plan = [(*step_rates(doses, i * dt, dt, equivalent=True), *renal_terms(doses, (i + 1) * dt))
            for i in range(n_steps)]
    given = 0.0
    times = [0.0]
    f: dict[str, Array] | None = _fluxes(state, p, xp, _renal(plan[0]) if plan else (1.0, 0.0))
    series: dict[str, list[Array]] = {k: [v] for k, v in _report(state, given, p, xp, f).items()}
    for i in range(n_steps):
        rates = plan[i]
        state = _rk4(state, rates, dt, p, xp, f1=f)
        given += rates[0] * dt
        f = None
        if (i + 1) % per == 0:
            times.append((i + 1) * dt)
            # the fluxes at the reported state are the first stage of the next step (same renal scale)
            f = _fluxes(state, p, xp, _renal(plan[i + 1]) if i + 1 < n_steps else (1.0, 0.0))
            for k, v in _report(state, given, p, xp, f, t=(i + 1) * dt).items():
                series[k].append(v)
    return {"times_min": times, **series}


def _simulate_compiled(body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]], Cp0: Array,
                       doses: Sequence[Dose], end: float, report_every: float, max_step: float) -> dict[str, Any]:
    """:func:`simulate` in PyTensor: the resting state, the constants and the reports are graph, the steps one
    node (``whole_body_op.Course``: the same arithmetic compiled by numba, with a hand-derived reverse pass), so a
    sampler's graph holds no loop to unroll or differentiate. The state is one matrix (state variable, draw), the
    model's quantities one matrix (quantity, draw); the reports are taken over all report times at once."""
    import pytensor.tensor as pt

    from uncertainty.physiology.whole_body_op import compiled_steps

    dt, n_steps, per = time_grid(end, report_every, max_step)
    state, rest = initial_state(body, beds, Cp0, pt)
    p = _Prepared(body, beds, rest, pt)
    keys = list(state)
    plan = np.array([(*step_rates(doses, i * dt, dt, equivalent=True), *renal_terms(doses, (i + 1) * dt))
                     for i in range(n_steps)], dtype=float)
    ends = compiled_steps(state, p, plan, dt, 1.0 / BREAK_WIDTH)[::per]
    at = {k: ends[:, i] for i, k in enumerate(keys)}
    times = [i * per * dt for i in range(n_steps // per + 1)]
    given = np.concatenate([[0.0], np.cumsum(plan[:, 0].reshape(-1, per).sum(axis=1) * dt)])[:, None]
    t = np.array(times)[:, None]
    rep = _report(at, given, p, pt, t=t)
    return {"times_min": times, **{k: [rep[k][r] for r in range(len(times))] for k in TIMELINE_UNITS}}


#: Draws per block of :func:`simulate_blocks`: our measured choice (65,536 draws of a 4-hour infusion at 1-min
#: steps on 2 threads of an idle 2-core machine: blocks of 2,048, 4,096, 8,192, 16,384 and 32,768 draws took 24.2,
#: 17.0, 9.5, 7.3 and 7.1 s; the per-step Python overhead shows in small blocks).
BLOCK_DRAWS = 16384


def simulate_blocks(body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]], Cp0: Array,
                    doses: Sequence[Dose], end: float, report_every: float, *, max_step: float = 0.5,
                    threads: int | None = None) -> dict[str, Any]:
    """:func:`simulate` (numpy) in blocks of :data:`BLOCK_DRAWS` draws on ``threads`` threads (numpy releases the
    interpreter lock in its array operations, so the blocks run on separate cores); the same numbers as one call.

    Parameters
    ----------
    body, beds, Cp0, doses, end, report_every, max_step
        As :func:`simulate` (arrays over the draws, shape (n,), or scalars).
    threads : int, optional
        Threads the blocks run on; default ``OMP_NUM_THREADS`` when set (dask's workers set it to 1, so a worker
        keeps to its own core), else the machine's cores; at most the number of blocks.

    Returns
    -------
    dict
        As :func:`simulate`.
    """
    leaves = [Cp0, *body.values(), *(v for b in beds.values() for v in b.values())]
    n = max([int(np.size(v)) for v in leaves if isinstance(v, np.ndarray)] or [1])
    starts = list(range(0, n, BLOCK_DRAWS))
    if len(starts) < 2:
        return simulate(body, beds, Cp0, doses, end, report_every, max_step=max_step)

    def cut(v: Array, a: int) -> Array:
        return v[a:a + BLOCK_DRAWS] if isinstance(v, np.ndarray) and v.ndim == 1 and v.shape[0] == n else v

    def block(a: int) -> dict[str, Any]:
        return simulate({k: cut(v, a) for k, v in body.items()},
                        {name: {k: cut(v, a) for k, v in b.items()} for name, b in beds.items()},
                        cut(Cp0, a), doses, end, report_every, max_step=max_step)

    if threads is None:
        env = os.environ.get("OMP_NUM_THREADS", "")
        threads = int(env) if env.isdigit() else os.cpu_count() or 1
    workers = max(1, min(threads, len(starts)))
    with ThreadPoolExecutor(max_workers=workers) as pool:
        parts = list(pool.map(block, starts))
    out: dict[str, Any] = {"times_min": parts[0]["times_min"]}
    for key in TIMELINE_UNITS:
        out[key] = [np.concatenate([np.broadcast_to(p[key][j], (min(BLOCK_DRAWS, n - a),))
                                    for p, a in zip(parts, starts, strict=True)])
                    for j in range(len(out["times_min"]))]
    return out


def _f64(v: Array) -> Array:
    """A numpy array as float64 and C-contiguous (None and Python scalars pass through)."""
    return np.ascontiguousarray(v, dtype=np.float64) if isinstance(v, np.ndarray) else v


def rhs_vector(t: float, y: np.ndarray, keys: Sequence[str], doses: Sequence[Dose], dt: float,
               body: Mapping[str, Array], beds: Mapping[str, Mapping[str, Array]], rest: Mapping[str, Array]
               ) -> np.ndarray:
    """The right-hand side as a flat vector for ``scipy.integrate.solve_ivp`` (one draw; numpy only).

    The intervention rates are those :func:`simulate` uses on the step of length ``dt`` (min) containing
    ``t`` (min), so the two integrate the same equations. ``keys`` orders the state variables.

    Returns
    -------
    numpy.ndarray
        d/dt of the state in ``keys`` order.
    """
    t0 = math.floor(t / dt + 1e-12) * dt
    rates = (*step_rates(doses, t0, dt, equivalent=True), *renal_terms(doses, t0 + dt))
    d = derivatives(dict(zip(keys, y, strict=True)), rates, body, beds, rest, xp=np)
    return np.array([float(d[k]) for k in keys])
