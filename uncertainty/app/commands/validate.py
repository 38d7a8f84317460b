"""`fluidshift validate`: the shipped table of published measurements beside the model's predictions."""

from __future__ import annotations

import click

from uncertainty.analyses.validation import markdown, table, validate
from uncertainty.app.commands.common import emit_json, handle_errors
from uncertainty.core.errors import QualityGateError
from uncertainty.core.serialise import to_json


@click.command("validate", short_help="Published measurements beside the model's predictions.")
@click.option("--tissue", default=None, help="Only this tissue's rows (a prior set name).")
@click.option("--form", "form", default=None,
              help="Only the rows of this model form, e.g. whole_body (the time courses after infusions and bleeds).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout and nothing else.")
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for validation.json, validation.csv and validation.md.")
@click.option("--sources", is_flag=True, help="Print each row's source and known-gap reason beneath it.")
@handle_errors
def command(tissue: str | None, form: str | None, as_json: bool, out: str | None, sources: bool) -> None:
    """Each published measurement of the validation table (quantity, tissue, conditions, band, source)
    beside the model's median and 95 % interval for the typical subject, with a verdict: inside, outside
    or known gap. Exit status 3 when a row not marked as a known gap lies outside its band.

    Example: fluidshift validate --form whole_body --sources"""

    result = validate(tissue, form=form)
    doc = result.to_dict()
    if out:
        import csv
        import os

        os.makedirs(out, exist_ok=True)
        with open(os.path.join(out, "validation.json"), "w", encoding="utf-8") as fh:
            fh.write(to_json(doc) + "\n")
        with open(os.path.join(out, "validation.md"), "w", encoding="utf-8") as fh:
            fh.write(markdown(result))
        fields = ["id", "tissue", "quantity", "conditions", "model", "kind", "low", "high", "unit", "median",
                  "ci95_low", "ci95_high", "verdict", "source", "known_gap"]
        with open(os.path.join(out, "validation.csv"), "w", encoding="utf-8", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=fields)
            w.writeheader()
            for row in doc["rows"]:
                w.writerow({**{k: row[k] for k in fields if k in row}, "conditions": ";".join(row["conditions"]),
                            "ci95_low": row["ci95"][0], "ci95_high": row["ci95"][1]})
    if as_json:
        emit_json(doc)
    else:
        click.echo(table(result, sources=sources))
        if out:
            click.echo(f"validation table written to {out}")
    outside = [r["id"] for r in doc["rows"] if r["verdict"] == "outside"]
    if outside:
        raise QualityGateError(f"{len(outside)} row(s) outside their band and not marked as known gaps: "
                               + ", ".join(outside))
