"""The plain-text table of a scenarios result (``fluidshift run`` summary and the API's ``table()``)."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.scenarios.rows import HEADLINE, describe, rows


def _f(x: Any) -> str:
    return "nan" if x is None or x != x else f"{x:.4g}"


def _p(x: Any) -> str:
    return "nan" if x is None or x != x else f"{x:.3f}"


def table(doc: dict[str, Any]) -> str:
    """Plain-text table: per scenario, the paired change of the headline outputs (Jv and, with a tissue
    mass, mL/h and L/day; net pressure) for each source and subject.

    Parameters
    ----------
    doc : dict
        ``ScenariosResult.to_dict()`` (changes in each output's canonical unit, printed beside them).

    Returns
    -------
    str
        One block per scenario, then the settings and notes, one per line.
    """
    lines: list[str] = []
    head = (f"{'source':<10}{'who':<18}{'output':<14}{'median change':>14}{'95% interval':>26}"
            f"{'P(<0)':>8}{'P(>0)':>8}  unit")
    for sc in doc.get("scenarios") or []:
        lines.append(f"scenario {sc['name']}: {describe(sc)}")
        lines.append(head)
        lines.append("-" * len(head))
        for r in rows({**doc, "scenarios": [sc]}, HEADLINE):
            ci = f"[{_f(r['ci95_low'])}, {_f(r['ci95_high'])}]"
            lines.append(f"{r['source']:<10}{r['who']:<18}{r['output']:<14}{_f(r['median']):>14}{ci:>26}"
                         f"{_p(r['p_decrease']):>8}{_p(r['p_increase']):>8}  {r['unit']}")
        lines.append("")
    lines.append(f"paired changes (scenario minus baseline on the same draw); {doc.get('samples')} prior draws per "
                 f"layer, seed {doc.get('seed')}; every output in scenarios.csv")
    lines += [f"note: {n}" for n in doc.get("notes") or []]
    return "\n".join(lines)
