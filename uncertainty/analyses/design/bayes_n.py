"""Bayesian sample size of a normal endpoint: interval width, probability of success, and EVSI.

Everything is on the analysis scale (the endpoint's unit for a shift, log units for a ratio), the endpoint
sd ``sd`` is known, and the estimate of the effect from ``n`` completing subjects per arm is normal with
variance ``tau^2``: ``2 sd^2 / n`` for two arms (so the effective information is ``n / (2 sd^2)``),
``sd^2 / n`` paired, ``sd^2 / (2n)`` for a crossover (:func:`trial_power.standard_error`). The design prior
over the effect is normal ``N(m0, s0^2)``; the analysis prior is a conjugate normal ``N(a0, sa^2)``, by
default the design prior. With these:

- posterior sd ``s1 = (1/sa^2 + 1/tau^2)^(-1/2)``, the same for every trial outcome (the sd is known), so the
  average width of the 95 % posterior interval is ``2 z_0.975 s1``; the smallest ``n`` with that width at or
  below the target is closed form;
- the preposterior (prior predictive) distribution of the estimate is ``N(m0, s0^2 + tau^2)``; the
  probability that the 95 % posterior interval excludes no effect in the direction of benefit is then a
  normal tail probability (:func:`trial_power.bayes_success_probability`; Spiegelhalter, Abrams & Myles 2004,
  "Bayesian Approaches to Clinical Trials and Health-Care Evaluation", Wiley, chapter 6 on the
  predictive probability of success; from memory);
- the expected value of sample information of the decision "adopt the treatment when the posterior mean lies
  beyond 0 in the direction of benefit", with the value of adopting the effect in that direction (and 0 for
  not adopting), in units of the effect per treated subject. With the analysis prior equal to the design
  prior it is ``s_pre L(|m0| / s_pre)``, ``s_pre^2 = s0^2 - s1^2 = s0^4 / (s0^2 + tau^2)`` the variance of the
  preposterior mean and ``L(u) = phi(u) - u (1 - Phi(u))`` the unit normal loss function (Raiffa & Schlaifer
  1961, "Applied Statistical Decision Theory", Harvard, the normal-prior normal-sampling terminal analysis;
  from memory). Its limit for infinite n is the expected value of perfect information ``s0 L(|m0| / s0)``.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import stats

from uncertainty.analyses.design import trial_power as tp

#: Largest n per arm the searches consider.
N_MAX = 10**6
#: Level of the posterior interval (95 %, common practice).
LEVEL = 0.95


def unit_normal_loss(u: np.ndarray | float) -> np.ndarray:
    """The unit normal loss function ``L(u) = phi(u) - u (1 - Phi(u))`` (Raiffa & Schlaifer 1961; from memory).

    Parameters
    ----------
    u : float or array
        Standardised distance (dimensionless).

    Returns
    -------
    numpy.ndarray
        ``E[max(Z - u, 0)]`` for a standard normal Z (dimensionless).
    """
    u = np.asarray(u, dtype=float)
    return stats.norm.pdf(u) - u * stats.norm.sf(u)


def posterior_sd(n: np.ndarray | int, sd: float, prior_sd: float, design: str = "parallel") -> np.ndarray:
    """Posterior sd of the effect after ``n`` completing subjects per arm (conjugate normal, known sd).

    Parameters
    ----------
    n : int or array
        Completing subjects per arm (per sequence for a crossover).
    sd : float
        Endpoint sd on the analysis scale (endpoint unit or log units).
    prior_sd : float
        sd of the analysis prior (same unit).
    design : str
        ``parallel``, ``ancova``, ``paired`` or ``crossover``.

    Returns
    -------
    numpy.ndarray
        ``(1/prior_sd^2 + 1/tau^2)^(-1/2)`` (unit of ``sd``).
    """
    tau = tp.standard_error(n, sd, design)
    return 1.0 / np.sqrt(1.0 / prior_sd**2 + 1.0 / tau**2)


def _first(ok: np.ndarray, ns: np.ndarray) -> int | None:
    idx = np.flatnonzero(ok)
    return int(ns[idx[0]]) if idx.size else None


def _grid(design: str) -> np.ndarray:
    return np.arange(3 if design == "ancova" else 1, N_MAX + 1)


def n_for_width(width: float, sd: float, prior_sd: float, design: str = "parallel") -> int | None:
    """Smallest n per arm whose 95 % posterior interval is at most ``width`` wide.

    Parameters
    ----------
    width : float
        Target full width of the interval (unit of ``sd``), > 0.
    sd, prior_sd : float
        Endpoint sd and analysis-prior sd (analysis scale).
    design : str
        ``parallel``, ``ancova``, ``paired`` or ``crossover``.

    Returns
    -------
    int or None
        Completing subjects per arm (0 when the prior alone is narrow enough; None beyond :data:`N_MAX`).
    """
    z = stats.norm.ppf(0.5 + LEVEL / 2)
    if 2 * z * prior_sd <= width:
        return 0
    ns = _grid(design)
    return _first(2 * z * posterior_sd(ns, sd, prior_sd, design) <= width, ns)


def success_probability(n: np.ndarray | int, m0: float, s0: float, sd: float, a0: float, sa: float,
                        direction: float, design: str = "parallel") -> np.ndarray:
    """Preposterior probability that the 95 % posterior interval lies wholly beyond 0 in the direction of benefit.

    Parameters
    ----------
    n : int or array
        Completing subjects per arm.
    m0, s0 : float
        Design prior mean and sd of the effect (analysis scale).
    sd : float
        Endpoint sd (analysis scale).
    a0, sa : float
        Analysis prior mean and sd.
    direction : float
        +1 when an increase is the benefit, -1 for a decrease.
    design : str
        ``parallel``, ``ancova``, ``paired`` or ``crossover``.

    Returns
    -------
    numpy.ndarray
        Probability (dimensionless).
    """
    return tp.bayes_success_probability(n, m0, s0, sd, a0, sa, alpha=1 - LEVEL, design=design, direction=direction)


def n_for_success(target: float, m0: float, s0: float, sd: float, a0: float, sa: float, direction: float,
                  design: str = "parallel") -> int | None:
    """Smallest n per arm with :func:`success_probability` at or above ``target``.

    Parameters
    ----------
    target : float
        Target probability in (0, 1).
    m0, s0, sd, a0, sa, direction, design :
        As :func:`success_probability`.

    Returns
    -------
    int or None
        Completing subjects per arm, or None when not reached by :data:`N_MAX` (the probability cannot exceed
        the prior probability of benefit ``Phi(direction m0 / s0)``).
    """
    ns = _grid(design)
    return _first(success_probability(ns, m0, s0, sd, a0, sa, direction, design) >= target, ns)


def evsi(n: np.ndarray | int, m0: float, s0: float, sd: float, a0: float, sa: float, direction: float,
         design: str = "parallel") -> np.ndarray:
    """Expected value of sample information of a trial of ``n`` per arm for the adopt/reject decision.

    Adopt when the analysis posterior mean lies beyond 0 in the direction of benefit; the value of adopting is
    ``direction * effect``, of not adopting 0, judged under the design prior. With ``X = direction * D``,
    ``D ~ N(m0, s0^2 + tau^2)`` and adoption when ``X > c``, ``c = -direction a0 tau^2 / sa^2``, the expected
    value is ``direction m0 P(X > c) + s_pre phi((c - direction m0) / r)`` (``r^2 = s0^2 + tau^2``,
    ``s_pre = s0^2 / r``), minus the value of deciding now, ``max(direction m0, 0)``. With the analysis prior
    equal to the design prior this is ``s_pre L(|m0| / s_pre)`` (module docstring).

    Parameters
    ----------
    n : int or array
        Completing subjects per arm.
    m0, s0, sd, a0, sa, direction, design :
        As :func:`success_probability`.

    Returns
    -------
    numpy.ndarray
        EVSI in units of the effect on the analysis scale (per treated subject); may be negative when the
        analysis prior disagrees with the design prior.
    """
    tau = tp.standard_error(n, sd, design)
    r = np.sqrt(s0**2 + tau**2)
    s_pre = s0**2 / r
    mu = direction * m0
    c = -direction * a0 * tau**2 / sa**2
    value = mu * stats.norm.sf((c - mu) / r) + s_pre * stats.norm.pdf((c - mu) / r)
    return value - max(mu, 0.0)


def evpi(m0: float, s0: float) -> float:
    """Expected value of perfect information of the adopt/reject decision: ``s0 L(|m0| / s0)``.

    Parameters
    ----------
    m0, s0 : float
        Design prior mean and sd of the effect (analysis scale).

    Returns
    -------
    float
        In units of the effect (analysis scale).
    """
    return float(s0 * unit_normal_loss(abs(m0) / s0))


def plan(spec: Any, sd: float, n_power: int | None, width: float | None,
         success: float | None) -> dict[str, Any] | None:
    """The ``bayesian_sample_size`` entry of a design result, or None without a normal design prior.

    Parameters
    ----------
    spec : DesignSpec
        The parsed section (design prior, analysis prior, direction, analysis, dropout).
    sd : float
        Endpoint sd on the analysis scale.
    n_power : int or None
        Completing n per arm for the target power (its EVSI is reported too).
    width : float or None
        Target width of the 95 % posterior interval (analysis scale), ``[design] bayes_width``.
    success : float or None
        Target probability that the interval excludes no effect, ``[design] bayes_success``.

    Returns
    -------
    dict or None
        Targets, n per arm (completing and enrolled), probabilities and EVSI (units of the effect), the prior
        used and the method.
    """
    p = spec.design_prior
    if p is None or p.get("dist", "normal") != "normal" or not sd > 0:
        return None
    m0, s0 = float(p["mean"]), float(p["sd"])
    ap = spec.analysis_prior
    a0, sa = (float(ap["mean"]), float(ap["sd"])) if ap else (m0, s0)
    d, des = spec.direction, spec.analysis

    def enrolled(n: int | None) -> int | None:
        return None if n is None else int(math.ceil(n / (1 - spec.dropout) - 1e-9))

    def at(n: int | None) -> dict[str, Any] | None:
        if not n:
            return None
        return {"n_per_arm_completing": n, "n_per_arm_enrolled": enrolled(n),
                "posterior_sd": float(posterior_sd(n, sd, sa, des)),
                "width": float(2 * stats.norm.ppf(0.5 + LEVEL / 2) * posterior_sd(n, sd, sa, des)),
                "success_probability": float(success_probability(n, m0, s0, sd, a0, sa, d, des)),
                "evsi": float(evsi(n, m0, s0, sd, a0, sa, d, des))}

    n_w = n_for_width(width, sd, sa, des) if width is not None else None
    n_s = n_for_success(success, m0, s0, sd, a0, sa, d, des) if success is not None else None
    var = {"parallel": "2 sd^2 / n", "ancova": "2 sd^2 / n (1 + 1/(2n - 4)), residual sd", "paired": "sd^2 / n",
           "crossover": "sd^2 / (2n)"}[des]
    return {
        "design_prior": {"mean": m0, "sd": s0},
        "analysis_prior": {"mean": a0, "sd": sa},
        "analysis_prior_source": "[design] analysis_prior" if ap else "the design prior",
        "sd_analysis_scale": sd,
        "variance_of_estimate": var,
        "level": LEVEL,
        "width_target": width, "n_per_arm_width_completing": n_w, "n_per_arm_width_enrolled": enrolled(n_w),
        "success_target": success, "n_per_arm_success_completing": n_s,
        "n_per_arm_success_enrolled": enrolled(n_s),
        "success_limit": float(stats.norm.cdf(d * m0 / s0)),
        "evpi": evpi(m0, s0),
        "at_n_power": at(n_power), "at_n_width": at(n_w), "at_n_success": at(n_s),
        "units": "n in subjects per arm; width, posterior sd, EVSI and EVPI in units of the effect on the analysis "
                 "scale (per treated subject); probabilities dimensionless",
        "method": ("conjugate normal, known sd; 95 % posterior interval width closed form; probability of success "
                   "from the prior predictive distribution of the estimate (Spiegelhalter, Abrams & Myles 2004); "
                   "EVSI of adopting when the posterior mean shows benefit, unit normal loss (Raiffa & Schlaifer "
                   "1961)"),
    }
