"""Derived quantities: a quantity computed from others (Pc from Pa, Pv and r; pi_c from protein; in the lung
PAP from LAP and the transpulmonary gradient TPG, and Pc from LAP and PAP).

A derivation may read another derived quantity (the lung's Pc reads the derived PAP): dictionaries of
derivations are kept in the order they are computed (:func:`computation_order`).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.core.errors import study_error
from uncertainty.physiology import capillary, lung, oncotic
from uncertainty.priors.declarations import is_number, join_key


@dataclass(frozen=True)
class Derivation:
    """How a quantity is computed from sampled ones, with physiology functions unchanged.

    Attributes:
        target: the derived quantity (``pi_c``, ``pi_i``, ``Pc``).
        formula: ``total`` / ``albumin`` / ``albumin_globulin`` (oncotic pressure from protein,
            Landis & Pappenheimer relations), ``resistance_ratio`` (Pc from Pa, Pv, r;
            Pappenheimer & Soto-Rivera 1948), ``gaar`` (lung Pc from LAP, PAP; Gaar et al. 1967) or
            ``transpulmonary`` (lung PAP = LAP + TPG).
        inputs: the quantities it reads, in the order the formula takes them.
        shift: added after the formula (canonical unit of the target), from a condition.
        multiply: multiplies the result of the formula, from a condition.
        origin: provenance of the derivation's declaration.
    """

    target: str
    formula: str
    inputs: tuple[str, ...]
    shift: float = 0.0
    multiply: float = 1.0
    origin: str = ""
    fraction: float = 0.4

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
                 "transpulmonary": "LAP + TPG"}
        text = f"{self.target} = {names[self.formula]} from {', '.join(self.inputs)}"
        if self.multiply != 1.0:
            text += f", x {self.multiply:g}"
        if self.shift != 0.0:
            text += f", {self.shift:+g}"
        return text


#: Rule -> (target, inputs) of the pressure derivations of a prior file's ``[derived.Pc]``.
PRESSURE_DERIVATIONS: dict[str, tuple[str, tuple[str, ...]]] = {
    "resistance_ratio": ("Pc", ("Pa", "Pv", "r")),
    "gaar": ("Pc", ("LAP", "PAP")),
    "transpulmonary": ("PAP", ("LAP", "TPG")),
}


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
    if rule not in PRESSURE_DERIVATIONS:
        raise study_error("unknown rule (" + ", ".join(PRESSURE_DERIVATIONS) + ")", file, join_key(key, "rule"), rule)
    target, inputs = PRESSURE_DERIVATIONS[rule]
    if symbol != target:
        raise study_error(f"rule {rule} derives {target}", file, key, symbol)
    given = spec.get("inputs", list(inputs))
    if list(given) != list(inputs):
        raise study_error(f"rule {rule} reads inputs {list(inputs)}", file, join_key(key, "inputs"), given)
    fraction = spec.get("fraction", 0.4)
    if not is_number(fraction) or not 0 < fraction < 1:
        raise study_error("fraction lies between 0 and 1", file, join_key(key, "fraction"), fraction)
    return Derivation(symbol, rule, inputs, origin=str(spec.get("origin", "")), fraction=float(fraction))
