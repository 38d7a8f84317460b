"""Design's part of report.html, of the one-screen summary and of the protocol summary (Markdown)."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.design.figure import caption, title
from uncertainty.analyses.design.table import bayes_sentences, headline
from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape, table

CAPTIONS: tuple[Caption, ...] = (
    ("", "", "Simulated power, assurance and Bayesian success (bands of twice the Monte Carlo error) against "
             "enrolled subjects per arm (after dropout), with the noncentral-t power dashed, the target power and "
             "assurance as dotted lines, the headline n per arm (enrolled) as the dotted vertical line and the "
             "assumptions in the line under the figure."),
)

_CURVE_COLS = ("n_per_arm_enrolled", "n_per_arm_completing", "total_n_enrolled", "power", "power_mc_se",
               "power_analytic", "power_conditional", "assurance", "assurance_mc_se", "bayesian_success")
#: keys protocol_markdown reads without a default
_PROTOCOL_KEYS = ("alpha", "target_power", "endpoint", "trials_per_point", "path")


def section_html(res: dict[str, Any]) -> str:
    """The report section: the headline n (enrolled, completing, total N), the design assumptions and the curve.

    Parameters
    ----------
    res : dict
        The stored ``DesignResult.to_dict()`` (n in subjects, power and assurance dimensionless).

    Returns
    -------
    str
        HTML paragraphs and two tables (assumptions, curve).
    """
    parts = [f"<p><strong>{escape(title(res))}</strong>. {escape(headline(res))}.</p>"]
    if res.get("n_per_arm_assurance") is not None:
        parts.append(f"<p>For the target assurance {fmt(res.get('target_assurance'))}: "
                     f"<strong>{fmt(res.get('n_per_arm_assurance'))}</strong> enrolled per arm "
                     f"({fmt(res.get('n_per_arm_assurance_analysed'))} completing), assurance at that n "
                     f"{fmt(res.get('assurance_at_n_assurance'), 3)} (the probability of a significant result in "
                     "the direction of benefit averaged over the design prior).</p>")
    resp = res.get("responder")
    if isinstance(resp, dict):
        parts.append(f"<p>Responder endpoint: {escape(str(res.get('endpoint')))} {escape(str(resp.get('side')))} "
                     f"{fmt(resp.get('cut'))}; response probabilities {fmt(resp.get('p_control'), 3)} (control) and "
                     f"{fmt(resp.get('p_treated'), 3)} (treated); n per arm by Fleiss' formula with continuity "
                     f"correction {fmt(resp.get('n_per_arm_fleiss'))} completing.</p>")
    gsq = res.get("group_sequential")
    if isinstance(gsq, dict) and gsq.get("stop_null"):
        fut = gsq.get("futility_z")
        low = "futility" if fut else "harm"
        fut_text = f", non-binding {escape(str(gsq['futility']))} beta-spending futility bound" if fut else ""
        parts.append(f"<p>Group-sequential: {gsq['looks']} looks, Lan-DeMets {escape(str(gsq['spending']))} alpha "
                     f"spending{fut_text}; "
                     f"at most {fmt(gsq['n_per_arm_max_enrolled'])} enrolled per arm; expected completing n per arm "
                     f"{fmt(gsq['expected_n_per_arm_null'], 3)} under no effect (H0), "
                     f"{fmt(gsq['expected_n_per_arm_alternative'], 3)} under the stated effect (H1).</p>")
        s0, s1 = gsq["stop_null"], gsq["stop_alternative"]
        look_rows = [[str(k + 1), fmt(n), fmt(gsq["boundaries_z"][k], 4),
                      fmt(fut[k] if fut else -gsq["boundaries_z"][k], 4), fmt(s0["efficacy"][k], 3),
                      fmt(s0["futility_or_harm"][k], 3), fmt(s1["efficacy"][k], 3), fmt(s1["futility_or_harm"][k], 3)]
                     for k, n in enumerate(gsq["n_per_arm_at_looks"])]
        parts.append(table(["look", "n per arm", "efficacy Z", f"{low} Z", "H0 stop: efficacy", f"H0 stop: {low}",
                            "H1 stop: efficacy", f"H1 stop: {low}"], look_rows, num_cols=set(range(8))))
    rows = [[a["what"], a["value"], a["source"]] for a in res.get("assumptions") or [] if isinstance(a, dict)]
    if rows:
        parts.append("<p>Design assumptions:</p>" + table(["assumption", "value", "source"], rows))
    curve = [c for c in res.get("curve") or [] if isinstance(c, dict)]
    if curve:
        cols = [c for c in _CURVE_COLS if any(r.get(c) is not None for r in curve)]
        parts.append(table([c.replace("_", " ") for c in cols], [[fmt(c.get(k), 3) for k in cols] for c in curve],
                           num_cols=set(range(len(cols)))))
        parts.append(f"<p><small>{escape(caption(res))}</small></p>")
    if res.get("assumptions") is not None and all(k in res for k in _PROTOCOL_KEYS):
        parts.append(protocol_html(res))
    return "".join(parts)


def markdown_html(md: str) -> str:
    """HTML of the small Markdown subset :func:`protocol_markdown` writes: headings, pipe tables, ``- `` list
    items and paragraphs (text escaped; a heading's level goes one down, under the report's section heading).

    Parameters
    ----------
    md : str
        The Markdown.

    Returns
    -------
    str
        HTML.
    """
    out: list[str] = []
    rows: list[list[str]] = []
    items: list[str] = []

    def flush() -> None:
        if rows:
            out.append(table(rows[0], rows[1:]))
            rows.clear()
        if items:
            out.append("<ul>" + "".join(f"<li>{escape(i)}</li>" for i in items) + "</ul>")
            items.clear()

    for line in md.splitlines():
        text = line.strip()
        if text.startswith("|"):
            cells = [c.strip() for c in text.strip("|").split("|")]
            if not all(set(c) <= {"-", ":"} and c for c in cells):
                rows.append(cells)
            continue
        if text.startswith("- "):
            items.append(text[2:])
            continue
        flush()
        if text.startswith("#"):
            level = min(len(text) - len(text.lstrip("#")) + 1, 6)
            out.append(f"<h{level}>{escape(text.lstrip('#').strip())}</h{level}>")
        elif text:
            out.append(f"<p>{escape(text)}</p>")
    flush()
    return "".join(out)


def protocol_html(res: dict[str, Any]) -> str:
    """The protocol summary (:func:`protocol_markdown`, the one source of its numbers) as an HTML block.

    Parameters
    ----------
    res : dict
        The stored ``DesignResult.to_dict()``.

    Returns
    -------
    str
        A ``div#design-protocol`` holding the rendered Markdown.
    """
    return '<div class="protocol" id="design-protocol">' + markdown_html(protocol_markdown(res)) + "</div>"


def summary(des: dict[str, Any]) -> list[str]:
    """One-screen summary line: the trial size (enrolled and completing per arm, total N) for each target.

    Parameters
    ----------
    des : dict
        The stored ``DesignResult.to_dict()``.

    Returns
    -------
    list of str
        One line.
    """
    part = (f"Trial size: {fmt(des.get('n_per_arm'))} per arm enrolled "
            f"({fmt(des.get('n_per_arm_analysed'))} completing; total N {fmt(des.get('total_n_enrolled'))}) "
            "for the target power")
    if des.get("n_per_arm_assurance") is not None:
        part += f", {fmt(des.get('n_per_arm_assurance'))} per arm enrolled for the target assurance"
    return [part]


def _p(x: Any, se: Any = None) -> str:
    if x is None:
        return "-"
    return f"{x:.3f}" + (f" +- {se:.3f} (MC error)" if se is not None else "")


def sequential_markdown(gsq: dict[str, Any], per: str = "per arm") -> list[str]:
    """Markdown lines of a group-sequential plan: the futility rule and a per-look table of n, bounds and
    the probabilities of stopping at that look under no effect (H0) and the stated effect (H1).

    Parameters
    ----------
    gsq : dict
        The ``group_sequential`` entry of a design result (subjects; Z and probabilities dimensionless).
    per : str
        How n is counted ("per arm", "per sequence" or "subjects").

    Returns
    -------
    list of str
        Markdown lines (empty for a plan without per-look probabilities).
    """
    if not gsq.get("stop_null"):
        return []
    fut = gsq.get("futility_z")
    out = []
    if fut:
        out += [f"Futility: at each interim analysis the trial may stop when the Z statistic in the direction of "
                f"benefit falls below the futility bound ({gsq['futility']}-shaped beta spending of 1 - power "
                "under the stated effect; Pampallona, Tsiatis & Kim 2001). The bound is non-binding: the efficacy "
                "bounds ignore it, so the type I error holds whether or not the trial stops; the power and the "
                "expected n assume it is followed.", ""]
    low = "futility" if fut else "harm"
    out += [f"| look | n {per} (completing) | efficacy Z | {low} Z | stop H0: efficacy | stop H0: {low} | "
            f"stop H1: efficacy | stop H1: {low} |", "|---|---|---|---|---|---|---|---|"]
    s0, s1 = gsq["stop_null"], gsq["stop_alternative"]
    for k, n in enumerate(gsq["n_per_arm_at_looks"]):
        b = fut[k] if fut else -gsq["boundaries_z"][k]
        out.append(f"| {k + 1} | {n} | {gsq['boundaries_z'][k]:.3f} | {b:.3f} | {s0['efficacy'][k]:.4f} | "
                   f"{s0['futility_or_harm'][k]:.4f} | {s1['efficacy'][k]:.4f} | {s1['futility_or_harm'][k]:.4f} |")
    return out + [""]


def protocol_markdown(doc: dict[str, Any]) -> str:
    """A protocol-ready sample-size paragraph and tables in Markdown, from a design result's document.

    Parameters
    ----------
    doc : dict
        ``DesignResult.to_dict()`` (n in subjects; power, assurance dimensionless).

    Returns
    -------
    str
        Markdown: the sample-size statement, every assumption with its source, n enrolled and
        completing, total N, power and assurance with their Monte Carlo errors, notes.
    """
    n_e, n_c = doc.get("n_per_arm_enrolled"), doc.get("n_per_arm_completing")
    groups = doc.get("groups", 2)
    per = "per sequence" if doc.get("design") == "crossover" else "per arm" if groups == 2 else "subjects"
    resp = doc.get("responder")
    exact = "the exact binomial power" if resp else "the exact noncentral t"
    how = "by simulation" if str(doc.get("n_method", "")).startswith("simulated") else f"from {exact}"
    test = doc.get("test_text") or f"two-sided test at alpha = {doc['alpha']:g}"
    lines = ["## Sample size", "",
             f"Design: {title(doc)}.", "",
             (f"With {n_c} completing {per} ({n_e} enrolled {per} allowing for {doc.get('dropout', 0):.0%} dropout; "
              f"total N = {doc.get('total_n_enrolled')} enrolled, {doc.get('total_n_completing')} completing) the "
              f"{test} has power {_p(doc.get('power'), doc.get('power_mc_se'))} "
              f"(simulated; {_p(doc.get('power_analytic'))} from {exact}) to show a "
              f"{doc.get('benefit', '')} in {doc['endpoint']}; n found {how} for a target power of "
              f"{doc['target_power']:g}." if n_e else
              f"The target power {doc['target_power']:g} is not reached within the n range studied."), ""]
    if resp:
        more = "more" if resp.get("more_is_benefit") else "fewer"
        lines += [f"Responder endpoint: a subject responds when {doc['endpoint']} is {resp['side']} {resp['cut']:g}; "
                  f"expected response probabilities {resp['p_control']:.3f} (control) and {resp['p_treated']:.3f} "
                  f"(treated; {resp['method']}); success is {more} responders on treatment, significant by the "
                  "z test of two proportions with continuity correction. The normal approximation with continuity "
                  f"correction (Fleiss, Tytun & Ury 1980) gives {resp.get('n_per_arm_fleiss') or '-'} completing "
                  f"{per}.", ""]
    gsq = doc.get("group_sequential")
    if gsq:
        lines += [f"Group-sequential: {gsq['looks']} equally spaced analyses with Lan-DeMets {gsq['spending']} "
                  f"alpha spending (|Z| boundaries {', '.join(f'{c:.3f}' for c in gsq['boundaries_z'])}); at most "
                  f"{gsq['n_per_arm_max_enrolled']} enrolled {per} ({gsq['n_per_arm_max_completing']} completing, "
                  f"inflation factor {gsq['inflation']:.3f}); expected completing n {per} "
                  f"{gsq['expected_n_per_arm_null']:.1f} under no effect and "
                  f"{gsq['expected_n_per_arm_alternative']:.1f} under the stated effect.", ""]
        lines += sequential_markdown(gsq, per)
    if doc.get("power_conditional") is not None:
        cond = _p(doc["power_conditional"], doc.get("power_conditional_mc_se"))
        lines += [f"Power at the stated typical values: {cond}; the power above is the expected power over "
                  "the prior of the typical subject.", ""]
    if doc.get("target_assurance") is not None:
        lines += [f"Assurance (probability of a significant benefit averaged over the design prior) at that n: "
                  f"{_p(doc.get('assurance'), doc.get('assurance_mc_se'))}; for a target assurance of "
                  f"{doc['target_assurance']:g}: {doc.get('n_per_arm_assurance') or '-'} enrolled {per} "
                  f"({doc.get('n_per_arm_assurance_analysed') or '-'} completing), assurance there "
                  f"{_p(doc.get('assurance_at_n_assurance'), doc.get('assurance_at_n_assurance_mc_se'))}.", ""]
    if doc.get("bayesian_success") is not None:
        lines += [f"Bayesian success at that n: {_p(doc['bayesian_success'], doc.get('bayesian_success_mc_se'))}.", ""]
    bayes = doc.get("bayesian_sample_size")
    if bayes:
        lines += ["### Bayesian sample size", ""]
        for sentence in bayes_sentences(bayes):
            lines += [sentence, ""]
    lines += ["| assumption | value | source |", "|---|---|---|"]
    lines += [f"| {a['what']} | {a['value']} | {a['source']} |" for a in doc.get("assumptions") or []]
    lines += ["", f"Simulation: {doc['trials_per_point']} trials per design point, seed {doc.get('seed')}, "
                  f"{doc['path']} path."]
    lines += [f"- note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines) + "\n"
