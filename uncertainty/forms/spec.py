"""What a model form is: :class:`FormSpec` (one frozen entry of the catalogue) and the types its
evaluate function takes and returns.

A form's evaluate function is pure: ``fn(values, ctx, xp) -> FormResult``, where ``values`` maps
every input symbol (after derivations) to a number, a numpy array or a PyTensor tensor (canonical
units), ``ctx`` holds the study's constants the form reads (:class:`FormContext`) and ``xp`` is
``numpy`` or ``pytensor.tensor``. The common parts (derived inputs, the Starling force breakdown,
whole-tissue flows, derived quantities shown as outputs) are done once, by
:func:`uncertainty.forms.evaluate.evaluate`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

Array = Any  # a float, a numpy array or a PyTensor tensor (canonical units)

#: Facts an output can need besides input symbols: the study's tissue mass (whole-tissue flows) and
#: the reference interstitial pressure of the tissue's prior set (``Study.Pi_ref``, volumes).
TISSUE_MASS = "tissue_mass"
PI_REF = "Pi_ref"


@dataclass(frozen=True)
class Output:
    """One output of a model form.

    Attributes
    ----------
    name : str
        The key ``evaluate`` returns.
    unit : str
        Its canonical unit (pint-parsable; a ``/100g`` suffix is the tissue basis).
    needs : tuple of str
        What must be present for the form to give it: input symbols (e.g. ``C_tis``) and/or
        :data:`TISSUE_MASS`, :data:`PI_REF`. Empty: always given.
    """

    name: str
    unit: str
    needs: tuple[str, ...] = ()


@dataclass(frozen=True)
class FormContext:
    """The study's constants a form's evaluate function may read (no sampled values).

    Attributes
    ----------
    tissue : str or None
        The prior set (tissue) name.
    tissue_mass_kg : float or None
        Mass of the organ or limb (kg).
    Pi_ref : float or None
        Reference interstitial pressure of the tissue (mmHg), for volumes above it.
    steady_Cp : str or None
        Name of the plasma-protein input (g/dL) the steady forms pass to the protein cubic, or None
        for proportional scaling.
    """

    tissue: str | None = None
    tissue_mass_kg: float | None = None
    Pi_ref: float | None = None
    steady_Cp: str | None = None


@dataclass(frozen=True)
class Starling:
    """The pressures (mmHg) of a form's Starling force breakdown: ``net_pressure`` and ``force_*``
    are computed from them by ``physiology.starling`` (``pi_o`` is the oncotic pressure opposing
    ``pi_c``: pi_i, or pi_g beneath the glycocalyx)."""

    Pc: Array
    Pi: Array
    pi_c: Array
    pi_o: Array
    sigma: Array


@dataclass(frozen=True)
class FormResult:
    """What a form's evaluate function returns.

    Attributes
    ----------
    outputs : dict
        ``Jv`` (mL/min/100g) and the form's own outputs, in the order the catalogue declares them.
    starling : Starling or None
        The pressures of the force breakdown; None when ``outputs`` already holds ``net_pressure``
        and the four ``force_*`` entries (mmHg).
    organ_flow : array or None
        Filtration of the whole tissue (mL/min) when the form computes it itself; None: Jv times
        the tissue mass.
    """

    outputs: dict[str, Array]
    starling: Starling | None = None
    organ_flow: Array | None = None


FormFunction = Callable[[Mapping[str, Array], FormContext, Any], FormResult]
NoteFunction = Callable[[Mapping[str, Any]], list[str]]


@dataclass(frozen=True)
class TissueExtras:
    """What one tissue changes in a form.

    Attributes
    ----------
    inputs : tuple of str
        Inputs the form needs there too (e.g. J_epi in the absorbing intestinal mucosa).
    unused : tuple of str
        Optional inputs of the form that this tissue does not use.
    optional : tuple of str
        Inputs the form uses there when the study has them.
    outputs : tuple of Output
        Outputs the form gives there too (after the form's own).
    evaluate : callable or None
        The evaluate function there, when it differs from the form's.
    """

    inputs: tuple[str, ...] = ()
    unused: tuple[str, ...] = ()
    optional: tuple[str, ...] = ()
    outputs: tuple[Output, ...] = ()
    evaluate: FormFunction | None = None


@dataclass(frozen=True)
class FormSpec:
    """One model form (``[study] model``): what it takes, solves and returns, and where.

    Attributes
    ----------
    name : str
        The form's name in study files.
    summary : str
        A short description (documentation).
    evaluate : callable
        ``fn(values, ctx, xp) -> FormResult`` (see the module docstring).
    required : tuple of str
        Inputs it needs (after derivations such as Pc from Pa, Pv, r).
    optional : tuple of str
        Inputs it uses when the study has them.
    solved : tuple of str
        Quantities it solves (never sampled; a study's prior for one is refused).
    outputs : tuple of Output
        Its own outputs, after the common ones (``COMMON_OUTPUTS``: Jv, net_pressure, force_*).
    tissues : tuple of str or None
        The prior sets (tissues) that may offer it; None: a general form, offered by default.
    per_tissue : mapping
        tissue -> :class:`TissueExtras`.
    note_outputs : tuple of str
        Outputs whose draws ``notes`` reads (analyses keep them even when not reported).
    notes : callable or None
        ``notes(draws) -> list of str``: plain-language notes a batch of draws calls for.
    tissue_mass : str or None
        Why the form needs ``[study] tissue_mass`` (completes "the <form> form needs tissue_mass ...");
        None: it does not.
    observation_kinds : tuple of str
        Observation kinds only this form predicts.
    """

    name: str
    summary: str
    evaluate: FormFunction
    required: tuple[str, ...]
    optional: tuple[str, ...] = ()
    solved: tuple[str, ...] = ()
    outputs: tuple[Output, ...] = ()
    tissues: tuple[str, ...] | None = None
    per_tissue: Mapping[str, TissueExtras] = field(default_factory=dict)
    note_outputs: tuple[str, ...] = ()
    notes: NoteFunction | None = None
    tissue_mass: str | None = None
    observation_kinds: tuple[str, ...] = ()

    def extras(self, tissue: str | None) -> TissueExtras:
        """The per-tissue extras of ``tissue`` (empty ones for any other tissue or None)."""
        return self.per_tissue.get(tissue or "", _NO_EXTRAS)

    def function(self, tissue: str | None) -> FormFunction:
        """The evaluate function for ``tissue`` (its own where :attr:`per_tissue` names one)."""
        return self.extras(tissue).evaluate or self.evaluate


_NO_EXTRAS = TissueExtras()
