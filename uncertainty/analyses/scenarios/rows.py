"""The rows of a scenarios result's document, shared by its table, CSV, report section and figure."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

#: outputs the terminal table and the report show (the CSV and JSON hold every output)
HEADLINE = ("Jv", "Jv_mL_per_h", "Jv_L_per_day", "net_pressure")


def rows(doc: dict[str, Any], outputs: tuple[str, ...] | None = None) -> Iterator[dict[str, Any]]:
    """One row per scenario, source (prior / posterior), who (typical, individual, subject id) and output.

    Parameters
    ----------
    doc : dict
        ``ScenariosResult.to_dict()`` (changes in each output's canonical unit).
    outputs : tuple of str, optional
        Only these outputs (default every output the document holds).

    Yields
    ------
    dict
        ``scenario``, ``source``, ``who``, ``output``, ``unit`` and the change summary (``median``,
        ``ci95_low``, ``ci95_high``, ``p_decrease``, ``p_increase``, ``base_median``, ``scenario_median``,
        ``n``).
    """
    units = doc.get("units") or {}
    for sc in doc.get("scenarios") or []:
        blocks: list[tuple[str, str, dict[str, Any]]] = []
        for layer, b in (sc.get("prior") or {}).items():
            blocks.append(("prior", layer, b))
        post = sc.get("posterior") or {}
        if post.get("typical"):
            blocks.append(("posterior", "typical", post["typical"]))
        for sid, b in (post.get("subjects") or {}).items():
            blocks.append(("posterior", f"subject {sid}", b))
        for source, who, block in blocks:
            for name, s in block.items():
                if outputs is not None and name not in outputs:
                    continue
                ci = s.get("ci95") or [None, None]
                yield {"scenario": sc.get("name"), "source": source, "who": who, "output": name,
                       "unit": units.get(name, ""), "median": s.get("median"), "ci95_low": ci[0],
                       "ci95_high": ci[1], "p_decrease": s.get("p_decrease"), "p_increase": s.get("p_increase"),
                       "base_median": s.get("base_median"), "scenario_median": s.get("scenario_median"),
                       "n": s.get("n")}


def describe(sc: dict[str, Any]) -> str:
    """A scenario's changes in words: ``Cp +1 g/dL, sigma x0.9, + sepsis, - posture``.

    Parameters
    ----------
    sc : dict
        One entry of ``doc["scenarios"]``.

    Returns
    -------
    str
        The changes as written, then the conditions added (+) and removed (-).
    """
    parts = [f"{k} {v}" for k, v in (sc.get("changes") or {}).items()]
    parts += [f"+ {c}" for c in sc.get("conditions_add") or []]
    parts += [f"- {c}" for c in sc.get("conditions_remove") or []]
    return ", ".join(parts)
