"""Starling's principle: net transcapillary fluid filtration from the six classic quantities.

Jv = Kf [(Pc - Pi) - sigma (pi_c - pi_i)]   (Starling 1896; Kedem & Katchalsky 1958 form)

Units: pressures (Pc, Pi, pi_c, pi_i) in mmHg; sigma dimensionless (0..1); Kf in
mL/min/mmHg per basis (100 g by default); Jv in mL/min per the same basis.
Sign convention: Jv > 0 filtration (out of the capillary), Jv < 0 absorption.

Every function here is plain arithmetic, so it evaluates numpy arrays and PyTensor tensors alike
(broadcasting as usual); ``direction`` is numpy only (it returns labels).
"""

from __future__ import annotations

from typing import Any

import numpy as np

Array = Any  # numpy array, float or pytensor tensor


def net_pressure(Pc: Array, Pi: Array, pi_c: Array, pi_i: Array, sigma: Array) -> Array:
    """Net driving pressure (Pc - Pi) - sigma (pi_c - pi_i), in mmHg (positive drives filtration)."""
    return (Pc - Pi) - sigma * (pi_c - pi_i)


def filtration(Kf: Array, Pc: Array, Pi: Array, pi_c: Array, pi_i: Array, sigma: Array) -> Array:
    """Net filtration Jv = Kf [(Pc - Pi) - sigma (pi_c - pi_i)].

    Kf in mL/min/mmHg per basis, pressures in mmHg; returns Jv in mL/min per the same basis.
    """
    return Kf * net_pressure(Pc, Pi, pi_c, pi_i, sigma)


def forces(Pc: Array, Pi: Array, pi_c: Array, pi_i: Array, sigma: Array) -> dict[str, Array]:
    """Signed contribution of each force to the net pressure, in mmHg.

    Keys ``Pc`` (+Pc), ``Pi`` (-Pi), ``pi_c`` (-sigma pi_c), ``pi_i`` (+sigma pi_i); their sum is
    ``net_pressure``. A positive contribution favours filtration, a negative one absorption.
    """
    zero = 0.0 * (Pc + Pi + pi_c + pi_i + sigma)  # every entry gets the full broadcast shape
    return {
        "Pc": Pc + zero,
        "Pi": -Pi + zero,
        "pi_c": -sigma * pi_c + zero,
        "pi_i": sigma * pi_i + zero,
    }


def direction(Jv: Array, tol: float = 1e-12) -> str | np.ndarray:
    """Label a net flow: ``"filtration"`` (Jv > tol), ``"absorption"`` (Jv < -tol), else ``"balance"``.

    Jv in any flow unit (tol in the same unit). Numpy only. A scalar input returns a str, an array
    input an array of str of the same shape.
    """
    arr = np.asarray(Jv, dtype=float)
    out = np.where(arr > tol, "filtration", np.where(arr < -tol, "absorption", "balance"))
    if out.ndim == 0:
        return str(out)
    return out
