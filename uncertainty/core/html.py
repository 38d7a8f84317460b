"""HTML pieces the report's sections share: escaped text, tables, key/value tables."""

from __future__ import annotations

import html
from typing import Any

from uncertainty.core.formatting import cell


def escape(x: Any) -> str:
    """``str(x)`` with HTML special characters (quotes too) escaped.

    Parameters
    ----------
    x : Any
        Any value.

    Returns
    -------
    str
        Text safe inside an element or an attribute.
    """
    return html.escape(str(x), quote=True)


def table(head: list[str], rows: list[list[Any]], num_cols: set[int] | None = None,
          cls: dict[int, str] | None = None) -> str:
    """A scrollable HTML table.

    Parameters
    ----------
    head : list of str
        Column headings.
    rows : list of list
        Cells (already formatted; escaped here).
    num_cols : set of int, optional
        Columns aligned as numbers (class "num").
    cls : dict of int to str, optional
        Other columns' CSS class.

    Returns
    -------
    str
        The table inside a ``div.table-wrap``.
    """
    num_cols = num_cols or set()
    cls = cls or {}
    out = ['<div class="table-wrap"><table><thead><tr>']
    out += [f"<th>{escape(h)}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>")
        for i, c in enumerate(row):
            css = "num" if i in num_cols else cls.get(i, "")
            out.append(f'<td class="{css}">' if css else "<td>")
            out.append(escape(c))
            out.append("</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def kv_table(d: dict[str, Any]) -> str:
    """A two-column key/value table of a mapping (lists longer than four left out).

    Parameters
    ----------
    d : dict
        The mapping (values in any unit).

    Returns
    -------
    str
        The table, or "" when nothing is left to show.
    """
    rows = [[k, cell(v)] for k, v in d.items() if not isinstance(v, list) or len(v) <= 4]
    return table(["key", "value"], rows) if rows else ""
