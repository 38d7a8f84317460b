"""What the form catalogue and ``evaluate`` read from a study: small read-only Protocols.

:class:`uncertainty.study.Study` satisfies them; so do light stand-ins in tests. Attributes a
stand-in may lack (``tissue``, ``tissue_mass_kg``, ``Pi_ref``, ``steady_Cp``, ``derived``) are read
with a default of None (empty for ``derived``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any, Protocol


class PriorLike(Protocol):
    """A declared prior: fixed or uncertain, with a median (canonical unit)."""

    @property
    def is_fixed(self) -> bool:
        """True for a fixed value (``params["value"]``)."""
        ...

    @property
    def params(self) -> Mapping[str, Any]:
        """The distribution's parameters (canonical units)."""
        ...

    def median(self) -> float:
        """The prior median (canonical unit)."""
        ...


class DerivationLike(Protocol):
    """A quantity computed from other inputs (oncotic pressure from protein, Pc from pressures)."""

    @property
    def inputs(self) -> Sequence[str]:
        """The symbols it reads."""
        ...

    def compute(self, values: Mapping[str, Any], xp: Any) -> Any:
        """The derived value (canonical unit) from ``values`` with ``xp`` (numpy or PyTensor)."""
        ...


class StudyLike(Protocol):
    """The attributes of a study that the catalogue and ``evaluate`` read.

    Attributes
    ----------
    model : str
        The model form (a key of ``uncertainty.forms.catalogue.FORMS``).
    priors : mapping
        symbol -> prior (canonical units), every input the form needs that is not derived.
    derived : mapping
        target -> derivation.
    tissue : str or None
        The prior set (tissue).
    tissue_mass_kg : float or None
        Organ or limb mass (kg).
    Pi_ref : float or None
        Reference interstitial pressure of the tissue (mmHg).
    steady_Cp : str or None
        The plasma-protein input the steady forms pass to the protein cubic.
    """

    @property
    def model(self) -> str: ...

    @property
    def priors(self) -> Mapping[str, PriorLike]: ...

    @property
    def derived(self) -> Mapping[str, DerivationLike]: ...

    @property
    def tissue(self) -> str | None: ...

    @property
    def tissue_mass_kg(self) -> float | None: ...

    @property
    def Pi_ref(self) -> float | None: ...

    @property
    def steady_Cp(self) -> str | None: ...
