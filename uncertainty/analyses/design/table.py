"""The plain-text summary and curve ``fluidshift design`` prints, from a design result's document."""

from __future__ import annotations

from typing import Any


def _f(x: float | None, fmt: str = ".3f") -> str:
    return "-" if x is None else format(x, fmt)


def table(doc: dict[str, Any]) -> str:
    """Plain-text summary and curve of a design result.

    Parameters
    ----------
    doc : dict
        ``DesignResult.to_dict()`` (n per arm, power and assurance dimensionless; the half-width
        target in the endpoint's unit).

    Returns
    -------
    str
        The design, the sample sizes for each target, one row per curve point, notes.
    """
    lines = [f"{doc['design']} design ({doc['analysis']}), endpoint {doc['endpoint']} on the {doc['scale']} scale, "
             f"alpha {doc['alpha']:g} two-sided, {doc['path']} path, {doc['trials_per_point']} trials per point",
             f"n per arm for power {doc['target_power']:g}: {_f(doc['n_per_arm'], 'd') if doc['n_per_arm'] else '-'}"
             f" enrolled ({_f(doc['n_per_arm_analysed'], 'd') if doc['n_per_arm_analysed'] else '-'} completing);"
             f" power {_f(doc['power'])} +- {_f(doc['power_mc_se'])} (noncentral t {_f(doc['power_analytic'])})"]
    if doc.get("target_assurance") is not None:
        n_a = doc["n_per_arm_assurance"]
        lines.append(f"n per arm for assurance {doc['target_assurance']:g}: {n_a if n_a else '-'} enrolled")
    if doc.get("half_width"):
        hw = doc["half_width"]
        lines.append(f"n per arm for a 95% half-width <= {hw['target']:g} with probability "
                     f"{hw['probability_target']:g}: {hw['n_per_arm'] or '-'} enrolled")
    lines.append(f"{'n/arm':>6}{'enrol':>7}{'power':>8}{'+-':>7}{'nct':>8}{'assur.':>8}{'+-':>7}{'Bayes':>8}")
    for r in doc["curve"]:
        lines.append(f"{r['n_per_arm']:>6}{r['n_enrolled']:>7}{_f(r.get('power')):>8}{_f(r.get('power_mc_se')):>7}"
                     f"{_f(r.get('power_analytic')):>8}{_f(r.get('assurance')):>8}{_f(r.get('assurance_mc_se')):>7}"
                     f"{_f(r.get('bayesian_success')):>8}")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)
