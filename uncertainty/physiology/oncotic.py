"""Colloid osmotic (oncotic) pressure of protein solutions.

Empirical cubic relations of Landis & Pappenheimer (1963, Handbook of Physiology, Sect. 2,
Circulation II, ch. 29; coefficients from memory, not re-read):

- total plasma protein:  pi = 2.1 C + 0.16 C^2 + 0.009 C^3
- albumin:               pi = 2.8 C + 0.18 C^2 + 0.012 C^3
- globulin:              pi = 1.6 C + 0.15 C^2 + 0.006 C^3  (from memory: the globulin companion
  relation usually quoted beside the two above; not confirmed against the original table)

The albumin + globulin form treats each cubic as the first three terms of a virial expansion and
keeps the cross terms of the mixture: pi = sum_k (sum_i a_ik^(1/k) C_i)^k, k = 1, 2, 3, i.e. the
geometric-mean combining rule for the mixed virial coefficients (B_AG = sqrt(B_AA B_GG), common
practice for virial mixtures). Summing the two pure-species cubics instead drops the albumin-globulin
cross terms and gives about 21.6 mmHg for normal plasma (4.2 + 2.8 g/dL) against 24-27 mmHg
measured; with the cross terms it gives about 27.6 mmHg. In binary protein/polymer mixtures the
osmotic pressure follows a polynomial in the total nondiffusible concentration and the cross excluded
volume exceeds both pure ones (Shaw M 1976, Biophys J 16:43-57, abstract: BSA 0.97, dextran T110
3.04, BSA-dextran 6.8 x 1e-18 cm^3 per molecule), so the geometric mean is the conservative (lower)
choice. The form reduces exactly to either pure cubic when the other protein is absent. The ideal
van 't Hoff value is given for comparison.

Units: C in g/dL (= 10 g/L), pi in mmHg, T in kelvin, molar mass in g/mol.
The polynomials are plain arithmetic (numpy arrays and PyTensor tensors alike); the inverse
``protein_from_pi`` is numpy only (root finding with scipy).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.errors import InputError

Array = Any

#: Coefficients (a1, a2, a3) of pi = a1 C + a2 C^2 + a3 C^3, C in g/dL, pi in mmHg.
COEFFICIENTS: dict[str, tuple[float, float, float]] = {
    "total": (2.1, 0.16, 0.009),    # Landis & Pappenheimer 1963 (from memory)
    "albumin": (2.8, 0.18, 0.012),  # Landis & Pappenheimer 1963 (from memory)
    "globulin": (1.6, 0.15, 0.006),  # Landis & Pappenheimer 1963 (from memory, not confirmed)
}

GAS_CONSTANT = 8.314462618  # J/(mol K), CODATA 2018 exact value
PA_PER_MMHG = 133.322387415  # common practice (conventional mmHg definition)
BODY_TEMPERATURE_K = 310.15  # 37 degC, common practice


def pi_cubic(C: Array, kind: str) -> Array:
    """Colloid osmotic pressure (mmHg) of protein at ``C`` (g/dL) by the cubic of ``kind``
    (``COEFFICIENTS``: total, albumin or globulin)."""
    a1, a2, a3 = COEFFICIENTS[kind]
    return C * (a1 + C * (a2 + C * a3))


def pi_cubic_slope(C: Array, kind: str) -> Array:
    """d pi / dC (mmHg per g/dL) of :func:`pi_cubic` at ``C`` (g/dL)."""
    a1, a2, a3 = COEFFICIENTS[kind]
    return a1 + C * (2.0 * a2 + C * 3.0 * a3)


def pi_total_protein(C: Array) -> Array:
    """Oncotic pressure (mmHg) of plasma from total protein C (g/dL): 2.1C + 0.16C^2 + 0.009C^3."""
    return pi_cubic(C, "total")


def pi_albumin(C: Array) -> Array:
    """Oncotic pressure (mmHg) of an albumin solution C (g/dL): 2.8C + 0.18C^2 + 0.012C^3."""
    return pi_cubic(C, "albumin")


def pi_globulin(C: Array) -> Array:
    """Oncotic pressure (mmHg) of a globulin solution C (g/dL): 1.6C + 0.15C^2 + 0.006C^3 (from memory)."""
    return pi_cubic(C, "globulin")


def pi_albumin_globulin_parts(C_alb: Array, C_glob: Array) -> tuple[Array, Array]:
    """Albumin's and globulin's parts (mmHg) of the oncotic pressure of their mixture.

    Each virial order k contributes (s_A + s_G)^k with s_i = a_ik^(1/k) C_i (geometric-mean combining
    rule for the cross coefficients, see the module docstring); that term is shared in proportion
    s_i / (s_A + s_G), so the two parts add up to :func:`pi_albumin_globulin`.

    Parameters
    ----------
    C_alb, C_glob : array
        Albumin and globulin concentrations (g/dL), >= 0.

    Returns
    -------
    tuple of array
        (albumin part, globulin part) in mmHg.
    """
    alb = COEFFICIENTS["albumin"]
    glob = COEFFICIENTS["globulin"]
    part_a = 0.0 * C_alb
    part_g = 0.0 * C_glob
    for k in (1, 2, 3):
        s_a = alb[k - 1] ** (1.0 / k) * C_alb
        s_g = glob[k - 1] ** (1.0 / k) * C_glob
        total = s_a + s_g
        shared = total ** (k - 1)  # (s_A + s_G)^k split as s_i (s_A + s_G)^(k-1)
        part_a = part_a + s_a * shared
        part_g = part_g + s_g * shared
    return part_a, part_g


def pi_albumin_globulin(C_alb: Array, C_glob: Array) -> Array:
    """Oncotic pressure (mmHg) of a mixture of albumin and globulin (g/dL), cross terms included.

    pi = sum over k = 1..3 of (a_Ak^(1/k) C_alb + a_Gk^(1/k) C_glob)^k with the Landis & Pappenheimer
    coefficients of each protein (``COEFFICIENTS``); equals :func:`pi_albumin` when C_glob = 0 and
    :func:`pi_globulin` when C_alb = 0.

    Parameters
    ----------
    C_alb, C_glob : array
        Albumin and globulin concentrations (g/dL), >= 0.

    Returns
    -------
    array
        Colloid osmotic pressure in mmHg.
    """
    part_a, part_g = pi_albumin_globulin_parts(C_alb, C_glob)
    return part_a + part_g


def pi_van_t_hoff(C: Array, molar_mass: Array = 66_500.0, T: Array = BODY_TEMPERATURE_K) -> Array:
    """Ideal (van 't Hoff) osmotic pressure pi = c R T in mmHg, for comparison with the empirical forms.

    C in g/dL, molar_mass in g/mol (default 66 500 g/mol, albumin, common practice), T in K
    (default 310.15 K). Real protein solutions exceed this value (excluded volume, Donnan effect).
    """
    molar = C * 10.0 / molar_mass * 1000.0  # g/dL -> g/L -> mol/L -> mol/m^3
    return molar * GAS_CONSTANT * T / PA_PER_MMHG


def protein_from_pi(pi: Array, kind: str = "total") -> np.ndarray | float:
    """Protein concentration (g/dL) that gives oncotic pressure ``pi`` (mmHg): the inverse relation.

    ``kind`` is ``"total"``, ``"albumin"`` or ``"globulin"``. Each cubic is strictly increasing for
    C >= 0, so the root is unique; it is found with scipy's Brent method. Numpy only. Negative or
    non-finite ``pi`` raises InputError.
    """
    from scipy.optimize import brentq

    if kind not in COEFFICIENTS:
        raise InputError(f"unknown protein kind, expected one of {sorted(COEFFICIENTS)}",
                         key="kind", value=kind)
    arr = np.asarray(pi, dtype=float)
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise InputError("oncotic pressure must be finite and >= 0 mmHg", key="pi", value=pi)
    a1 = COEFFICIENTS[kind][0]
    out = np.empty_like(arr)
    for idx, p in np.ndenumerate(arr):
        if p < 1e-200:  # the linear term alone is exact to double precision here
            out[idx] = p / a1
            continue
        hi = 1.01 * p / a1  # the cubic lies above its linear term, so the root is <= p / a1
        out[idx] = brentq(lambda c, p=p: pi_cubic(c, kind) - p, 0.0, hi, xtol=1e-14, rtol=1e-14)
    if out.ndim == 0:
        return float(out)
    return out
