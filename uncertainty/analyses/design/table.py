"""The plain-text summary and curve ``fluidshift design`` prints, from a design result's document."""

from __future__ import annotations

from typing import Any


def _f(x: float | None, fmt: str = ".3f") -> str:
    return "-" if x is None else format(x, fmt)


def _n(x: int | None) -> str:
    return "-" if x is None else str(x)


def headline(doc: dict[str, Any]) -> str:
    """One sentence: n per arm enrolled and completing, total N, how n was found, power at that n.

    Parameters
    ----------
    doc : dict
        ``DesignResult.to_dict()`` (subjects; power dimensionless).

    Returns
    -------
    str
        The headline the table, the report and the summary share.
    """
    se = doc.get("n_per_arm_mc_se")
    how = "simulated" if str(doc.get("n_method", "")).startswith("simulated") else "analytic"
    err = f", MC error of n +- {se:.1f}" if se else ""
    test = f" ({doc['test_text']})" if doc.get("test_text") else ""
    per = "per sequence" if doc.get("design") == "crossover" else "per arm"
    text = (f"n {per} for power {doc['target_power']:g}{test}: {_n(doc.get('n_per_arm_enrolled'))} enrolled "
            f"({_n(doc.get('n_per_arm_completing'))} completing, dropout {doc.get('dropout', 0):g}); total N "
            f"{_n(doc.get('total_n_enrolled'))} enrolled [{how}{err}]; power at that n "
            f"{_f(doc.get('power'))} +- {_f(doc.get('power_mc_se'))} simulated, {_f(doc.get('power_analytic'))} "
            + ("exact binomial" if doc.get("responder") else "noncentral t"))
    if doc.get("power_conditional") is not None:
        text += (f" (conditional at the typical values {_f(doc['power_conditional'])} +- "
                 f"{_f(doc.get('power_conditional_mc_se'))}; the simulated power is the expected power)")
    return text


def bayes_sentences(b: dict[str, Any]) -> list[str]:
    """Sentences of a ``bayesian_sample_size`` entry, shared by the table, the protocol page and the report.

    Parameters
    ----------
    b : dict
        The entry (n in subjects per arm; width, posterior sd, EVSI and EVPI in units of the effect on the
        analysis scale; probabilities dimensionless).

    Returns
    -------
    list of str
        One sentence per target, then the EVSI at each n, then the prior and method.
    """
    dp, ap = b["design_prior"], b["analysis_prior"]
    out = []
    if b.get("width_target") is not None:
        out.append(f"Bayesian n per arm for a 95% posterior interval no wider than {b['width_target']:g}: "
                   f"{_n(b.get('n_per_arm_width_enrolled'))} enrolled ({_n(b.get('n_per_arm_width_completing'))} "
                   "completing).")
    if b.get("success_target") is not None:
        out.append(f"Bayesian n per arm for probability {b['success_target']:g} that the 95% posterior interval "
                   f"excludes no effect in the direction of benefit: {_n(b.get('n_per_arm_success_enrolled'))} "
                   f"enrolled ({_n(b.get('n_per_arm_success_completing'))} completing; the probability cannot "
                   f"exceed {b['success_limit']:.3f}, the prior probability of benefit).")
    for key, what in (("at_n_power", "the n for the target power"), ("at_n_width", "the width n"),
                      ("at_n_success", "the success n")):
        a = b.get(key)
        if a:
            out.append(f"At {what} ({a['n_per_arm_completing']} completing per arm): posterior sd "
                       f"{a['posterior_sd']:.4g}, 95% interval width {a['width']:.4g}, probability of success "
                       f"{a['success_probability']:.3f}, EVSI {a['evsi']:.4g} (units of the effect).")
    out.append(f"EVPI {b['evpi']:.4g} (units of the effect; the most any trial can be worth). Design prior "
               f"N({dp['mean']:g}, {dp['sd']:g}^2), analysis prior N({ap['mean']:g}, {ap['sd']:g}^2) "
               f"({b['analysis_prior_source']}); endpoint sd {b['sd_analysis_scale']:.4g}, variance of the "
               f"estimate {b['variance_of_estimate']}; {b['method']}.")
    return out


def sequential_lines(gsq: dict[str, Any]) -> list[str]:
    """Per-look lines of a group-sequential plan: n, bounds and the probabilities of stopping there.

    Parameters
    ----------
    gsq : dict
        The ``group_sequential`` entry of a design result (subjects per arm; Z and probabilities dimensionless).

    Returns
    -------
    list of str
        A header and one line per look.
    """
    if not gsq.get("stop_null"):
        return []
    fut = gsq.get("futility_z")
    lines = [("futility rule: non-binding, " + f"{gsq['futility']}-shaped beta spending" if fut else
              "no futility rule (the lower column is stopping for harm)"),
             f"{'look':>5}{'n/arm':>7}{'eff. Z':>8}{'fut. Z':>8}{'H0 eff.':>9}{'H0 fut.':>9}{'H1 eff.':>9}"
             f"{'H1 fut.':>9}"]
    s0, s1 = gsq["stop_null"], gsq["stop_alternative"]
    for k, n in enumerate(gsq["n_per_arm_at_looks"]):
        b = f"{fut[k]:.3f}" if fut else f"{-gsq['boundaries_z'][k]:.3f}"
        lines.append(f"{k + 1:>5}{n:>7}{gsq['boundaries_z'][k]:>8.3f}{b:>8}{s0['efficacy'][k]:>9.4f}"
                     f"{s0['futility_or_harm'][k]:>9.4f}{s1['efficacy'][k]:>9.4f}{s1['futility_or_harm'][k]:>9.4f}")
    return lines


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
    test = doc.get("test_text") or (f"alpha {doc['alpha']:g} two-sided (success only for benefit: "
                                    f"{doc.get('benefit', '-')})")
    lines = [f"{doc['design']} design ({doc['analysis']}), endpoint {doc['endpoint']} on the {doc['scale']} scale, "
             f"{test}, "
             f"{doc['path']} path, {doc['trials_per_point']} trials per point",
             headline(doc)]
    if doc.get("precision_history"):  # whether the tolerance was met is one of the notes
        lines.append(f"tolerance {doc['tol']:g}, trials per point tried (widest 95% half-width): " + ", ".join(
            f"{h['trials']} ({h['widest_half_width']:.3g})" for h in doc["precision_history"]))
    gsq = doc.get("group_sequential")
    if gsq:
        lines.append(f"group-sequential, {gsq['looks']} looks ({gsq['spending']} spending): n per arm at most "
                     f"{gsq['n_per_arm_max_enrolled']} enrolled ({gsq['n_per_arm_max_completing']} completing, "
                     f"inflation {gsq['inflation']:.3f}); expected completing n per arm "
                     f"{gsq['expected_n_per_arm_null']:.1f} under H0, "
                     f"{gsq['expected_n_per_arm_alternative']:.1f} under H1; |Z| boundaries "
                     + ", ".join(f"{c:.3f}" for c in gsq["boundaries_z"]))
        lines += sequential_lines(gsq)
    resp = doc.get("responder")
    if resp:
        lines.append(f"responder: {doc['endpoint']} {resp['side']} {resp['cut']:g}; response probabilities "
                     f"{resp['p_control']:.4f} control, {resp['p_treated']:.4f} treated; n per arm by Fleiss' formula "
                     f"with continuity correction {_n(resp.get('n_per_arm_fleiss'))} completing")
    if doc.get("target_assurance") is not None:
        n_a = doc.get("n_per_arm_assurance_enrolled", doc.get("n_per_arm_assurance"))
        se = doc.get("n_per_arm_assurance_mc_se")
        lines.append(f"n per arm for assurance {doc['target_assurance']:g}: {_n(n_a)} enrolled "
                     f"({_n(doc.get('n_per_arm_assurance_analysed'))} completing"
                     f"{f', MC error of n +- {se:.1f}' if se else ''}); assurance at that n "
                     f"{_f(doc.get('assurance_at_n_assurance'))} +- {_f(doc.get('assurance_at_n_assurance_mc_se'))}"
                     f" simulated, {_f(doc.get('assurance_analytic_at_n_assurance'))} analytic")
    if doc.get("half_width"):
        hw = doc["half_width"]
        lines.append(f"n per arm for a 95% half-width <= {hw['target']:g} with probability "
                     f"{hw['probability_target']:g}: {hw['n_per_arm'] or '-'} enrolled")
    if doc.get("bayesian_sample_size"):
        lines += bayes_sentences(doc["bayesian_sample_size"])
    cond = any(r.get("power_conditional") is not None for r in doc["curve"])
    lines.append(f"{'compl.':>6}{'enrol':>7}{'power':>8}{'+-':>7}{'nct':>8}"
                 + (f"{'cond.':>8}" if cond else "") + f"{'assur.':>8}{'+-':>7}{'Bayes':>8}")
    for r in doc["curve"]:
        lines.append(f"{r['n_per_arm']:>6}{r['n_enrolled']:>7}{_f(r.get('power')):>8}{_f(r.get('power_mc_se')):>7}"
                     f"{_f(r.get('power_analytic')):>8}"
                     + (f"{_f(r.get('power_conditional')):>8}" if cond else "")
                     + f"{_f(r.get('assurance')):>8}{_f(r.get('assurance_mc_se')):>7}"
                     f"{_f(r.get('bayesian_success')):>8}")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)
