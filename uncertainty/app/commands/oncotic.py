"""`fluidshift oncotic`: colloid osmotic pressure from a protein concentration."""

from __future__ import annotations

import click

from uncertainty.app.commands.common import emit_json, handle_errors
from uncertainty.core.errors import InputError
from uncertainty.core.units import to_canonical
from uncertainty.physiology import oncotic

RELATIONS = {
    "total": "Landis & Pappenheimer 1963 total-protein polynomial",
    "albumin": "Landis & Pappenheimer 1963 albumin polynomial",
}


@click.command("oncotic")
@click.argument("value")
@click.argument("unit", required=False, default=None)
@click.option("--protein", type=click.Choice(list(RELATIONS)), default="total", show_default=True,
              help="Which relation: total plasma protein or albumin alone.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document and nothing else.")
@handle_errors
def command(value: str, unit: str | None, protein: str, as_json: bool) -> None:
    """Colloid osmotic (oncotic) pressure pi in mmHg from a protein concentration (g/dL default).

    \b
    Examples:
      fluidshift oncotic 7 g/dL
      fluidshift oncotic 70 g/L --json
      fluidshift oncotic 4 g/dL --protein albumin
    """

    c = to_canonical("Cp", value if unit is None else f"{value} {unit}")
    if c < 0:
        raise InputError("a protein concentration cannot be negative", key="concentration", value=c)
    func = oncotic.pi_total_protein if protein == "total" else oncotic.pi_albumin
    pi = float(func(c))
    if as_json:
        emit_json({"pi": pi, "concentration": c, "protein": protein, "relation": RELATIONS[protein],
                   "units": {"pi": "mmHg", "concentration": "g/dL"}})
        return
    click.echo(f"pi = {pi:.2f} mmHg  ({protein} protein {c:.3g} g/dL; {RELATIONS[protein]})")
