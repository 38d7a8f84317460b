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
from uncertainty.physiology import balance, interstitium, lung, mucosa, starling

Volume = Callable[[Array, Mapping[str, Array], FormContext, object], dict[str, Array]]


def classic(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """Jv (mL/min/100g) from Kf, Pc, Pi, pi_c, pi_i (mmHg) and sigma (Starling 1896)."""
    Jv = starling.filtration(v["Kf"], v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"])
    return FormResult({"Jv": Jv}, Starling(v["Pc"], v["Pi"], v["pi_c"], v["pi_i"], v["sigma"]))


Args7 = tuple[Array, Array, Array, Array, Array, Array, Array]


def _args(v: Mapping[str, Array]) -> Args7:
    """Kf, Pc, sigma, PS, pi_c, L, Pi_L0: the arguments of the steady solvers."""
    return (v["Kf"], v["Pc"], v["sigma"], v["PS"], v["pi_c"], v["L"], v["Pi_L0"])


def _Cp(v: Mapping[str, Array], ctx: FormContext) -> Array | None:
    return v[ctx.steady_Cp] if ctx.steady_Cp else None


def oedema(Pi: Array, v: Mapping[str, Array], ctx: FormContext, xp: object) -> dict[str, Array]:
    """``oedema_volume`` (mL/100g): interstitial volume at the solved Pi (mmHg) above that at the
    tissue's reference Pi (``physiology.interstitium.oedema_volume``; two-slope compliance when
    C_tis_high and Pi_break are inputs); empty without C_tis or a reference Pi."""
    if "C_tis" not in v or ctx.Pi_ref is None:
        return {}
    return {"oedema_volume": interstitium.oedema_volume(Pi, ctx.Pi_ref, v["C_tis"], v.get("C_tis_high"),
                                                        v.get("Pi_break"), xp=xp)}


def lung_water(Pi: Array, v: Mapping[str, Array], ctx: FormContext, xp: object) -> dict[str, Array]:
    """``oedema_volume`` and ``EVLW`` (mL/100g, ``physiology.lung.extravascular_water``; EVLW0 the
    water at the reference Pi, 0 when not an input); empty without C_tis or a reference Pi."""
    if "C_tis" not in v or ctx.Pi_ref is None:
        return {}
    water = lung.extravascular_water(Pi, ctx.Pi_ref, v["C_tis"], v.get("EVLW0", 0.0), C_high=v.get("C_tis_high"),
                                     P_break=v.get("Pi_break"), xp=xp)
    return {"oedema_volume": water["oedema_volume"], "EVLW": water["EVLW"]}


def _steady_result(res: Mapping[str, Array], pi_o: Array, v: Mapping[str, Array], ctx: FormContext, xp: object,
                   volume: Volume, first: Mapping[str, Array]) -> FormResult:
    Jv, Pi = res["Jv"], res["Pi"]
    out: dict[str, Array] = {"Jv": Jv, **first, "Pi": Pi, "pi_i": res["pi_i"], "ratio": res["ratio"],
                             "JL": res.get("JL", Jv)}  # lymph balance: JL = Jv, or Jv + J_epi (mucosa)
    out.update(volume(Pi, v, ctx, xp))
    return FormResult(out, Starling(v["Pc"], Pi, v["pi_c"], pi_o, v["sigma"]))


def steady_state(v: Mapping[str, Array], ctx: FormContext, xp: object, volume: Volume = oedema) -> FormResult:
    """Coupled steady state (``balance.steady_state``): Jv, Pi, pi_i, ratio, JL = Jv and the volume."""
    res = balance.steady_state(*_args(v), Cp=_Cp(v, ctx), xp=xp)
    return _steady_result(res, res["pi_i"], v, ctx, xp, volume, {})


def revised(v: Mapping[str, Array], ctx: FormContext, xp: object, volume: Volume = oedema) -> FormResult:
    """Glycocalyx steady state (``balance.revised_steady_state``; PS_large 0 when not an input)."""
    res = balance.revised_steady_state(*_args(v), v.get("PS_large", 0.0), Cp=_Cp(v, ctx), xp=xp)
    return _steady_result(res, res["pi_g"], v, ctx, xp, volume, {"pi_g": res["pi_g"]})


def absorbing_revised(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """The revised form of the absorbing mucosa (``mucosa.absorbing_steady_state``, J_epi in
    mL/min/100g): pi_g = pi_i, JL = Jv + J_epi."""
    res = mucosa.absorbing_steady_state(*_args(v), v["J_epi"], Cp=_Cp(v, ctx), xp=xp)
    return _steady_result(res, res["pi_g"], v, ctx, xp, oedema, {"pi_g": res["pi_g"]})


def steady_state_lung(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """``steady_state`` with the extravascular lung water (EVLW, mL/100g)."""
    return steady_state(v, ctx, xp, volume=lung_water)


def revised_lung(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """``revised`` with the extravascular lung water (EVLW, mL/100g)."""
    return revised(v, ctx, xp, volume=lung_water)
