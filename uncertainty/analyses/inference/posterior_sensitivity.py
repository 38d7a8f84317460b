"""Sensitivity of the posterior: which quantities' uncertainty still drives Jv after the observations.

The first-order given-data index Var(E[Jv | X_i]) / Var(Jv) (``uncertainty.analyses.given_data``) is
computed on the posterior draws and, by the same estimator, on prior draws, so that the two columns
compare: a quantity whose index stays high after the data is where a further measurement would narrow
Jv most. The standard errors are bootstrap errors; on posterior draws they are multiplied by
sqrt(n / ESS) of Jv (the draws of a Markov chain are autocorrelated; the bootstrap alone would treat
them as independent). Under correlation between the quantities (a posterior that identifies only a
combination of them) each index also carries what the quantity explains through its partners, so
the indices need not sum to 1.

The block lives in the inference document under ``posterior_sensitivity``; :func:`text` and
:func:`html` render it for the terminal and the report.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from uncertainty.analyses.given_data import given_data_indices
from uncertainty.core.html import escape, table

METHOD = ("first-order given-data index Var(E[Jv | X]) / Var(Jv) (equal-count bins, ANOVA bias correction), "
          "bootstrap standard error")
NOTE_CORRELATED = ("with correlated quantities each index also holds what a quantity explains through its "
                   "partners, so the indices need not sum to 1")


def _entry(post: Mapping[str, np.ndarray], jv: np.ndarray, prior: Mapping[str, np.ndarray] | None,
           prior_jv: np.ndarray | None, se_factor: float, seed: int) -> dict[str, Any]:
    """Posterior (and prior) indices of one Jv, ranked by the posterior index."""
    entry: dict[str, Any] = {"posterior": given_data_indices(post, jv, se_factor=se_factor, seed=seed),
                             "draws": int(np.size(jv)), "se_factor": float(se_factor)}
    if prior is not None and prior_jv is not None:
        entry["prior"] = given_data_indices({k: prior[k] for k in post if k in prior}, prior_jv, seed=seed)
    entry["ranking"] = list(entry["posterior"])
    return entry


def posterior_sensitivity(post: Mapping[str, np.ndarray], jv: np.ndarray, *, level: str,
                          prior: Mapping[str, np.ndarray] | None = None, prior_jv: np.ndarray | None = None,
                          ess: float | None = None, new_post: Mapping[str, np.ndarray] | None = None,
                          new_jv: np.ndarray | None = None, new_prior: Mapping[str, np.ndarray] | None = None,
                          new_prior_jv: np.ndarray | None = None, seed: int = 0) -> dict[str, Any]:
    """Given-data first-order indices of Jv on posterior draws, beside the same indices on prior draws.

    Parameters
    ----------
    post : mapping of str to ndarray
        Posterior draws of each updated quantity (canonical units), chains stacked, paired with ``jv``.
    jv : ndarray
        Posterior draws of Jv at the reported level (mL/min per the study's basis).
    level : str
        What ``jv`` is ("typical subject", "the study's individual").
    prior, prior_jv : mapping, ndarray, optional
        Independent prior draws of the same quantities and the Jv they give (same units).
    ess : float, optional
        Bulk effective sample size of ``jv`` (draws); the posterior standard errors are multiplied by
        sqrt(n / ESS) when it is below the number of draws n.
    new_post, new_jv : mapping, ndarray, optional
        A new subject's values per posterior draw and its Jv.
    new_prior, new_prior_jv : mapping, ndarray, optional
        A new subject's prior draws and its Jv.
    seed : int
        Seed of the bootstraps.

    Returns
    -------
    dict
        ``{method, Jv: {level, posterior, prior, ranking, draws, se_factor}, new_subject: {...}, notes}``;
        ``posterior`` and ``prior`` map each quantity to ``{S1, se}`` (dimensionless), largest first.
    """
    n = int(np.size(jv))
    factor = math.sqrt(n / ess) if ess is not None and np.isfinite(ess) and 0 < ess < n else 1.0
    doc: dict[str, Any] = {"method": METHOD, "Jv": {"level": level, **_entry(post, jv, prior, prior_jv,
                                                                              factor, seed)}}
    if new_post is not None and new_jv is not None:
        keys = [k for k in post if k in new_post]
        doc["new_subject"] = _entry({k: new_post[k] for k in keys}, new_jv, new_prior, new_prior_jv, factor, seed)
    doc["notes"] = [NOTE_CORRELATED]
    total = sum(v["S1"] for v in doc["Jv"]["posterior"].values() if np.isfinite(v["S1"]))
    if total < 0.5:  # less than half of Var(Jv) explained one quantity at a time
        doc["notes"].append(f"the posterior indices sum to {total:.2f}: most of what remains of Var(Jv) lies in "
                            "combinations of quantities (interactions, or the directions the data left open), "
                            "not in any one quantity alone")
    if any(v["S1"] < 0 for e in (doc["Jv"], doc.get("new_subject") or {}) for k in ("posterior", "prior")
           for v in (e.get(k) or {}).values()):
        doc["notes"].append("an index estimated below zero is Monte Carlo error around zero (a share of the "
                            "variance cannot be negative)")
    if factor > 1.0:
        doc["notes"].append(f"posterior standard errors multiplied by sqrt(n / ESS) = {factor:.2f} for the "
                            "autocorrelation of the chains")
    return doc


def _num(x: Any) -> str:
    return f"{x:.3f}" if isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x) else "-"


def _cell(ix: Mapping[str, Any] | None) -> str:
    if not isinstance(ix, Mapping):
        return "-"
    return f"{_num(ix.get('S1'))} ({_num(ix.get('se'))})"


def _rows(entry: Mapping[str, Any]) -> list[tuple[str, str, str]]:
    post, prior = entry.get("posterior") or {}, entry.get("prior") or {}
    return [(q, _cell(prior.get(q)), _cell(post.get(q))) for q in entry.get("ranking") or list(post)]


def text(doc: Mapping[str, Any]) -> str:
    """The terminal table: per quantity, its index before and after the data, ranked by the latter.

    Parameters
    ----------
    doc : mapping
        The inference document (its ``posterior_sensitivity`` block; indices dimensionless).

    Returns
    -------
    str
        A few lines, or "" without the block.
    """
    block = doc.get("posterior_sensitivity")
    if not isinstance(block, Mapping) or not isinstance(block.get("Jv"), Mapping):
        return ""
    main, new = block["Jv"], block.get("new_subject")
    new_rows = {q: (a, b) for q, a, b in _rows(new)} if isinstance(new, Mapping) else {}
    lines = [f"what still drives Jv after the data ({main.get('level', '')}): first-order index, share of "
             "Var(Jv), standard error in brackets"]
    head = f"{'quantity':<16}{'prior':>16}{'posterior':>16}"
    if new_rows:
        head += f"{'new subj. prior':>18}{'new subj. post.':>18}"
    lines += [head, "-" * len(head)]
    for q, a, b in _rows(main):
        row = f"{q:<16}{a:>16}{b:>16}"
        if new_rows:
            row += "".join(f"{c:>18}" for c in new_rows.get(q, ("-", "-")))
        lines.append(row)
    lines += [f"  ({n})" for n in block.get("notes") or [] if isinstance(n, str)]
    return "\n".join(lines)


def html(doc: Mapping[str, Any]) -> str:
    """The report's part: the same table with a sentence on how to read it.

    Parameters
    ----------
    doc : mapping
        The stored inference document (indices dimensionless).

    Returns
    -------
    str
        A heading, a paragraph and a table, or "" without the block.
    """
    block = doc.get("posterior_sensitivity")
    if not isinstance(block, Mapping) or not isinstance(block.get("Jv"), Mapping):
        return ""
    main, new = block["Jv"], block.get("new_subject")
    new_rows = {q: (a, b) for q, a, b in _rows(new)} if isinstance(new, Mapping) else {}
    head = ["quantity", "prior index", "posterior index"] + (["new subject, prior", "new subject, posterior"]
                                                             if new_rows else [])
    rows = [[q, a, b, *(new_rows.get(q, ("-", "-")) if new_rows else ())] for q, a, b in _rows(main)]
    notes = [n for n in block.get("notes") or [] if isinstance(n, str)]
    return ("<h3>What still drives Jv after the data</h3><p>First-order index of each quantity (the share of "
            f"the variance of Jv, {escape(str(main.get('level', '')))}, it explains alone), on prior draws and on "
            "posterior draws, standard error in brackets: a quantity whose index stays high after the data is "
            "the one a further measurement would narrow Jv most. " + escape("; ".join(notes)) + ".</p>"
            + table(head, rows))
