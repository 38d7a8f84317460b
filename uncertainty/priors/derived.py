"""Derived quantities: a quantity computed from others (Pc from Pa, Pv and r; pi_c from protein; in the lung
PAP from LAP and the transpulmonary gradient TPG, and Pc from LAP and PAP; the lymph capacity JL_max from the
resting filtrate and the reserve above it).

A derivation may read another derived quantity (the lung's Pc reads the derived PAP): dictionaries of
derivations are kept in the order they are computed (:func:`computation_order`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.core.errors import study_error
from uncertainty.physiology import balance, capillary, lung, oncotic
from uncertainty.priors.declarations import is_number, join_key


@dataclass(frozen=True)
class Derivation:
    """How a quantity is computed from sampled ones, with physiology functions unchanged.

    Attributes:
        target: the derived quantity (``pi_c``, ``pi_i``, ``Pc``).
        formula: ``total`` / ``albumin`` / ``albumin_globulin`` (oncotic pressure from protein,
            Landis & Pappenheimer relations), ``resistance_ratio`` (Pc from Pa, Pv, r;
            Pappenheimer & Soto-Rivera 1948), ``gaar`` (lung Pc from LAP, PAP; Gaar et al. 1967),
            ``transpulmonary`` (lung PAP = LAP + TPG) or ``lymph_capacity`` (JL_max = the resting filtrate
            of the classic balance + JL_reserve, :func:`lymph_capacity`).
        inputs: the quantities it reads, in the order the formula takes them.
        shift: added after the formula (canonical unit of the target), from a condition.
        multiply: multiplies the result of the formula, from a condition.
        origin: provenance of the derivation's declaration.
        fraction: ``gaar``'s share of the PAP - LAP gradient.
        healthy_filtrate: ``lymph_capacity`` under a condition that changes the forces (mL/min/100g): the
            healthy set's resting filtrate at its medians, used in place of the draw's (:func:`hold_capacity`).
    """

    target: str
    formula: str
    inputs: tuple[str, ...]
    shift: float = 0.0
    multiply: float = 1.0
    origin: str = ""
    fraction: float = 0.4
    healthy_filtrate: float | None = None

    def compute(self, values: Mapping[str, Any], xp: Any = np) -> Any:
        """The derived value (canonical unit) from ``values`` of its inputs (numpy or PyTensor)."""

        args = [values[k] for k in self.inputs]
        if self.formula == "total":
            out = oncotic.pi_total_protein(*args)
        elif self.formula == "albumin":
            out = oncotic.pi_albumin(*args)
        elif self.formula == "albumin_globulin":
            out = oncotic.pi_albumin_globulin(*args)
        elif self.formula == "resistance_ratio":
            out = capillary.mean_capillary_pressure(*args)
        elif self.formula == "gaar":
            out = capillary.pulmonary_capillary_pressure(*args, fraction=self.fraction)
        elif self.formula == "transpulmonary":
            out = lung.pulmonary_arterial_pressure(*args)
        elif self.formula == "lymph_capacity" and self.healthy_filtrate is not None:
            out = args[0] + self.healthy_filtrate
        elif self.formula == "lymph_capacity":
            out = lymph_capacity(*args, xp=xp)
        else:  # pragma: no cover
            raise ValueError(self.formula)
        if self.multiply != 1.0:
            out = out * self.multiply
        if self.shift != 0.0:
            out = out + self.shift
        return out

    def describe(self) -> str:
        """Short text, e.g. ``pi_c = oncotic total protein(Cp)``."""
        names = {"total": "oncotic pressure of total protein", "albumin": "oncotic pressure of albumin",
                 "albumin_globulin": "oncotic pressure of albumin + globulin",
                 "resistance_ratio": "(r Pa + Pv)/(1 + r)",
                 "gaar": f"LAP + {self.fraction:g} (PAP - LAP)",
                 "transpulmonary": "LAP + TPG",
                 "lymph_capacity": "resting filtrate (classic balance) + JL_reserve"}
        text = f"{self.target} = {names[self.formula]} from {', '.join(self.inputs)}"
        if self.healthy_filtrate is not None:
            text = f"{self.target} = healthy resting filtrate {self.healthy_filtrate:.3g} + JL_reserve"
        if self.multiply != 1.0:
            text += f", x {self.multiply:g}"
        if self.shift != 0.0:
            text += f", {self.shift:+g}"
        return text


def lymph_capacity(JL_reserve: Any, Kf: Any, Pc: Any, sigma: Any, PS: Any, pi_c: Any, L: Any, Pi_L0: Any,
                   xp: Any = np) -> Any:
    """Maximal lymph flow JL_max (mL/min/100g): the resting filtrate plus the reserve above it.

    At rest the lymph carries what the capillaries filter (the steady state), so its capacity is that
    resting flow plus the rise it can still make. The resting filtrate is the classic coupled balance's Jv
    (``physiology.balance.steady_state``: linear lymph, Patlak protein, pi_i proportional to the ratio) at
    Kf (mL/min/mmHg/100g), Pc (mmHg), sigma (1), PS (mL/min/100g), pi_c (mmHg), L (mL/min/mmHg/100g) and
    Pi_L0 (mmHg); JL_reserve (mL/min/100g) is the rise. Declared this way no subject's lymph is saturated at
    rest by construction (an absolute JL_max below a draw's resting filtrate put about 12 % of healthy
    subjects at a resting oedema Pi). numpy or PyTensor (``xp``).
    """
    return balance.steady_state(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, xp=xp, n_steps=CAPACITY_STEPS)["Jv"] + JL_reserve


#: Newton steps of the resting filtrate in :func:`lymph_capacity`: over 65,536 individual-layer draws of the muscle
#: set the capacity at 8 steps differs from 40 steps by at most 1e-10 of itself (6 steps: 7e-4), and each step
#: fewer is a smaller graph for inference to compile (the default 12 covers wider ranges than a healthy rest).
CAPACITY_STEPS = 8


#: Rule -> (target, inputs) of the derivations a prior file may declare (``[derived.<target>]``).
DERIVATION_RULES: dict[str, tuple[str, tuple[str, ...]]] = {
    "resistance_ratio": ("Pc", ("Pa", "Pv", "r")),
    "gaar": ("Pc", ("LAP", "PAP")),
    "transpulmonary": ("PAP", ("LAP", "TPG")),
    "lymph_capacity": ("JL_max", ("JL_reserve", "Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0")),
}
#: Rule -> the input whose prior takes a condition's extra uncertainty (``extra_sd`` / ``extra_gsd``) about the
#: derived quantity: the capacity's spread beyond the resting filtrate is the reserve's.
WIDENED_INPUT: dict[str, str] = {"lymph_capacity": "JL_reserve"}


def capacity_forces(derived: Mapping[str, Derivation]) -> dict[str, set[str]]:
    """For each ``lymph_capacity`` derivation (target -> quantities): the forces its resting filtrate reads, through
    the derived ones it reads (Pc and its Pa, Pv, r; those derived included), the reserve left out (it is the
    lymph's own, not a force)."""
    out: dict[str, set[str]] = {}
    for target, d in derived.items():
        if d.formula != "lymph_capacity":
            continue
        reads: set[str] = set()
        todo = list(d.inputs[1:])
        while todo:
            s = todo.pop()
            if s not in reads:
                reads.add(s)
                todo += list(derived[s].inputs) if s in derived and s != target else []
        out[target] = reads
    return out


def hold_capacity(derived: Mapping[str, Derivation], priors: Mapping[str, Any],
                  healthy_derived: Mapping[str, Derivation], healthy_priors: Mapping[str, Any]
                  ) -> tuple[dict[str, Derivation], list[str]]:
    """Under conditions, the lymph capacity from the healthy forces: ``lymph_capacity`` derivations whose
    forces a condition changed (a prior it reads, directly or through Pc, is not the healthy set's, or a
    derivation it reads was shifted or scaled) take the healthy set's resting filtrate at its medians
    (mL/min/100g) in place of the draw's.

    The capacity is a property of the lymphatics: a subject's septic or congested filtrate is not the load
    its lymph vessels carried at rest, and adding the reserve to it would let the capacity follow the leak
    (septic muscle filtering 11.6 L/day, median, against at most 8 that the lymph returns: validation row
    skeletal_muscle.Jv_L_per_day.sepsis_steady). The subject's own healthy filtrate is not sampled once a
    condition has moved the forces, so the set's typical one stands in (its spread is not carried).

    Parameters
    ----------
    derived, priors : mapping
        The derivations and priors after the conditions.
    healthy_derived, healthy_priors : mapping
        The same before them.

    Returns
    -------
    derivations : dict
        ``derived`` with each changed capacity held.
    notes : list of str
        One note per held capacity.
    """
    out = dict(derived)
    notes: list[str] = []
    for target, reads in capacity_forces(derived).items():
        d = derived[target]
        if d.healthy_filtrate is not None:
            continue
        moved = [s for s in sorted(reads) if (s in priors and priors[s] is not healthy_priors.get(s))
                 or (s in derived and derived[s] != healthy_derived.get(s))]
        if not moved:
            continue
        medians = compute_all({k: v for k, v in healthy_derived.items() if k != target},
                              {s: p.median() for s, p in healthy_priors.items()})
        held = float(lymph_capacity(0.0, *(medians[s] for s in d.inputs[1:])))
        out[target] = dataclasses.replace(d, healthy_filtrate=held)
        notes.append(f"the conditions change {', '.join(moved)}: the lymph capacity {target} is the healthy set's "
                     f"resting filtrate at its medians ({held:.3g} mL/min/100g) plus JL_reserve, not the draw's "
                     "filtrate (a capacity is the lymph vessels', it does not follow the leak)")
    return out, notes


def computation_order(derived: Mapping[str, Derivation]) -> dict[str, Derivation]:
    """The derivations reordered so that each comes after the derived quantities it reads (PAP before Pc).

    Parameters
    ----------
    derived : mapping of str to Derivation
        target -> derivation, in any order.

    Returns
    -------
    dict of str to Derivation
        The same derivations, each after those among its inputs (a stable depth-first order).
    """
    out: dict[str, Derivation] = {}

    def visit(target: str, depth: int) -> None:
        if target in out or depth > len(derived):
            return
        for inp in derived[target].inputs:
            if inp in derived:
                visit(inp, depth + 1)
        out[target] = derived[target]

    for t in derived:
        visit(t, 0)
    return out


def compute_all(derived: Mapping[str, Derivation], values: Mapping[str, Any], xp: Any = np) -> dict[str, Any]:
    """``values`` with every derived quantity added (canonical units), each computed after its inputs.

    Parameters
    ----------
    derived : mapping of str to Derivation
        target -> derivation.
    values : mapping of str to array
        The sampled or fixed quantities the derivations read (numbers, numpy arrays or PyTensor tensors).
    xp : module
        ``numpy`` or ``pytensor.tensor``.

    Returns
    -------
    dict of str to array
        A copy of ``values`` with the derived quantities.
    """
    out = dict(values)
    for target, d in computation_order(derived).items():
        out[target] = d.compute(out, xp)
    return out


def parse_derived(symbol: str, spec: Any, *, file: Any = None, key: str | None = None) -> Derivation:
    """Read a prior file's ``[derived.<symbol>]`` table (``rule``, ``inputs``, rule parameters, origin)."""
    key = key or f"derived.{symbol}"
    if not isinstance(spec, Mapping):
        raise study_error("a derived entry is a table with rule and inputs", file, key, spec)
    for k in spec:
        if k not in ("rule", "inputs", "fraction", "origin", "note"):
            raise study_error("unknown key (allowed: rule, inputs, fraction, origin, note)",
                              file, join_key(key, k), spec[k])
    rule = spec.get("rule")
    if rule not in DERIVATION_RULES:
        raise study_error("unknown rule (" + ", ".join(DERIVATION_RULES) + ")", file, join_key(key, "rule"), rule)
    target, inputs = DERIVATION_RULES[rule]
    if symbol != target:
        raise study_error(f"rule {rule} derives {target}", file, key, symbol)
    given = spec.get("inputs", list(inputs))
    if list(given) != list(inputs):
        raise study_error(f"rule {rule} reads inputs {list(inputs)}", file, join_key(key, "inputs"), given)
    fraction = spec.get("fraction", 0.4)
    if not is_number(fraction) or not 0 < fraction < 1:
        raise study_error("fraction lies between 0 and 1", file, join_key(key, "fraction"), fraction)
    return Derivation(symbol, rule, inputs, origin=str(spec.get("origin", "")), fraction=float(fraction))
