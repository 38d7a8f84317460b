"""The small study documents of the whole-body tests as TOML text (shared test helper)."""

from __future__ import annotations

import json
from typing import Any


def toml_text(doc: dict[str, Any]) -> str:
    """TOML for a document of tables of scalars, lists and inline tables, and lists of such tables.

    Parameters
    ----------
    doc : dict
        Section name -> a table (dict) or a list of tables (array of tables).

    Returns
    -------
    str
        The document as TOML (keys with spaces quoted).
    """
    def key(k: str) -> str:
        return json.dumps(k) if " " in k else k

    def val(x: Any) -> str:
        if isinstance(x, dict):
            return "{ " + ", ".join(f"{key(k)} = {val(v)}" for k, v in x.items()) + " }"
        return json.dumps(x) if isinstance(x, str | list) else repr(x)

    lines = []
    for name, table in doc.items():
        for row in table if isinstance(table, list) else [table]:
            lines.append(f"[[{name}]]" if isinstance(table, list) else f"[{name}]")
            lines += [f"{key(k)} = {val(v)}" for k, v in row.items()]
    return "\n".join(lines) + "\n"
