"""Evaluate functions of the general forms (classic, steady_state, revised) and their tissue variants.

- ``classic``: Starling's equation with the six quantities as given (``physiology.starling``);
- ``steady_state``: the coupled steady state of filtration, lymph drainage and protein flux
  (``physiology.balance.steady_state``): Pi and pi_i are solved, not sampled;
- ``revised``: the glycocalyx form (``physiology.balance.revised_steady_state``): pi_g beneath the
  glycocalyx opposes filtration, pi_i is downstream; the force breakdown uses pi_g in the slot of the
  opposing oncotic pressure (``force_pi_i`` is then the pi_g term). In the intestinal mucosa it is the
  absorbing steady state of ``physiology.mucosa`` (:func:`absorbing_revised`): the epithelial fluid
  J_epi washes the interstitium, so absorption (Jv < 0) can be sustained; pi_g = pi_i there and
  ``JL`` = Jv + J_epi.
- In the lung the steady forms report the extravascular lung water (``physiology.lung``) beside the
  oedema volume (:func:`steady_state_lung`, :func:`revised_lung`).

Each function is pure (values, ctx, xp) and runs on numpy arrays and PyTensor tensors alike.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

from uncertainty.forms.spec import Array, FormContext, FormResult, Starling
from uncertainty.physiology import balance, interstitium, lung, mucosa, osmotic, starling

Volume = Callable[[Array, Mapping[str, Array], FormContext, object], dict[str, Array]]


def classic(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """Jv (mL/min/100g) from Kf, Pc, Pi, pi_c, pi_i (mmHg) and sigma (Starling 1896)."""
    Jv = starling.filtration(v["Kf"], v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"])
    return FormResult({"Jv": Jv}, Starling(v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"]))


#: Inputs of the brain's crystalloid (small-solute) osmotic term: plasma and interstitial osmolality (mOsm/kg)
#: and the barrier's reflection coefficient to small solutes (1).
CRYSTALLOID_INPUTS = ("Osm_p", "Osm_i", "sigma_s")


def brain_classic(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """Starling's equation at the blood-brain barrier: with Osm_p, Osm_i (mOsm/kg) and sigma_s (1) the
    crystalloid term sigma_s R T (Osm_p - Osm_i) (about 19.3 mmHg per mOsm/kg at 37 C) opposes filtration
    beside the protein term (``physiology.osmotic.brain_filtration``), and ``force_osm`` (mmHg) is its signed
    share of ``net_pressure``; without them, :func:`classic`. Jv in mL/min/100g."""
    if not all(k in v for k in CRYSTALLOID_INPUTS):
        return classic(v, ctx, xp)
    args = (v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"], v["sigma_s"], v["Osm_p"], v["Osm_i"])
    f = osmotic.brain_forces(*args)
    out: dict[str, Array] = {"Jv": osmotic.brain_filtration(v["Kf"], *args),
                             "net_pressure": osmotic.brain_net_pressure(*args)}
    for k in ("Pc", "Pi", "pi_c", "pi_i"):
        out[f"force_{k}"] = f[k]
    out["force_osm"] = f["osm"]
    return FormResult(out)


Args7 = tuple[Array, Array, Array, Array, Array, Array, Array]


def _args(v: Mapping[str, Array]) -> Args7:
    """Kf, Pc, sigma, PS, pi_c, L, Pi_L0: the arguments of the steady solvers."""
    return (v["Kf"], v["Pc"], v["sigma"], v["PS"], v["pi_c"], v["L"], v["Pi_L0"])


def _Cp(v: Mapping[str, Array], ctx: FormContext) -> Array | None:
    return v[ctx.steady_Cp] if ctx.steady_Cp else None


def oedema(Pi: Array, v: Mapping[str, Array], ctx: FormContext, xp: object) -> dict[str, Array]:
    """``oedema_volume`` (mL/100g). With the break of the pressure-volume curve (C_tis_high and Pi_break
    inputs): the volume each subject's own interstitium holds beyond its normally hydrated state
    (``physiology.interstitium.oedema_beyond_break``; near 0 for a normally hydrated subject). Without
    them: the volume at the solved Pi (mmHg) above that at the tissue's reference Pi
    (``physiology.interstitium.oedema_volume``). Empty without C_tis or a reference Pi."""
    if "C_tis" not in v or ctx.Pi_ref is None:
        return {}
    if "C_tis_high" in v and "Pi_break" in v:
        return {"oedema_volume": interstitium.oedema_beyond_break(Pi, v["C_tis"], v["C_tis_high"], v["Pi_break"],
                                                                  xp=xp)}
    return {"oedema_volume": interstitium.oedema_volume(Pi, ctx.Pi_ref, v["C_tis"], v.get("C_tis_high"),
                                                        v.get("Pi_break"), xp=xp)}


def lung_water(Pi: Array, v: Mapping[str, Array], ctx: FormContext, xp: object,
               flooding: Array | None = None) -> dict[str, Array]:
    """``oedema_volume`` (as :func:`oedema`) and ``EVLW`` = EVLW0 + oedema_volume (mL/100g; EVLW0 the water
    of the normally hydrated lung, 0 when not an input) + with ``flooding`` (mL/min/100g) and k_AFC (1/min) the
    alveolar water the epithelium's clearance holds at steady state (``physiology.lung.alveolar_water``), and
    with M_lung (g of blood-free lung per kg predicted body weight) ``EVLWI`` (mL/kg,
    ``physiology.lung.evlw_index``); empty without C_tis or a reference Pi."""
    got = oedema(Pi, v, ctx, xp)
    if not got:
        return {}
    out = {"oedema_volume": got["oedema_volume"], "EVLW": v.get("EVLW0", 0.0) + got["oedema_volume"]}
    if flooding is not None and "k_AFC" in v:
        out["EVLW"] = out["EVLW"] + lung.alveolar_water(flooding, v["k_AFC"])
    if "M_lung" in v:  # EVLWI (mL/kg predicted body weight) from the blood-free lung mass per kg (g/kg)
        out["EVLWI"] = lung.evlw_index(out["EVLW"], v["M_lung"])
    return out


#: Inputs that switch the steady forms to the safety-factor steady state (``balance.safety_steady_state``).
SAFETY_INPUTS = ("C_tis_high", "Pi_break", "JL_max", "G_flood", "P_flood")


def _safety(v: Mapping[str, Array]) -> bool:
    return any(k in v for k in SAFETY_INPUTS)


def _solve(v: Mapping[str, Array], ctx: FormContext, xp: object, revised: bool) -> dict[str, Array]:
    """The steady state: with any safety input, ``balance.safety_steady_state`` (compliance break,
    volume-driven lymph saturating at JL_max, alveolar flooding); else the classic solvers. With P_imb (burns)
    the interstitial pressure-volume relation of the injured matrix is shifted inside the solve
    (``balance.shifted_state``): ``Pi`` is the injured tissue's pressure, ``Pi_volume`` the intact curve's
    pressure at the same volume."""
    if _safety(v):
        return balance.safety_steady_state(
            *_args(v), C_tis=v.get("C_tis"), C_high=v.get("C_tis_high"), P_break=v.get("Pi_break"),
            JL_max=v.get("JL_max"), G_flood=v.get("G_flood"), P_flood=v.get("P_flood"),
            PS_large=v.get("PS_large") if revised else None, revised=revised, Cp=_Cp(v, ctx), P_imb=v.get("P_imb"),
            xp=xp)
    Kf, Pc, sigma, PS, pi_c, L, Pi_L0 = _args(v)

    def solve(Pc_v: Array) -> dict[str, Array]:
        if revised:
            return balance.revised_steady_state(Kf, Pc_v, sigma, PS, pi_c, L, Pi_L0, v.get("PS_large", 0.0),
                                                Cp=_Cp(v, ctx), xp=xp)
        return balance.steady_state(Kf, Pc_v, sigma, PS, pi_c, L, Pi_L0, Cp=_Cp(v, ctx), xp=xp)

    return balance.shifted_state(solve, Pc, v["P_imb"]) if "P_imb" in v else solve(Pc)


def margin(v: Mapping[str, Array], ctx: FormContext, xp: object) -> dict[str, Array]:
    """``safety_margin`` (mmHg): the rise of Pc the subject tolerates before oedema accelerates
    (``balance.safety_margin``): before Pi reaches the alveolar flooding pressure P_flood in the lung,
    the break Pi_break of the pressure-volume curve elsewhere. Empty without either."""
    P_accel = v.get("P_flood", v.get("Pi_break"))
    if P_accel is None:
        return {}
    return {"safety_margin": balance.safety_margin(
        *_args(v), P_accel, C_tis=v.get("C_tis"), C_high=v.get("C_tis_high"), P_break=v.get("Pi_break"),
        JL_max=v.get("JL_max"), Cp=_Cp(v, ctx), P_imb=v.get("P_imb"), xp=xp)}


def early_pressure(v: Mapping[str, Array], ctx: FormContext) -> dict[str, Array]:
    """``Pi_early`` (mmHg) with P_imb (burns): the injured matrix's pressure at its pre-injury volume, the
    tissue's reference Pi + P_imb (``interstitium.imbibition_pressure``), before filtration has swollen it;
    the steady ``Pi`` is the pressure once filtration and outflow balance on the same shifted curve. Empty
    without P_imb or a reference Pi."""
    if "P_imb" not in v or ctx.Pi_ref is None:
        return {}
    return {"Pi_early": interstitium.imbibition_pressure(ctx.Pi_ref, v["P_imb"])}


def _steady_result(res: Mapping[str, Array], pi_o: Array, v: Mapping[str, Array], ctx: FormContext, xp: object,
                   volume: Volume, first: Mapping[str, Array]) -> FormResult:
    Jv, Pi = res["Jv"], res["Pi"]
    out: dict[str, Array] = {"Jv": Jv, **first, "Pi": Pi, "pi_i": res["pi_i"], "ratio": res["ratio"],
                             "JL": res.get("JL", Jv)}  # lymph balance: JL = Jv, or Jv + J_epi (mucosa)
    Pi_v = res.get("Pi_volume", Pi)  # the intact curve's pressure at the tissue's volume (differs with P_imb)
    got = lung_water(Pi_v, v, ctx, xp, res.get("flooding")) if volume is lung_water else volume(Pi_v, v, ctx, xp)
    if "oedema_volume" in got:
        out["oedema_volume"] = got["oedema_volume"]
    out.update(margin(v, ctx, xp))
    out.update(early_pressure(v, ctx))
    if "EVLW" in got:
        out["EVLW"] = got["EVLW"]
    if "EVLWI" in got:
        out["EVLWI"] = got["EVLWI"]
    if "G_flood" in v and "P_flood" in v:
        out["flooding"] = res["flooding"]
    return FormResult(out, Starling(v["Pc"], Pi, v["pi_c"], pi_o, v["sigma"]))


def steady_state(v: Mapping[str, Array], ctx: FormContext, xp: object, volume: Volume = oedema) -> FormResult:
    """Coupled steady state (``balance.steady_state``, or ``balance.safety_steady_state`` when the study has
    the safety-factor inputs): Jv, Pi, pi_i, ratio, JL, the oedema volume and the safety margin."""
    res = _solve(v, ctx, xp, revised=False)
    return _steady_result(res, res["pi_i"], v, ctx, xp, volume, {})


def revised(v: Mapping[str, Array], ctx: FormContext, xp: object, volume: Volume = oedema) -> FormResult:
    """Glycocalyx steady state (``balance.revised_steady_state`` or, with the safety-factor inputs,
    ``balance.safety_steady_state(revised=True)``; PS_large 0 when not an input)."""
    res = _solve(v, ctx, xp, revised=True)
    return _steady_result(res, res["pi_g"], v, ctx, xp, volume, {"pi_g": res["pi_g"]})


def absorbing_revised(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """The revised form of the absorbing mucosa (``mucosa.absorbing_steady_state``, J_epi in
    mL/min/100g): pi_g = pi_i, JL = Jv + J_epi."""
    res = mucosa.absorbing_steady_state(*_args(v), v["J_epi"], Cp=_Cp(v, ctx), xp=xp)
    return _steady_result(res, res["pi_g"], v, ctx, xp, oedema, {"pi_g": res["pi_g"]})


def steady_state_lung(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """``steady_state`` with the extravascular lung water (EVLW, mL/100g) and alveolar flooding
    (``flooding``, mL/min/100g, with G_flood and P_flood)."""
    return steady_state(v, ctx, xp, volume=lung_water)


def revised_lung(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """``revised`` with the extravascular lung water (EVLW, mL/100g) and alveolar flooding."""
    return revised(v, ctx, xp, volume=lung_water)
